"""Absorbent life: how long the canister lasts if the end-of-plan CO2 load continues.

:class:`CanisterLife` holds the extrapolated life of a fresh canister and of the one in use;
:func:`extrapolate_canister_life` computes it from a CO2 rate, capacity and used fraction, and
:func:`canister_life` from a :class:`~circlesim.engine.result.Result`. The formula with its
source is in ``docs/outcomes.md``.
"""

from __future__ import annotations

from dataclasses import dataclass

from circlesim.base.validation import Interval, check_number
from circlesim.engine.result import Result

__all__ = ["CanisterLife", "canister_life", "extrapolate_canister_life"]


@dataclass(frozen=True)
class CanisterLife:
    """Absorbent life extrapolated from the CO2 reaching it at the end of the plan.

    The absorbent is taken to last until inspired CO2 starts to appear, that is until the
    used fraction reaches the absorber's ``breakthrough_start``, with the end-of-plan settings
    continuing unchanged. This is an extrapolation, not a prediction of the whole case.

    Attributes
    ----------
    co2_to_absorbent_l_min : float
        CO2 reaching the absorbent at the end of the plan, L STPD/min.
    fresh_canister_min : float or None
        Life of a fresh canister at that rate, min (None: no CO2 reaches it).
    remaining_min : float or None
        Life left in this canister at that rate, min (0 once breakthrough has begun; None: no
        CO2 reaches it).
    """

    co2_to_absorbent_l_min: float
    fresh_canister_min: float | None
    remaining_min: float | None


def extrapolate_canister_life(co2_to_absorbent_l_min: float, capacity_l: float,
                              breakthrough_start: float, used_fraction: float) -> CanisterLife:
    """Absorbent life if ``co2_to_absorbent_l_min`` keeps reaching it (see :class:`CanisterLife`).

    ``fresh = knee × capacity / rate``; ``remaining = max(knee − used, 0) × capacity / rate``.

    Parameters
    ----------
    co2_to_absorbent_l_min : float, L STPD/min, ≥ 0
    capacity_l : float, L STPD of CO2, > 0
    breakthrough_start : float, 0–1
        Used fraction at which inspired CO2 starts to appear (the "knee").
    used_fraction : float, 0–1
        Fraction of the capacity already used.
    """
    owner = "extrapolate_canister_life"
    rate = check_number(owner, "co2_to_absorbent_l_min", co2_to_absorbent_l_min,
                        Interval(0.0, float("inf"), "L/min"))
    capacity = check_number(owner, "capacity_l", capacity_l,
                            Interval(0.0, float("inf"), "L", low_open=True))
    knee = check_number(owner, "breakthrough_start", breakthrough_start, Interval(0.0, 1.0))
    used = check_number(owner, "used_fraction", used_fraction, Interval(0.0, 1.0))
    if rate <= 1e-9:
        return CanisterLife(rate, None, None)
    return CanisterLife(rate, knee * capacity / rate, max(knee - used, 0.0) * capacity / rate)


def canister_life(result: Result) -> CanisterLife:
    """Absorbent life at the end-of-plan rate of CO2 reaching it (see :class:`CanisterLife`).

    The rate is the CO2 taken up at the end divided by the absorbent's efficiency then; once
    the absorbent is fully spent (efficiency 0) nothing is left and no rate can be read.
    """
    efficiency = float(result.absorbent_efficiency[-1])
    if efficiency <= 1e-9:
        return CanisterLife(float("nan"), None, 0.0)
    return extrapolate_canister_life(
        max(float(result.absorbed_stpd[-1]), 0.0) / efficiency, result.absorbent_capacity_l,
        result.absorber.breakthrough_start,
        min(max(float(result.absorbent_used_fraction[-1]), 0.0), 1.0))
