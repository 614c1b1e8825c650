"""What one run of a case uses: liquid agent, N2O, absorbent, money and CO2-equivalent — and
the department's prices, one per agent.

The CO2-equivalents use circlesim's sourced GWP values (:mod:`circlesim.outcomes.emissions`) on
both horizons, 20 and 100 years, and count everything delivered as emitted, as
:func:`circlesim.outcomes.summary.summarise` does.
"""

from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

import numpy as np

from circlesim.base.units import vapour_l_stpd_to_grams
from circlesim.base.validation import InputError, check_keys
from circlesim.domain.costs import Prices, cost_of
from circlesim.engine.result import Result
from circlesim.outcomes.emissions import co2_equivalent_kg, gwp
from circlesim.outcomes.summary import minutes_below
from circlesim.properties import AGENTS, NITROUS_OXIDE

__all__ = ["USAGE_FIELDS", "DepartmentPrices", "Usage", "load_prices", "usage_of"]


@dataclass(frozen=True)
class Usage:
    """What a run used and how low FIO2 fell.

    Attributes
    ----------
    agent_ml : float, mL of liquid agent delivered
    agent_g : float, g
    n2o_l : float, L of N2O at the flowmeters' conditions
    absorbent_g : float, g of absorbent used up
    absorbent_used_percent : float, % of the canister at the end of the case
    cost : float or None, currency units (None without prices)
    co2e_gwp20_kg, co2e_gwp100_kg : float or None, kg CO2-equivalent of agent and N2O
        (None: no published GWP for the agent in circlesim)
    lowest_fio2 : float, fraction
    minutes_below_fio2 : float, min below the rule's FIO2 threshold
    bag_empty : bool
        Whether the reservoir bag ran dry (room air drawn in).
    """

    agent_ml: float
    agent_g: float
    n2o_l: float
    absorbent_g: float
    absorbent_used_percent: float
    cost: float | None
    co2e_gwp20_kg: float | None
    co2e_gwp100_kg: float | None
    lowest_fio2: float
    minutes_below_fio2: float
    bag_empty: bool


#: The additive quantities of :class:`Usage` (summed over cases).
USAGE_FIELDS = ("agent_ml", "agent_g", "n2o_l", "absorbent_g", "cost", "co2e_gwp20_kg",
                "co2e_gwp100_kg")


def usage_of(result: Result, prices: Prices | None, fio2_threshold: float) -> Usage:
    """The :class:`Usage` of ``result`` at ``prices``.

    Parameters
    ----------
    result : Result
    prices : Prices or None
    fio2_threshold : float, fraction, 0.21–1
    """
    cum = result.cumulative
    ia, i_n2o = result.gas_index("agent"), result.gas_index("nitrous_oxide")
    agent_g = float(result.grams(cum["delivered"][-1, ia]))
    n2o_stpd = float(cum["delivered"][-1, i_n2o])
    n2o_g = float(vapour_l_stpd_to_grams(n2o_stpd, NITROUS_OXIDE.molar_mass_g_mol))
    n2o_l = n2o_stpd / result.k_circuit
    used = result.absorbent_used_fraction
    absorbent_g = float((used[-1] - used[0]) * result.absorber.granule_mass_g)
    agent_ml = float(result.agent_delivered_ml[-1])
    co2e = {}
    for horizon in (20, 100):
        a = co2_equivalent_kg(agent_g, gwp(result.agent, horizon))
        n = co2_equivalent_kg(n2o_g, gwp("nitrous_oxide", horizon))
        co2e[horizon] = None if a is None else a + (n or 0.0)
    cost = cost_of(prices, agent_ml=agent_ml, n2o_l=n2o_l, absorbent_g=absorbent_g).total
    fio2 = result.inspired[:, result.gas_index("oxygen")]
    return Usage(agent_ml=agent_ml, agent_g=agent_g, n2o_l=n2o_l, absorbent_g=absorbent_g,
                 absorbent_used_percent=float(100.0 * used[-1]), cost=cost,
                 co2e_gwp20_kg=co2e[20], co2e_gwp100_kg=co2e[100],
                 lowest_fio2=float(np.min(fio2)),
                 minutes_below_fio2=minutes_below(result.time_min, fio2, fio2_threshold),
                 bag_empty=any(a.key == "bag_empty" for a in result.alerts))


