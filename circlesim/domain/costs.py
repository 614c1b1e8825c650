"""What a plan costs, from prices the user sets.

circlesim ships no prices: they differ between countries, suppliers and years. A user (or a
scenario's ``[prices]`` table, where the shipped scenarios mark theirs as invented examples)
states the price of a bottle of liquid agent and the bottle's volume, and optionally the price
of N2O and of absorbent. Without prices the cost is simply not computed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from circlesim.base.validation import InputError, check_fields, optional_bounded

__all__ = ["CostBreakdown", "Prices", "cost_of"]

_INF = float("inf")


@dataclass(frozen=True)
class Prices:
    """User-set prices (any currency; one currency for all of them).

    Parameters
    ----------
    agent_price_per_bottle : float or None, currency units, ≥ 0
        Price of one bottle of the liquid agent.
    bottle_ml : float or None, mL, 1–5000
        Liquid in one bottle; required with ``agent_price_per_bottle``.
    n2o_price_per_1000_l : float or None, currency units per 1000 L, ≥ 0
        Price of N2O per 1000 L of gas at the flowmeters' conditions.
    absorbent_price_per_kg : float or None, currency units per kg, ≥ 0
        Price of CO2 absorbent granules.
    currency : str
        Label shown with the amounts (e.g. "EUR"); free text.
    note : str
        Where the prices come from (e.g. "invented example prices").
    """

    agent_price_per_bottle: float | None = field(
        default=None, metadata=optional_bounded(0.0, _INF, "per bottle"))
    bottle_ml: float | None = field(default=None, metadata=optional_bounded(1.0, 5000.0, "mL"))
    n2o_price_per_1000_l: float | None = field(
        default=None, metadata=optional_bounded(0.0, _INF, "per 1000 L"))
    absorbent_price_per_kg: float | None = field(
        default=None, metadata=optional_bounded(0.0, _INF, "per kg"))
    currency: str = ""
    note: str = ""

    def __post_init__(self) -> None:
        check_fields(self)
        for name in ("currency", "note"):
            if not isinstance(getattr(self, name), str):
                raise InputError(f"Prices.{name} must be text; got {getattr(self, name)!r}.")
        if (self.agent_price_per_bottle is None) != (self.bottle_ml is None):
            given, missing = (("agent_price_per_bottle", "bottle_ml")
                              if self.bottle_ml is None else
                              ("bottle_ml", "agent_price_per_bottle"))
            raise InputError(f"Prices.{missing} must be given together with {given} (the agent "
                             f"cost is price per bottle × liquid used / bottle volume); got "
                             f"{given} = {getattr(self, given):g} and no {missing}.")

    @property
    def any(self) -> bool:
        """Whether any price is set."""
        return any(v is not None for v in (self.agent_price_per_bottle,
                                           self.n2o_price_per_1000_l,
                                           self.absorbent_price_per_kg))


@dataclass(frozen=True)
class CostBreakdown:
    """Cost of one plan; a part is None when its price was not given.

    Attributes
    ----------
    agent, nitrous_oxide, absorbent : float or None
        Currency units.
    currency : str
    """

    agent: float | None
    nitrous_oxide: float | None
    absorbent: float | None
    currency: str = ""

    @property
    def total(self) -> float | None:
        """Sum of the parts that have a price; None when none has."""
        parts = [p for p in (self.agent, self.nitrous_oxide, self.absorbent) if p is not None]
        return sum(parts) if parts else None


def cost_of(prices: Prices | None, *, agent_ml: float, n2o_l: float = 0.0,
            absorbent_g: float = 0.0) -> CostBreakdown:
    """Cost of the amounts used at ``prices``.

    ``agent = price per bottle × agent_ml / bottle_ml``; ``N2O = price per 1000 L × n2o_l /
    1000``; ``absorbent = price per kg × absorbent_g / 1000``.

    Parameters
    ----------
    prices : Prices or None
        None gives a breakdown with every part None.
    agent_ml : float, mL of liquid agent
    n2o_l : float, L of N2O at the flowmeters' conditions
    absorbent_g : float, g of absorbent used
    """
    if prices is None:
        return CostBreakdown(None, None, None)
    agent = n2o = absorbent = None
    if prices.agent_price_per_bottle is not None:
        agent = prices.agent_price_per_bottle * agent_ml / prices.bottle_ml
    if prices.n2o_price_per_1000_l is not None:
        n2o = prices.n2o_price_per_1000_l * n2o_l / 1000.0
    if prices.absorbent_price_per_kg is not None:
        absorbent = prices.absorbent_price_per_kg * absorbent_g / 1000.0
    return CostBreakdown(agent, n2o, absorbent, prices.currency)
