"""A map over total fresh gas flow × fresh-gas O2 fraction: steady-state FIO2 and time below
the threshold during a plan.

The steady state comes from the closed form (exact for the model, instant on any grid); the
minutes below the threshold come from running the engine once per grid point on a plan of an
initial high-flow period followed by that make-up
(:func:`circlesim.oxygen.setup.minimal_flow_plan`).
Drawing is left to :mod:`circlesim.reports.oxygen_figures`.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from circlesim.base.validation import InputError, Interval, check_choice, check_number
from circlesim.outcomes.summary import minutes_below
from circlesim.oxygen.minimum import lowest_safe_o2_fraction
from circlesim.oxygen.setup import (
    AIR_O2,
    CARRIERS,
    FreshGas,
    Setup,
    check_fgf_grid,
    check_leak_below_flow,
    check_threshold,
    minimal_flow_plan,
    steady_state,
)

__all__ = ["OxygenMap", "default_o2_grid", "oxygen_map"]


@dataclass(frozen=True)
class OxygenMap:
    """Steady-state FIO2 and time below the threshold over flow × O2 fraction.

    Arrays of shape (n_fraction, n_flow) have the O2 fraction down the rows and the flow
    across the columns (the layout of a heatmap with flow on the x axis).

    Attributes
    ----------
    fgf_l_min : ndarray, shape (n_flow,), L/min
    o2_fraction : ndarray, shape (n_fraction,)
        O2 fraction of the flowmeter gas.
    steady_fio2 : ndarray, shape (n_fraction, n_flow)
        Steady-state inspired O2 fraction (0 where the fresh gas cannot meet the O2
        consumption).
    sustainable : ndarray of bool, shape (n_fraction, n_flow)
    bag_empties : ndarray of bool, shape (n_flow,)
        The fresh gas does not replace uptake and losses: the bag empties and room air is drawn
        in (steady state).
    minutes_below : ndarray or None, shape (n_fraction, n_flow), min
        Time with FIO2 below the threshold during the plan (None if not computed).
    lowest_fio2 : ndarray or None, shape (n_fraction, n_flow)
        Lowest FIO2 during the plan.
    lowest_safe_fraction : ndarray, shape (n_flow,)
        Steady-state lowest safe O2 fraction at each flow (NaN: unreachable).
    fio2_threshold : float
    carrier : str
    plan_text : str
        The plan the minutes refer to.
    duration_min : float
    """

    fgf_l_min: np.ndarray
    o2_fraction: np.ndarray
    steady_fio2: np.ndarray
    sustainable: np.ndarray
    bag_empties: np.ndarray
    minutes_below: np.ndarray | None
    lowest_fio2: np.ndarray | None
    lowest_safe_fraction: np.ndarray
    fio2_threshold: float
    carrier: str
    plan_text: str
    duration_min: float

    def frame(self):
        """Long table (one row per grid point) with units in the column names."""
        import pandas as pd

        flow, fraction = np.meshgrid(self.fgf_l_min, self.o2_fraction)
        data = {"fgf_l_min": flow.ravel(), "o2_fraction": fraction.ravel(),
                "steady_fio2": self.steady_fio2.ravel(),
                "sustainable": self.sustainable.ravel()}
        if self.minutes_below is not None:
            data["minutes_below_threshold"] = self.minutes_below.ravel()
            data["lowest_fio2"] = self.lowest_fio2.ravel()
        return pd.DataFrame(data)


def default_o2_grid(n: int = 25) -> np.ndarray:
    """O2 fractions from 0.25 to 1 in ``n`` even steps."""
    return np.linspace(0.25, 1.0, n)


def oxygen_map(setup: Setup, fgf_l_min: Iterable[float] | None = None,
               o2_fraction: Iterable[float] | None = None, *, fio2_threshold: float = 0.30,
               carrier: str = "air", dial_percent: float = 0.0, duration_min: float = 120.0,
               initial_min: float = 10.0, initial_fgf_l_min: float = 4.0,
               with_plan: bool = True, progress=None) -> OxygenMap:
    """Compute the map.

    Parameters
    ----------
    setup : Setup
    fgf_l_min : sequence of float, L/min, each 0.1–20
        Flow grid (default 0.25–4 L/min in 16 steps).
    o2_fraction : sequence of float, each 0.20946–1
        O2-fraction grid (default :func:`default_o2_grid`).
    fio2_threshold : float, 0.21–1
    carrier : {"air", "n2o"}
    dial_percent : float, vol%
    duration_min, initial_min, initial_fgf_l_min : float
        The plan behind the minutes below the threshold: ``initial_min`` at
        ``initial_fgf_l_min`` with the same make-up, then the grid point's flow.
    with_plan : bool
        Run the engine for the minutes below the threshold (False: steady state only).
    progress : callable or None
        Called as ``progress(done, total)`` after each engine run.

    Returns
    -------
    OxygenMap
    """
    threshold = check_threshold(fio2_threshold, "oxygen_map")
    flows = check_fgf_grid(np.linspace(0.25, 4.0, 16) if fgf_l_min is None else fgf_l_min,
                           "oxygen_map")
    grid = default_o2_grid() if o2_fraction is None else o2_fraction
    fractions = np.atleast_1d(np.asarray(grid, dtype=object))
    if fractions.ndim != 1 or fractions.size == 0:
        raise InputError("oxygen_map.o2_fraction must hold at least one O2 fraction "
                         f"({AIR_O2:g}-1); got none.")
    fractions = np.array([check_number("oxygen_map", f"o2_fraction[{i}]", v,
                                       Interval(AIR_O2, 1.0)) for i, v in enumerate(fractions)])
    carrier = check_choice("oxygen_map", "carrier", carrier, CARRIERS)
    for flow in flows:
        check_leak_below_flow(setup.circuit, flow, "oxygen_map")
    state = steady_state(setup, flows[None, :], fractions[:, None], carrier=carrier,
                         dial_percent=dial_percent)
    minutes = lowest = None
    if with_plan:
        minutes = np.empty((fractions.size, flows.size))
        lowest = np.empty_like(minutes)
        total = minutes.size
        for i, x in enumerate(fractions):
            for j, flow in enumerate(flows):
                plan = minimal_flow_plan(FreshGas(flow, x, carrier, dial_percent),
                                         duration_min=duration_min, initial_min=initial_min,
                                         initial_fgf_l_min=initial_fgf_l_min)
                result = setup.simulate(plan, output_interval_min=0.5, fio2_threshold=threshold)
                fio2 = result.inspired[:, 0]
                minutes[i, j] = minutes_below(result.time_min, fio2, threshold)
                lowest[i, j] = fio2.min()
                if progress is not None:
                    progress(i * flows.size + j + 1, total)
    plan_text = (f"{initial_min:g} min at {initial_fgf_l_min:g} L/min, then the grid point's "
                 f"flow, for {duration_min:g} min in all")
    return OxygenMap(
        fgf_l_min=flows, o2_fraction=fractions, steady_fio2=state.inspired_o2,
        sustainable=state.sustainable, bag_empties=state.surplus_l_min[0] < 0.0,
        minutes_below=minutes, lowest_fio2=lowest,
        lowest_safe_fraction=lowest_safe_o2_fraction(setup, flows, fio2_threshold=threshold,
                                                     dial_percent=dial_percent),
        fio2_threshold=threshold, carrier=carrier, plan_text=plan_text,
        duration_min=float(duration_min))