_PRICE_KEYS = ("currency", "note", "n2o_price_per_1000_l", "absorbent_price_per_kg")
_AGENT_KEYS = ("agent_price_per_bottle", "bottle_ml")


@dataclass(frozen=True)
class DepartmentPrices:
    """A department's prices: one bottle price per agent, shared N2O and absorbent prices.

    Attributes
    ----------
    agents : dict of str to (float, float)
        Agent name -> (price per bottle, currency units; bottle volume, mL 1–5000).
    n2o_price_per_1000_l : float or None, currency units per 1000 L
    absorbent_price_per_kg : float or None, currency units per kg
    currency, note : str
    """

    agents: dict[str, tuple[float, float]] = field(default_factory=dict)
    n2o_price_per_1000_l: float | None = None
    absorbent_price_per_kg: float | None = None
    currency: str = ""
    note: str = ""

    def for_agent(self, agent: str) -> Prices:
        """:class:`~circlesim.domain.costs.Prices` for a case with ``agent`` (no agent price
        if the department gave none for it)."""
        bottle = self.agents.get(agent)
        return Prices(agent_price_per_bottle=None if bottle is None else bottle[0],
                      bottle_ml=None if bottle is None else bottle[1],
                      n2o_price_per_1000_l=self.n2o_price_per_1000_l,
                      absorbent_price_per_kg=self.absorbent_price_per_kg,
                      currency=self.currency, note=self.note)


def load_prices(path: str | os.PathLike) -> DepartmentPrices:
    """Read department prices from TOML::

        currency = "EUR"
        note = "invented example prices"
        n2o_price_per_1000_l = 10.0
        absorbent_price_per_kg = 8.0
        [sevoflurane]
        agent_price_per_bottle = 120.0
        bottle_ml = 250

    Raises
    ------
    InputError
        Naming the file, the key and the value.
    """
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"prices file {path} does not exist.") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"prices file {path} cannot be read: {exc}.") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"prices file {path} is not valid TOML: {exc}.") from None
    return prices_from_dict(data, str(path))


def prices_from_dict(data: dict[str, Any], where: str = "prices") -> DepartmentPrices:
    """Build :class:`DepartmentPrices` from plain data (layout of :func:`load_prices`)."""
    check_keys(where, data, (*_PRICE_KEYS, *AGENTS), what="key")
    shared = {k: data[k] for k in _PRICE_KEYS if k in data}
    agents = {}
    for name in AGENTS:
        if name not in data:
            continue
        table = data[name]
        if not isinstance(table, dict):
            raise InputError(f"{where}: [{name}] must be a table with agent_price_per_bottle "
                             f"and bottle_ml; got {table!r}.")
        check_keys(f"{where}: [{name}]", table, _AGENT_KEYS, what="key")
        try:
            checked = Prices(agent_price_per_bottle=table.get("agent_price_per_bottle"),
                             bottle_ml=table.get("bottle_ml"))
        except InputError as exc:
            raise InputError(f"{where}: [{name}]: {exc}") from None
        if checked.agent_price_per_bottle is not None:
            agents[name] = (checked.agent_price_per_bottle, checked.bottle_ml)
    try:
        Prices(**shared)  # checks the shared values and their ranges
    except (InputError, TypeError) as exc:
        raise InputError(f"{where}: {exc}") from None
    known = {f.name for f in fields(DepartmentPrices)}
    return DepartmentPrices(agents=agents, **{k: v for k, v in shared.items() if k in known})
