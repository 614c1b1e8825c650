"""Time course of inspired and end-tidal O2, N2 and N2O during a plan, with the mass balance.

:func:`oxygen_course` runs a minimal-flow plan (optional pre-oxygenation, an initial high-flow
period, then a make-up); :func:`course_of_result` works on any finished simulation. Besides the
engine's curves, each course carries

* the closed-form steady state of the final make-up (where the curves are heading), and
* the *quasi-steady* closed form at every output time: the mass balance with the body's
  momentary uptake of N2, N2O and agent. Once the circuit has settled after a change (a few
  circuit time constants), the engine's FIO2 follows it; the gap between the two shows how far
  the circuit still is from balance.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from circlesim.engine.result import Result
from circlesim.outcomes.summary import minutes_below
from circlesim.oxygen.balance import SteadyState, mass_balance
from circlesim.oxygen.setup import (
    FreshGas,
    Setup,
    check_leak_below_flow,
    check_threshold,
    circuit_flows,
    minimal_flow_plan,
)

__all__ = ["OxygenCourse", "course_of_result", "oxygen_course"]


@dataclass(frozen=True)
class OxygenCourse:
    """A simulated course with its mass balance.

    Attributes
    ----------
    result : Result
        The engine's prediction (with its alerts).
    final_steady : SteadyState
        Closed-form steady state of the last segment's make-up (scalars).
    quasi_steady_fio2 : ndarray, shape (T,)
        Closed-form FIO2 with the momentary uptake of N2, N2O and agent; NaN while the valve
        is closed (the bag is then not in balance).
    fio2_threshold : float
    """

    result: Result
    final_steady: SteadyState
    quasi_steady_fio2: np.ndarray
    fio2_threshold: float

    @property
    def minutes_below(self) -> float:
        """Minutes with FIO2 below the threshold."""
        return minutes_below(self.result.time_min, self.result.inspired[:, 0],
                             self.fio2_threshold)

    @property
    def lowest_fio2(self) -> float:
        """Lowest inspired O2 fraction during the plan."""
        return float(self.result.inspired[:, 0].min())

    def frame(self):
        """The course as a pandas table (vol% for gases, mL/min STPD for uptake)."""
        import pandas as pd

        r = self.result
        data = {"time_min": r.time_min}
        for name, label in (("oxygen", "o2"), ("nitrogen", "n2"), ("nitrous_oxide", "n2o")):
            g = r.gas_index(name)
            data[f"inspired_{label}_pct"] = 100.0 * r.inspired[:, g]
            data[f"end_tidal_{label}_pct"] = 100.0 * r.end_tidal[:, g]
        data["quasi_steady_inspired_o2_pct"] = 100.0 * self.quasi_steady_fio2
        data["uptake_n2_ml_min"] = 1000.0 * r.uptake_stpd[:, r.gas_index("nitrogen")]
        data["uptake_n2o_ml_min"] = 1000.0 * r.uptake_stpd[:, r.gas_index("nitrous_oxide")]
        data["fresh_gas_l_min"] = r.fresh_gas_l_min
        data["vented_l_min"] = r.vented_l_min
        data["bag_volume_l"] = r.bag_volume_l
        return pd.DataFrame(data)


def course_of_result(result: Result, *, fio2_threshold: float = 0.30) -> OxygenCourse:
    """Attach the mass balance to a finished simulation (any plan)."""
    threshold = check_threshold(fio2_threshold, "course_of_result")
    setup = Setup(result.patient, result.circuit, result.vaporizer, result.absorber)
    segments, index = result.segments, result.segment_index
    fresh = result.fresh_gas_by_gas_stpd
    uptake = result.uptake_stpd
    g = {name: result.gas_index(name) for name in ("oxygen", "nitrogen", "nitrous_oxide")}
    ia = result.gas_index("agent")
    quasi = np.full(result.time_min.size, np.nan)
    final = None
    for k, seg in enumerate(segments):
        flows = circuit_flows(setup, tidal_volume_ml=seg.tidal_volume_ml,
                              rate_per_min=seg.rate_per_min)
        rows = index == k
        if seg.valve == "open" and rows.any():
            state = mass_balance(flows, fresh[rows, g["oxygen"]], fresh[rows, g["nitrogen"]],
                                 fresh[rows, g["nitrous_oxide"]], fresh[rows, ia],
                                 uptake_n2=uptake[rows, g["nitrogen"]],
                                 uptake_n2o=uptake[rows, g["nitrous_oxide"]],
                                 uptake_agent=uptake[rows, ia])
            quasi[rows] = state.inspired_o2
        if k == len(segments) - 1:
            last = fresh[-1]
            final = mass_balance(flows, last[g["oxygen"]], last[g["nitrogen"]],
                                 last[g["nitrous_oxide"]], last[ia])
    return OxygenCourse(result=result, final_steady=final, quasi_steady_fio2=quasi,
                        fio2_threshold=threshold)


def oxygen_course(setup: Setup, maintenance: FreshGas, *, duration_min: float = 120.0,
                  initial_min: float = 10.0, initial_fgf_l_min: float = 4.0,
                  initial_o2_fraction: float | None = None, preoxygenation_min: float = 0.0,
                  valve: str = "open", fio2_threshold: float = 0.30,
                  output_interval_min: float = 0.5) -> OxygenCourse:
    """Simulate a minimal-flow plan and attach its mass balance.

    Parameters are those of :func:`circlesim.oxygen.setup.minimal_flow_plan`, plus
    ``fio2_threshold`` (0.21–1, for the alerts and minutes below) and
    ``output_interval_min`` (min).

    The prediction is made even when the alert rules call the plan unsafe; its warnings are
    in ``course.result.alerts``.

    Raises
    ------
    InputError
        For a threshold outside 0.21–1, or a leak (plus lost sample gas) not smaller than the
        make-up's flow.
    """
    threshold = check_threshold(fio2_threshold, "oxygen_course")
    check_leak_below_flow(setup.circuit, maintenance.fgf_l_min, "oxygen_course")
    plan = minimal_flow_plan(maintenance, duration_min=duration_min, initial_min=initial_min,
                             initial_fgf_l_min=initial_fgf_l_min,
                             initial_o2_fraction=initial_o2_fraction,
                             preoxygenation_min=preoxygenation_min, valve=valve)
    result = setup.simulate(plan, output_interval_min=output_interval_min,
                            fio2_threshold=threshold)
    return course_of_result(result, fio2_threshold=threshold)
