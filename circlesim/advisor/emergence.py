"""Emergence: how long the agent takes to wash out once the vaporizer is turned off (analysis).

:func:`emergence` continues a run from its final state with the dial at 0 and a chosen fresh
gas flow of oxygen or air, and finds when end-tidal agent and the brain (vessel-rich group)
fall below a chosen fraction of the age-adjusted MAC — the awakening fraction.

:func:`decrement_curves` answers the question behind context-sensitive decrement times: for
cases of different lengths held at the same MAC multiple (by the target controller), how long
after the vaporizer is turned off do end-tidal agent and the brain fall by 50, 80 and 90 %,
and how long until the awakening fraction is reached?

Default awakening fraction 0.34 × age-adjusted MAC: Katoh T, Suguro Y, Kimura T, Ikeda K.
Cerebral awakening concentration of sevoflurane and isoflurane predicted during slow and fast
alveolar washout. Anesth Analg 1993;77:1012-7 (abstract: 0.34 ± 0.05 MAC for sevoflurane,
0.31 ± 0.05 for isoflurane, at slow washout); Goto T et al., MAC-awake of xenon alone and in
combination with isoflurane or sevoflurane, Anesthesiology 2000;93:1188-93 (0.35 ± 0.06 MAC
for both). No primary value for desflurane was reached; the same fraction is used for every
agent. The threshold compares the agent alone with its MAC: nitrous oxide is not counted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from circlesim.base.validation import InputError, Interval, check_choice, check_number
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan, Step
from circlesim.engine.result import Result
from circlesim.outcomes.summary import time_to_reach
from circlesim.properties import Sourced
from circlesim.targets.predict import simulate, simulate_with_targets
from circlesim.targets.settings import ControllerSettings

__all__ = ["AWAKENING_MAC_FRACTION", "DecrementCurves", "Emergence", "decrement_curves",
           "emergence"]

#: Default awakening fraction of the age-adjusted MAC.
AWAKENING_MAC_FRACTION = Sourced(
    0.34, "Katoh et al., Anesth Analg 1993;77:1012-7 (sevoflurane 0.34, isoflurane 0.31 MAC, "
          "slow washout); Goto et al., Anesthesiology 2000;93:1188-93 (0.35 MAC)")
#: Decrement percentages reported by default.
DECREMENTS = (50.0, 80.0, 90.0)
_CARRIERS = ("oxygen", "air")


@dataclass(frozen=True, eq=False)
class Emergence:
    """Predicted washout after the vaporizer is turned off.

    Attributes
    ----------
    agent : str
    mac_percent : float, vol%
        Age-adjusted MAC.
    awakening_fraction : float
        Threshold as a fraction of ``mac_percent``.
    threshold_percent : float, vol%
    fgf_l_min : float, L/min
    carrier : {"oxygen", "air"}
    start_end_tidal_percent, start_brain_percent : float, vol% (brain as a vol% equivalent)
        When the vaporizer was turned off.
    end_tidal_min, brain_min : float or None, min
        Time after turning the vaporizer off until end-tidal agent, and the brain, fall below
        the threshold (0 if already below; None if not within ``washout.time_min[-1]``).
    washout : Result
        The washout run (its time axis starts at 0 when the vaporizer is turned off).
    """

    agent: str
    mac_percent: float
    awakening_fraction: float
    threshold_percent: float
    fgf_l_min: float
    carrier: str
    start_end_tidal_percent: float
    start_brain_percent: float
    end_tidal_min: float | None
    brain_min: float | None
    washout: Result

    def decrement_min(self, percent: float, where: str = "end_tidal") -> float | None:
        """Time (min) for end-tidal agent (or the brain, ``where="brain"``) to fall by
        ``percent`` % of its value when the vaporizer was turned off."""
        check_number("decrement_min", "percent", percent, Interval(1.0, 99.0, "%"))
        series = (self.washout.end_tidal_percent("agent") if where == "end_tidal"
                  else self.washout.brain_percent())
        return time_to_reach(self.washout.time_min, series,
                             series[0] * (1.0 - percent / 100.0))

    def summary(self) -> str:
        """Two sentences for people."""
        def when(value: float | None) -> str:
            if value is None:
                return f"not within {self.washout.time_min[-1]:.0f} min"
            return f"after {value:.1f} min"

        return (f"With the vaporizer off and {self.fgf_l_min:g} L/min of {self.carrier}, "
                f"end-tidal {self.agent} falls below {self.awakening_fraction:g} MAC "
                f"({self.threshold_percent:.2f} %) {when(self.end_tidal_min)}, and the brain "
                f"{when(self.brain_min)} (from {self.start_end_tidal_percent:.2f} % end-tidal, "
                f"{self.start_brain_percent:.2f} % brain).")


def _check(fgf_l_min: float, carrier: str, awakening_fraction: float, max_minutes: float
           ) -> str:
    check_number("emergence", "fgf_l_min", fgf_l_min, Interval(0.1, 20.0, "L/min"))
    check_number("emergence", "awakening_fraction", awakening_fraction,
                 Interval(0.05, 1.0, "× MAC"))
    check_number("emergence", "max_minutes", max_minutes, Interval(1.0, 1440.0, "min"))
    return check_choice("emergence", "carrier", carrier, _CARRIERS)


def _washout_plan(fgf_l_min: float, carrier: str, max_minutes: float, tidal_volume_ml: float,
                  rate_per_min: float) -> Plan:
    flows = ({"o2_l_min": fgf_l_min, "air_l_min": 0.0} if carrier == "oxygen"
             else {"o2_l_min": 0.0, "air_l_min": fgf_l_min})
    return Plan((Step(0.0, n2o_l_min=0.0, dial_percent=0.0, tidal_volume_ml=tidal_volume_ml,
                      rate_per_min=rate_per_min, valve="open",
                      note=f"vaporizer off, {fgf_l_min:g} L/min {carrier}", **flows),),
                duration_min=max_minutes, name="emergence",
                description="Vaporizer off; washout with the chosen fresh gas flow.")


def emergence(result: Result, *, fgf_l_min: float = 6.0, carrier: str = "oxygen",
              awakening_fraction: float = float(AWAKENING_MAC_FRACTION),
              max_minutes: float = 120.0, state: np.ndarray | None = None,
              output_interval_min: float = 0.05) -> Emergence:
    """Predict emergence after ``result``'s plan: vaporizer off, ``fgf_l_min`` of ``carrier``.

    Parameters
    ----------
    result : Result
        The case so far; the washout continues from its final state with its patient,
        circuit, absorber, vaporizer and last ventilation settings.
    fgf_l_min : float, L/min, 0.1–20
        Fresh gas flow during washout.
    carrier : {"oxygen", "air"}
    awakening_fraction : float, × age-adjusted MAC, 0.05–1
        Default 0.34 (Katoh et al. 1993; Goto et al. 2000 — see the module notes).
    max_minutes : float, min, 1–1440
        How long to follow the washout.
    state : ndarray, optional
        Start from this state of ``result`` (one row of ``result.states``) instead of its
        final state.
    output_interval_min : float, min
        Spacing of the washout's output times.

    Returns
    -------
    Emergence
    """
    if not isinstance(result, Result):
        raise InputError(f"result must be a Result; got {type(result).__name__}.")
    carrier = _check(fgf_l_min, carrier, awakening_fraction, max_minutes)
    segments = result.plan.segments(result.patient.default_tidal_volume_ml,
                                    result.patient.default_rate_per_min, result.circuit.valve)
    last = segments[-1]
    plan = _washout_plan(fgf_l_min, carrier, max_minutes, last.tidal_volume_ml,
                         last.rate_per_min)
    start = result.final_state if state is None else state
    washout = simulate(result.patient, result.circuit, plan, vaporizer=result.vaporizer,
                       absorber=result.absorber, initial_state=start,
                       output_interval_min=output_interval_min)
    threshold = awakening_fraction * result.mac_percent
    et = washout.end_tidal_percent("agent")
    brain = washout.brain_percent()
    return Emergence(agent=result.agent, mac_percent=result.mac_percent,
                     awakening_fraction=float(awakening_fraction),
                     threshold_percent=threshold, fgf_l_min=float(fgf_l_min), carrier=carrier,
                     start_end_tidal_percent=float(et[0]), start_brain_percent=float(brain[0]),
                     end_tidal_min=_fall_below(washout.time_min, et, threshold),
                     brain_min=_fall_below(washout.time_min, brain, threshold),
                     washout=washout)


def _fall_below(time_min: np.ndarray, values: np.ndarray, level: float) -> float | None:
    if values[0] <= level:
        return 0.0
    return time_to_reach(time_min, values, level)


@dataclass(frozen=True, eq=False)
class DecrementCurves:
    """Decrement times against case length for one agent.

    Attributes
    ----------
    agent : str
    held_mac : float
        End-tidal target held during each case, × age-adjusted MAC.
    case_lengths_min : ndarray, shape (L,), min
    percents : tuple of float
        Decrements, % (e.g. 50, 80, 90).
    end_tidal_min, brain_min : ndarray, shape (L, P), min
        Time for end-tidal agent and the brain to fall by each percentage (NaN: not within
        the washout followed).
    awakening_end_tidal_min, awakening_brain_min : ndarray, shape (L,), min
        Time to fall below the awakening fraction.
    awakening_fraction : float
    maintenance_fgf_l_min, washout_fgf_l_min : float, L/min
    carrier : str
        Washout carrier gas.
    cases : tuple of Emergence
        The washouts, one per case length.
    maintenance : Result
        The longest case (the shorter ones are its first minutes).
    """

    agent: str
    held_mac: float
    case_lengths_min: np.ndarray
    percents: tuple[float, ...]
    end_tidal_min: np.ndarray
    brain_min: np.ndarray
    awakening_end_tidal_min: np.ndarray
    awakening_brain_min: np.ndarray
    awakening_fraction: float
    maintenance_fgf_l_min: float
    washout_fgf_l_min: float
    carrier: str
    cases: tuple[Emergence, ...]
    maintenance: Result

    def frame(self):
        """The curves as a pandas table, one row per case length."""
        import pandas as pd

        cols = {"case_length_min": self.case_lengths_min}
        for j, p in enumerate(self.percents):
            cols[f"end_tidal_{p:g}pct_decrement_min"] = self.end_tidal_min[:, j]
        for j, p in enumerate(self.percents):
            cols[f"brain_{p:g}pct_decrement_min"] = self.brain_min[:, j]
        cols["end_tidal_to_awakening_min"] = self.awakening_end_tidal_min
        cols["brain_to_awakening_min"] = self.awakening_brain_min
        return pd.DataFrame(cols)


def decrement_curves(patient: Patient, circuit: Circuit, vaporizer: Vaporizer, *,
                     absorber: Absorber | None = None, held_mac: float = 1.0,
                     case_lengths_min=(15.0, 30.0, 60.0, 120.0, 240.0),
                     maintenance_fgf_l_min: float = 2.0, washout_fgf_l_min: float = 6.0,
                     carrier: str = "oxygen", percents=DECREMENTS,
                     awakening_fraction: float = float(AWAKENING_MAC_FRACTION),
                     max_minutes: float = 120.0,
                     settings: ControllerSettings | None = None) -> DecrementCurves:
    """Decrement times and time to awakening against case length.

    Each case holds end-tidal agent at ``held_mac`` × age-adjusted MAC with the target
    controller at ``maintenance_fgf_l_min`` (half O2, half air); then the vaporizer is turned
    off with ``washout_fgf_l_min`` of ``carrier``. One controlled run as long as the longest
    case serves every case length.

    Parameters
    ----------
    patient, circuit, vaporizer, absorber
    held_mac : float, × MAC, 0.3–2
    case_lengths_min : sequence of float, min, 5–720, increasing
    maintenance_fgf_l_min, washout_fgf_l_min : float, L/min, 0.3–20 and 0.1–20
    carrier : {"oxygen", "air"}
        Washout fresh gas.
    percents : sequence of float, %, 1–99
    awakening_fraction : float, × MAC, 0.05–1
    max_minutes : float, min
        How long each washout is followed.
    settings : ControllerSettings, optional

    Returns
    -------
    DecrementCurves
    """
    carrier = _check(washout_fgf_l_min, carrier, awakening_fraction, max_minutes)
    check_number("decrement_curves", "held_mac", held_mac, Interval(0.3, 2.0, "× MAC"))
    check_number("decrement_curves", "maintenance_fgf_l_min", maintenance_fgf_l_min,
                 Interval(0.3, 20.0, "L/min"))
    lengths = np.array([check_number("decrement_curves", f"case_lengths_min[{i}]", x,
                                     Interval(5.0, 720.0, "min"))
                        for i, x in enumerate(case_lengths_min)], dtype=float)
    if lengths.size == 0 or np.any(np.diff(lengths) <= 0):
        raise InputError("decrement_curves.case_lengths_min must be one or more increasing "
                         f"times; got {list(case_lengths_min)!r}.")
    pcts = tuple(float(check_number("decrement_curves", f"percents[{i}]", p,
                                    Interval(1.0, 99.0, "%"))) for i, p in enumerate(percents))
    half = maintenance_fgf_l_min / 2.0
    plan = Plan((Step(0.0, o2_l_min=half, air_l_min=half, target_mac=held_mac,
                      note=f"hold {held_mac:g} MAC"),), duration_min=float(lengths[-1]),
                name="maintenance")
    maintenance = simulate_with_targets(patient, circuit, plan, vaporizer=vaporizer,
                                        absorber=absorber, settings=settings)
    cases = []
    for length in lengths:
        i = int(np.argmin(np.abs(maintenance.time_min - length)))
        cases.append(emergence(maintenance, fgf_l_min=washout_fgf_l_min, carrier=carrier,
                               awakening_fraction=awakening_fraction,
                               max_minutes=max_minutes, state=maintenance.states[i]))
    nan = float("nan")

    def times(case: Emergence, where: str) -> list[float]:
        out = [case.decrement_min(p, where) for p in pcts]
        return [nan if v is None else v for v in out]

    return DecrementCurves(
        agent=vaporizer.agent, held_mac=float(held_mac), case_lengths_min=lengths,
        percents=pcts,
        end_tidal_min=np.array([times(c, "end_tidal") for c in cases]),
        brain_min=np.array([times(c, "brain") for c in cases]),
        awakening_end_tidal_min=np.array([nan if c.end_tidal_min is None else c.end_tidal_min
                                          for c in cases]),
        awakening_brain_min=np.array([nan if c.brain_min is None else c.brain_min
                                      for c in cases]),
        awakening_fraction=float(awakening_fraction),
        maintenance_fgf_l_min=float(maintenance_fgf_l_min),
        washout_fgf_l_min=float(washout_fgf_l_min), carrier=carrier, cases=tuple(cases),
        maintenance=maintenance)
