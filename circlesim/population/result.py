"""Results of a population run: the curves and outcomes kept per patient, and their spread.

:data:`SERIES` names every curve a population run can keep for each patient and :data:`OUTCOMES`
the outcome columns computed per patient. A :class:`PopulationResult` holds one plan's curves on
one time grid and its table of outcomes, and gives the median and 5–95 % band of every curve,
the probability of reaching the end-tidal target by a given time, the probability that FIO2 falls
below a threshold, and the distributions of agent used and CO2-equivalent emissions.
:func:`probability_table`, :func:`outcomes_frame` and :func:`save_outcomes` tabulate several
plans side by side. The runs themselves are made by :mod:`circlesim.population.run`.
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from circlesim.base.files import write_text_atomic
from circlesim.base.validation import Interval, check_number
from circlesim.population.virtual_patients import VirtualPatients
from circlesim.scenario import Scenario

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["DEFAULT_SERIES", "OUTCOMES", "SERIES", "PopulationResult", "Series",
           "outcomes_frame", "probability_table", "save_outcomes"]


@dataclass(frozen=True)
class Series:
    """A curve kept for every patient.

    Attributes
    ----------
    key : str
    label : str
        Name for display.
    unit : str
    values : callable
        ``values(result)`` gives the curve from a Result (shape (T,)) or a BatchResult
        (shape (B, T)).
    """

    key: str
    label: str
    unit: str
    values: Callable[[Any], np.ndarray]


def _per_mac(r, values: np.ndarray) -> np.ndarray:
    return values / np.asarray(r.mac_percent, dtype=float)[..., None]


def _fa_fi(r, gas: str) -> np.ndarray:
    fi = r.inspired_percent(gas)
    fa = r.end_tidal_percent(gas)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(fi > 1e-6, fa / fi, np.nan)


_SERIES_LIST = (
    Series("end_tidal_agent_percent", "End-tidal agent", "vol%",
           lambda r: r.end_tidal_percent("agent")),
    Series("end_tidal_agent_mac", "End-tidal agent", "× age-adjusted MAC",
           lambda r: _per_mac(r, r.end_tidal_percent("agent"))),
    Series("end_tidal_total_mac", "End-tidal agent + N2O", "× age-adjusted MAC",
           lambda r: _per_mac(r, r.end_tidal_percent("agent")) + r.end_tidal_percent(
               "nitrous_oxide") / np.asarray(r.n2o_mac_percent, dtype=float)[..., None]),
    Series("inspired_agent_percent", "Inspired agent", "vol%",
           lambda r: r.inspired_percent("agent")),
    Series("brain_agent_mac", "Brain (vessel-rich group) agent", "× age-adjusted MAC",
           lambda r: _per_mac(r, r.brain_percent("agent"))),
    Series("fio2", "Inspired O2 (FIO2)", "fraction",
           lambda r: r.inspired[..., r.gas_index("oxygen")]),
    Series("end_tidal_o2", "End-tidal O2", "fraction",
           lambda r: r.end_tidal[..., r.gas_index("oxygen")]),
    Series("inspired_n2o_percent", "Inspired N2O", "vol%",
           lambda r: r.inspired_percent("nitrous_oxide")),
    Series("inspired_n2_percent", "Inspired N2", "vol%",
           lambda r: r.inspired_percent("nitrogen")),
    Series("inspired_co2_percent", "Inspired CO2", "vol%",
           lambda r: r.inspired_percent("carbon_dioxide")),
    Series("bag_volume_l", "Reservoir bag volume", "L", lambda r: r.bag_volume_l),
    Series("vented_l_min", "Vented gas", "L/min", lambda r: r.vented_l_min),
    Series("agent_delivered_ml", "Liquid agent delivered", "mL",
           lambda r: r.agent_delivered_ml),
    Series("agent_uptake_ml", "Agent taken up by the patient", "mL (liquid)",
           lambda r: r.agent_uptake_ml),
    Series("fa_fi_agent", "FA/FI of the agent", "ratio", lambda r: _fa_fi(r, "agent")),
    Series("fa_fi_n2o", "FA/FI of N2O", "ratio", lambda r: _fa_fi(r, "nitrous_oxide")),
)
#: Every curve a population run can keep, by key.
SERIES: dict[str, Series] = {s.key: s for s in _SERIES_LIST}
#: Curves kept unless asked otherwise (FA/FI only means something at constant inspired gas).
DEFAULT_SERIES = tuple(k for k in SERIES if not k.startswith("fa_fi"))

#: Outcome columns of :attr:`PopulationResult.outcomes`: key -> label with unit.
OUTCOMES = {
    "time_to_target_min": "time to end-tidal target, min",
    "end_tidal_mac_at_end": "end-tidal depth at the end, MAC",
    "lowest_fio2": "lowest FIO2",
    "minutes_below_fio2_threshold": "time with FIO2 below threshold, min",
    "agent_delivered_ml": "liquid agent delivered, mL",
    "agent_delivered_g": "agent delivered, g",
    "n2o_delivered_g": "N2O delivered, g",
    "co2e_agent_kg": "CO2-eq of agent, kg",
    "co2e_n2o_kg": "CO2-eq of N2O, kg",
    "co2e_kg": "CO2-eq total, kg",
    "absorbent_used_percent": "absorbent used, % of canister",
}


@dataclass(frozen=True, eq=False)
class PopulationResult:
    """One plan run over a population.

    Attributes
    ----------
    label : str
        Name of the plan in tables and figures.
    scenario : Scenario
        Plan, breathing system, vaporizer and report settings (its patient is not used).
    patients : VirtualPatients
    time_min : ndarray, shape (T,)
    curves : dict of str to ndarray, shape (B, T)
        Every patient's curves, keyed as :data:`SERIES`.
    outcomes : pandas.DataFrame
        One row per patient, columns as :data:`OUTCOMES` (NaN: never reached / no GWP).
    gwp_horizon_years : int
    target_basis : {"total", "agent"}
        Whether the end-tidal target counts N2O with the agent.
    where : str
        Where the run was computed.
    """

    label: str
    scenario: Scenario
    patients: VirtualPatients
    time_min: np.ndarray
    curves: dict[str, np.ndarray]
    outcomes: pd.DataFrame
    gwp_horizon_years: int
    target_basis: str
    where: str

    def __len__(self) -> int:
        return len(self.patients)

    @property
    def agent(self) -> str:
        """The plan's volatile agent."""
        return self.scenario.vaporizer.agent

    @property
    def target_end_tidal_mac(self) -> float:
        """End-tidal target as a multiple of each patient's age-adjusted MAC."""
        return self.scenario.report.target_end_tidal_mac

    @property
    def depth_key(self) -> str:
        """Key of the curve the end-tidal target applies to (agent + N2O, or agent alone)."""
        return "end_tidal_total_mac" if self.target_basis == "total" else "end_tidal_agent_mac"

    @property
    def fio2_threshold(self) -> float:
        """Lowest acceptable FIO2 of the scenario."""
        return self.scenario.report.fio2_threshold

    def band(self, key: str, low: float = 5.0, high: float = 95.0) -> pd.DataFrame:
        """Median and ``low``–``high`` percentile band of a curve over the population.

        Returns
        -------
        pandas.DataFrame
            Columns ``time_min``, ``low``, ``median``, ``high`` (in the curve's unit).
        """
        import pandas as pd

        if key not in self.curves:
            raise KeyError(f"no curve {key!r} in this run; kept: {', '.join(self.curves)}")
        check_number("band", "low", low, Interval(0.0, 50.0, "%"))
        check_number("band", "high", high, Interval(50.0, 100.0, "%"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN times (FA/FI at FI = 0)
            q = np.nanpercentile(self.curves[key], [low, 50.0, high], axis=0)
        return pd.DataFrame({"time_min": self.time_min, "low": q[0], "median": q[1],
                             "high": q[2]})

    def target_reached_fraction(self) -> np.ndarray:
        """Share of patients whose end-tidal agent has reached the target, at each time (T,)."""
        ttt = self.outcomes["time_to_target_min"].to_numpy()
        reached = ttt[:, None] <= self.time_min[None, :]
        return reached.mean(axis=0)

    def probability_target_by(self, time_min: float) -> float:
        """Probability of reaching the end-tidal target by ``time_min`` (min)."""
        check_number("probability_target_by", "time_min", time_min,
                     Interval(0.0, float(self.time_min[-1]), "min"))
        ttt = self.outcomes["time_to_target_min"].to_numpy()
        return float(np.mean(ttt <= time_min))

    def probability_fio2_below(self, threshold: float | None = None) -> float:
        """Probability that FIO2 falls below ``threshold`` (default the scenario's) at any
        output time of the plan."""
        threshold = self.fio2_threshold if threshold is None else threshold
        check_number("probability_fio2_below", "threshold", threshold, Interval(0.0, 1.0))
        return float(np.mean(self.outcomes["lowest_fio2"].to_numpy() < threshold))

    def outcome_summary(self, low: float = 5.0, high: float = 95.0) -> pd.DataFrame:
        """Median, ``low``/``high`` percentiles and mean of every outcome (rows), skipping
        patients for whom the outcome does not exist (target never reached, no GWP)."""
        import pandas as pd

        rows = []
        for key, label in OUTCOMES.items():
            values = self.outcomes[key].to_numpy(dtype=float)
            ok = values[np.isfinite(values)]
            if ok.size:
                q = np.percentile(ok, [low, 50.0, high])
                rows.append({"outcome": label, "median": q[1], f"{low:g} %": q[0],
                             f"{high:g} %": q[2], "mean": ok.mean(), "patients": ok.size})
            else:
                rows.append({"outcome": label, "median": math.nan, f"{low:g} %": math.nan,
                             f"{high:g} %": math.nan, "mean": math.nan, "patients": 0})
        return pd.DataFrame(rows)


def probability_table(results: Sequence[PopulationResult],
                      by_min: Iterable[float] = (5.0, 10.0, 20.0, 30.0)) -> pd.DataFrame:
    """One row per plan: the probability of reaching the end-tidal target by each time in
    ``by_min`` (times past a plan's end are left empty), of FIO2 below the threshold, and the
    median (5–95 %) time to target.
    """
    import pandas as pd

    by = [float(t) for t in by_min]
    rows = []
    for r in results:
        basis = "agent + N2O" if r.target_basis == "total" else "agent"
        row: dict[str, Any] = {"plan": r.label, "agent": r.agent, "patients": len(r),
                               "target, MAC": r.target_end_tidal_mac, "target counts": basis}
        for t in by:
            row[f"P(target by {t:g} min)"] = (r.probability_target_by(t)
                                              if t <= r.time_min[-1] else None)
        ttt = r.outcomes["time_to_target_min"].to_numpy()
        reached = ttt[np.isfinite(ttt)]
        row["P(target reached)"] = reached.size / len(r)
        if reached.size:
            q = np.percentile(reached, [5.0, 50.0, 95.0])
            row["time to target, min: median"] = q[1]
            row["5 %"], row["95 %"] = q[0], q[2]
        else:
            row["time to target, min: median"] = row["5 %"] = row["95 %"] = None
        row["FIO2 threshold"] = r.fio2_threshold
        row["P(FIO2 below threshold)"] = r.probability_fio2_below()
        rows.append(row)
    return pd.DataFrame(rows)


def outcomes_frame(results: Sequence[PopulationResult]) -> pd.DataFrame:
    """Every patient's characteristics and outcomes, one row per patient and plan."""
    import pandas as pd

    frames = []
    for r in results:
        frame = pd.concat([r.patients.table(), r.outcomes], axis=1)
        frame.insert(0, "patient", np.arange(len(r)))
        frame.insert(0, "plan", r.label)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def save_outcomes(results: Sequence[PopulationResult], path: str | os.PathLike, *,
                  overwrite: bool = False):
    """Write :func:`outcomes_frame` as CSV, atomically; an existing file is kept unless
    ``overwrite``."""
    text = outcomes_frame(results).to_csv(index=False, float_format="%.6g")
    return write_text_atomic(path, text, overwrite=overwrite)
