"""Absorbent at minimal flow: CO2 reaching the canister, canister life, and when inspired CO2
rises.

In steady state the CO2 reaching the absorbent is ``c · VCO2``, where ``c = (1 − φ) k`` is the
share of exhaled gas that comes back past the pressure-limiting valve and the sample line
(:mod:`circlesim.oxygen.balance`). With the valve venting exhaled gas first, ``φ`` grows with
the fresh gas flow, so less CO2 reaches the canister at high flow and all of it at minimal
flow; with the valve venting circuit gas, all of it always does. The canister's life to the
start of breakthrough is ``capacity × (breakthrough_start − used_fraction) / (c · VCO2)``;
:func:`inspired_co2_rise_time` finds with the engine when inspired CO2 passes a threshold.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from circlesim.base.validation import Interval, check_number
from circlesim.domain.plan import Plan, Step
from circlesim.oxygen.setup import (
    FreshGas,
    Setup,
    check_fgf_grid,
    check_leak_below_flow,
    circuit_flows,
    steady_state,
)

__all__ = ["absorbent_by_flow", "inspired_co2_rise_time"]

_CHUNK_MIN = 1440.0


def inspired_co2_rise_time(setup: Setup, fresh: FreshGas, *, threshold_kpa: float = 0.5,
                           max_hours: float = 96.0) -> float | None:
    """When inspired CO2 first exceeds a threshold at a constant make-up (engine).

    Parameters
    ----------
    setup : Setup
        Its absorber (mass, capacity, breakthrough start, used fraction) is the canister.
    fresh : FreshGas
    threshold_kpa : float, kPa, 0.1–5
        Inspired CO2 partial pressure that counts as a rise (default 0.5 kPa, the default of
        the ``inspired_co2`` alert rule).
    max_hours : float, h, 1–240
        Give up after this long.

    Returns
    -------
    float or None
        Minutes from the start; None if it does not happen within ``max_hours``.
    """
    check_number("inspired_co2_rise_time", "threshold_kpa", threshold_kpa,
                 Interval(0.1, 5.0, "kPa"))
    check_number("inspired_co2_rise_time", "max_hours", max_hours, Interval(1.0, 240.0, "h"))
    plan = Plan((Step(0.0, **fresh.settings()),), duration_min=_CHUNK_MIN, name="canister")
    offset = 0.0
    state = None
    while offset < 60.0 * max_hours:
        result = setup.simulate(plan, output_interval_min=1.0, initial_state=state)
        co2_kpa = result.inspired[:, 1] * setup.circuit.ambient_pressure_kpa
        above = np.flatnonzero(co2_kpa > threshold_kpa)
        if above.size:
            i = int(above[0])
            if i == 0:
                return offset
            t0, t1 = result.time_min[i - 1], result.time_min[i]
            v0, v1 = co2_kpa[i - 1], co2_kpa[i]
            time = offset + t0 + (threshold_kpa - v0) / (v1 - v0) * (t1 - t0)
            return float(time) if time <= 60.0 * max_hours else None
        offset += _CHUNK_MIN
        state = result.final_state
    return None


def absorbent_by_flow(setup: Setup, fgf_l_min: Iterable[float] = (
        0.25, 0.5, 1.0, 2.0, 3.0, 4.0, 6.0), *, o2_fraction: float = 0.5, carrier: str = "air",
        threshold_kpa: float = 0.5, with_engine: bool = True, max_hours: float = 96.0):
    """CO2 reaching the absorbent and canister life against total fresh gas flow.

    Parameters
    ----------
    setup : Setup
    fgf_l_min : sequence of float, L/min, each 0.1–20
    o2_fraction : float, 0.20946–1
    carrier : {"air", "n2o"}
    threshold_kpa : float, kPa
        Inspired CO2 that counts as a rise (engine column).
    with_engine : bool
        Also run the engine for the time inspired CO2 rises.
    max_hours : float, h

    Returns
    -------
    pandas.DataFrame
        ``fgf_l_min``; ``co2_to_absorber_ml_min`` and ``share_of_vco2`` (steady state);
        ``life_to_breakthrough_h`` (closed form, to the start of breakthrough);
        ``life_to_full_h`` (to the whole capacity); with ``with_engine``,
        ``inspired_co2_rise_h`` (engine, NaN if not within ``max_hours``).
    """
    import pandas as pd

    flows_grid = check_fgf_grid(fgf_l_min, "absorbent_by_flow")
    for flow in flows_grid:
        check_leak_below_flow(setup.circuit, flow, "absorbent_by_flow")
    vco2 = circuit_flows(setup).vco2_l_min
    rate = steady_state(setup, flows_grid, o2_fraction,
                        carrier=carrier).co2_to_absorber_l_min  # L STPD/min
    absorber = setup.absorber
    left_to_knee = absorber.capacity_l * max(absorber.breakthrough_start
                                             - absorber.used_fraction, 0.0)
    left = absorber.capacity_l * (1.0 - absorber.used_fraction)
    with np.errstate(divide="ignore"):  # nothing reaches the canister: infinite life
        data = {"fgf_l_min": flows_grid, "co2_to_absorber_ml_min": 1000.0 * rate,
                "share_of_vco2": rate / vco2,
                "life_to_breakthrough_h": left_to_knee / rate / 60.0,
                "life_to_full_h": left / rate / 60.0}
    if with_engine:
        rise = [inspired_co2_rise_time(setup, FreshGas(f, o2_fraction, carrier),
                                       threshold_kpa=threshold_kpa, max_hours=max_hours)
                for f in flows_grid]
        data["inspired_co2_rise_h"] = np.array([np.nan if r is None else r / 60.0
                                                for r in rise])
    return pd.DataFrame(data)
