"""The lowest fresh-gas O2 fraction that keeps the inspired O2 fraction at or above a threshold.

Three ways to get it, for a grid of total fresh gas flows:

* ``"closed_form"`` — the steady state of :mod:`circlesim.oxygen.balance`, inverted exactly
  (the inspired fraction is affine in the fresh O2 flow at a fixed total flow); instant. In
  steady state the body's N2 and N2O stores are full, so the carrier does not matter.
* ``"engine"`` — root-finding on the engine's own steady state
  (:func:`circlesim.oxygen.setup.engine_steady_state`); the check of the closed form.
* ``"plan"`` — root-finding on the lowest inspired O2 fraction during a plan (an initial
  high-flow period, then the make-up for the rest of the plan), with the engine. Here the
  carrier matters: N2O taken up by the body concentrates O2 in the circuit for hours, and
  nitrogen washed out of the body dilutes it.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
from scipy.optimize import brentq

from circlesim.base.validation import InputError, check_choice
from circlesim.oxygen.balance import required_fresh_o2
from circlesim.oxygen.setup import (
    AIR_O2,
    CARRIERS,
    FreshGas,
    Setup,
    check_fgf_grid,
    check_leak_below_flow,
    check_threshold,
    circuit_flows,
    engine_steady_state,
    fresh_gas_stpd,
    minimal_flow_plan,
    steady_state,
)

__all__ = ["METHODS", "lowest_safe_o2_fraction", "safe_fraction_table"]

#: Ways of finding the lowest safe fraction.
METHODS = ("closed_form", "engine", "plan")
_XTOL = 1e-5


def _closed_form(setup: Setup, fgf: np.ndarray, threshold: float, dial_percent: float,
                 ) -> np.ndarray:
    flows = circuit_flows(setup)
    fresh = fresh_gas_stpd(flows.k_circuit, fgf, 1.0, "air", dial_percent)
    total = fresh["o2"] + fresh["agent"]
    o2 = required_fresh_o2(flows, total, threshold)
    fraction = o2 / (flows.k_circuit * fgf)
    reachable = steady_state(setup, fgf, 1.0, dial_percent=dial_percent).inspired_o2 >= threshold
    return np.where(reachable & (fraction <= 1.0 + 1e-12), np.clip(fraction, AIR_O2, 1.0),
                    np.nan)


def _root(fio2_of, threshold: float) -> float:
    """Lowest fraction in [air, 1] with ``fio2_of(x) >= threshold`` (NaN if none)."""
    if fio2_of(1.0) < threshold:
        return float("nan")
    if fio2_of(AIR_O2) >= threshold:
        return AIR_O2
    return float(brentq(lambda x: fio2_of(x) - threshold, AIR_O2, 1.0, xtol=_XTOL))


def lowest_safe_o2_fraction(setup: Setup, fgf_l_min, *, fio2_threshold: float = 0.30,
                            carrier: str = "air", dial_percent: float = 0.0,
                            method: str = "closed_form", duration_min: float = 120.0,
                            initial_min: float = 10.0, initial_fgf_l_min: float = 4.0,
                            ) -> np.ndarray:
    """Lowest O2 fraction of the flowmeter gas that keeps FIO2 at or above the threshold.

    Parameters
    ----------
    setup : Setup
    fgf_l_min : float or sequence of float, L/min, each 0.1–20
        Total fresh gas flows (O2 + carrier) at the flowmeters.
    fio2_threshold : float, 0.21–1
    carrier : {"air", "n2o"}
    dial_percent : float, vol%
        Vaporizer dial (its vapour dilutes the fresh gas).
    method : {"closed_form", "engine", "plan"}
        See the module docstring.
    duration_min, initial_min, initial_fgf_l_min : float
        The plan for ``method="plan"`` (:func:`circlesim.oxygen.setup.minimal_flow_plan`; the
        initial period uses the same O2 fraction).

    Returns
    -------
    ndarray, shape (n,)
        Fractions (0.20946–1); NaN where even pure O2 cannot reach the threshold at that flow.

    Raises
    ------
    InputError
        For a threshold outside 0.21–1, an empty or out-of-range flow grid, a leak (plus lost
        sample gas) not smaller than a flow, or an unknown carrier or method.
    """
    threshold = check_threshold(fio2_threshold, "lowest_safe_o2_fraction")
    fgf = check_fgf_grid(fgf_l_min, "lowest_safe_o2_fraction")
    carrier = check_choice("lowest_safe_o2_fraction", "carrier", carrier, CARRIERS)
    method = check_choice("lowest_safe_o2_fraction", "method", method, METHODS)
    for flow in fgf:
        check_leak_below_flow(setup.circuit, flow, "lowest_safe_o2_fraction")
    if method == "closed_form":
        return _closed_form(setup, fgf, threshold, dial_percent)
    out = np.empty(fgf.size)
    for i, flow in enumerate(fgf):
        if method == "engine":
            def fio2_of(x, flow=flow):
                result = engine_steady_state(setup, FreshGas(flow, x, carrier, dial_percent))
                return float(result.inspired[-1, 0])
        else:
            def fio2_of(x, flow=flow):
                plan = minimal_flow_plan(FreshGas(flow, x, carrier, dial_percent),
                                         duration_min=duration_min, initial_min=initial_min,
                                         initial_fgf_l_min=initial_fgf_l_min)
                return float(setup.simulate(plan, output_interval_min=0.5).inspired[:, 0].min())
        out[i] = _root(fio2_of, threshold)
    return out


def safe_fraction_table(setup: Setup, fgf_l_min: Iterable[float] = (
        0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0, 4.0), *, fio2_threshold: float = 0.30,
        carriers: Iterable[str] = CARRIERS, dial_percent: float = 0.0,
        duration_min: float | None = 120.0, initial_min: float = 10.0,
        initial_fgf_l_min: float = 4.0):
    """Table of the lowest safe fresh-gas O2 fraction against total flow.

    Parameters
    ----------
    setup : Setup
    fgf_l_min : sequence of float, L/min
    fio2_threshold : float, 0.21–1
    carriers : sequence of {"air", "n2o"}
    dial_percent : float, vol%
    duration_min : float or None, min
        Also find the lowest fraction that keeps FIO2 up during a plan this long (with the
        initial high-flow period); None leaves those columns out.
    initial_min, initial_fgf_l_min : float
        Initial high-flow period of that plan.

    Returns
    -------
    pandas.DataFrame
        One row per flow: ``fgf_l_min``; ``steady_o2_pct`` (closed form, any carrier);
        per carrier the flowmeter settings at that fraction (``{carrier}_o2_l_min``,
        ``{carrier}_carrier_l_min``) and, with ``duration_min``, ``{carrier}_plan_o2_pct``.
        NaN where the threshold cannot be reached.
    """
    import pandas as pd

    carriers = tuple(check_choice("safe_fraction_table", "carriers", c, CARRIERS)
                     for c in carriers)
    if not carriers:
        raise InputError("safe_fraction_table.carriers must name at least one carrier "
                         "('air' or 'n2o'); got none.")
    fgf = check_fgf_grid(fgf_l_min, "safe_fraction_table")
    steady = lowest_safe_o2_fraction(setup, fgf, fio2_threshold=fio2_threshold,
                                     dial_percent=dial_percent)
    columns = {"fgf_l_min": fgf, "steady_o2_pct": 100.0 * steady}
    for carrier in carriers:
        o2 = np.array([np.nan if np.isnan(x) else FreshGas(f, x, carrier).o2_l_min
                       for f, x in zip(fgf, steady, strict=True)])
        columns[f"{carrier}_o2_l_min"] = o2
        columns[f"{carrier}_carrier_l_min"] = fgf - o2
        if duration_min is not None:
            columns[f"{carrier}_plan_o2_pct"] = 100.0 * lowest_safe_o2_fraction(
                setup, fgf, fio2_threshold=fio2_threshold, carrier=carrier,
                dial_percent=dial_percent, method="plan", duration_min=duration_min,
                initial_min=initial_min, initial_fgf_l_min=initial_fgf_l_min)
    return pd.DataFrame(columns)
