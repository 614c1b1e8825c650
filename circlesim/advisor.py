"""The plan advisor: flow and dial schedules that meet end-tidal targets at least cost (analysis).

Given a patient, a breathing system, a vaporizer, end-tidal targets (:class:`Targets`: a
level in vol% or × age-adjusted MAC, the time allowed to reach it, later changes) and limits
(:class:`Constraints`: lowest FIO2, lowest and highest fresh gas flow, largest dial, at most
N changes per hour, the agent's labelling), :func:`advise` finds a piecewise-constant plan of
flows and dial settings that keeps end-tidal agent within the tolerance of the targets and
uses the least liquid agent, the least CO2-equivalent, or reaches the target soonest.

How it searches
---------------
The plan has a wash-in stretch at flow F1 until time t1, then flow F2; the dial may change at
t1 and every 60/N minutes after it. For each (F1, t1, F2) the dials come from a mixed-integer
programme on the linearised model (:func:`circlesim.schedule.solve_dials`, scipy's HiGHS
``milp``), checked against the exact model. F2 is the lowest flow the limits allow that still
fits; F1 is scanned upwards from F2; t1 is refined with :func:`scipy.optimize.minimize_scalar`.
Every plan returned is re-run with :func:`circlesim.simulate` and every limit checked on that
run (:attr:`Advice.checks`).

When the targets cannot be met (a target above what the vaporizer can give, no time allowed,
limits that contradict each other) the advice says which limit cannot be met and gives the
closest plan that respects the others (:attr:`Advice.feasible` is False).

For a single agent with an O2/air carrier the CO2-equivalent is the agent's mass times its
GWP, so "agent" and "co2e" choose the same plan; both figures are reported.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy.optimize import minimize_scalar

from .alerts import default_rules
from .control import ControllerSettings, simulate_with_targets
from .emissions import DEFAULT_GWP_HORIZON, co2_equivalent_kg, gwp
from .equipment import Absorber, Circuit, Vaporizer
from .patient import Patient
from .plan import AIR_O2_FRACTION, Plan, Step
from .result import Result
from .runner import Knobs, Runner
from .scenario import plan_to_toml
from .schedule import Band, DialSolution, Schedule, better, drop_changes, excursion_on, solve_dials
from .simulate import simulate
from .units import atpd_to_stpd
from .validation import (
    InputError,
    Interval,
    bounded,
    check_choice,
    check_fields,
    check_number,
    optional_bounded,
)

__all__ = ["OBJECTIVES", "Advice", "Constraints", "ParetoPoint", "Targets", "advise"]

#: What the advisor can minimise.
OBJECTIVES = ("agent", "co2e", "time")
#: Wash-in flows the advisor tries (L/min), besides the maintenance flow.
WASHIN_FLOWS = (0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 8.0, 10.0, 12.0, 15.0, 20.0)
#: Flowmeter resolution of the advisor's plans, L/min per flowmeter.
METER_STEP_L_MIN = 0.05
#: Spacing of the times at which the target band is checked while searching, min.
BAND_SPACING_MIN = 0.5
#: Spacing of the times at which the advisor's plans are finally checked, min.
FINE_SPACING_MIN = 0.1
#: Margins (fraction of the target) inside the band that the dials on the scale aim for,
#: tightest first; the first whose plan stays inside the band at every 0.1 min is kept.
POLISH_MARGINS = (0.002, 0.006, 0.012, 0.02, 0.03)
#: Margins for the plans of the trade-off curve (quicker, a little less tight).
PARETO_MARGINS = (0.012, 0.03)
#: FIO2 margin above the limit aimed at when choosing the O2 share of the fresh gas.
FIO2_MARGIN = 0.04
_EPS = 1e-9


@dataclass(frozen=True)
class Targets:
    """End-tidal targets for the advisor.

    Parameters
    ----------
    end_tidal_mac : float or None, × age-adjusted MAC, 0.1–3
        Target as a multiple of the patient's age-adjusted MAC (default 1 if neither this nor
        ``end_tidal_percent`` is given).
    end_tidal_percent : float or None, vol%, 0.05–20
        Target in vol% instead (not both).
    reach_within_min : float, min, 0–240
        Time allowed to reach the target (and each later change). 0 is accepted and answered
        with an explanation and the fastest plan.
    duration_min : float, min, 5–1440
        Length of the plan.
    changes : tuple of (time_min, level), optional
        Later changes of the target, in the same unit as the first level, at increasing times
        within the plan.
    tolerance : float, fraction, 0.01–0.2
        End-tidal agent must stay within this fraction of the target once it should have been
        reached (default 5 %).
    """

    end_tidal_mac: float | None = field(default=None, metadata=optional_bounded(0.1, 3.0, "MAC"))
    end_tidal_percent: float | None = field(default=None,
                                            metadata=optional_bounded(0.05, 20.0, "vol%"))
    reach_within_min: float = field(default=10.0, metadata=bounded(0.0, 240.0, "min"))
    duration_min: float = field(default=120.0, metadata=bounded(5.0, 1440.0, "min"))
    changes: tuple[tuple[float, float], ...] = ()
    tolerance: float = field(default=0.05, metadata=bounded(0.01, 0.2))

    def __post_init__(self) -> None:
        check_fields(self)
        if self.end_tidal_mac is not None and self.end_tidal_percent is not None:
            raise InputError("Targets takes one of end_tidal_mac and end_tidal_percent, not "
                             f"both; got {self.end_tidal_mac:g} MAC and "
                             f"{self.end_tidal_percent:g} vol%.")
        if self.end_tidal_mac is None and self.end_tidal_percent is None:
            object.__setattr__(self, "end_tidal_mac", 1.0)
        changes = tuple(tuple(c) for c in self.changes)
        last = 0.0
        interval = (Interval(0.1, 3.0, "MAC") if self.end_tidal_mac is not None
                    else Interval(0.05, 20.0, "vol%"))
        for i, change in enumerate(changes):
            if len(change) != 2:
                raise InputError(f"Targets.changes[{i}] must be (time_min, level); got "
                                 f"{change!r}.")
            t = check_number("Targets", f"changes[{i}].time_min", change[0],
                             Interval(0.0, self.duration_min, "min", low_open=True,
                                      high_open=True))
            check_number("Targets", f"changes[{i}].level", change[1], interval)
            if t <= last:
                raise InputError(f"Targets.changes[{i}].time_min must be later than "
                                 f"{last:g} min; got {t:g}.")
            last = t
        object.__setattr__(self, "changes", tuple((float(a), float(b)) for a, b in changes))

    @property
    def unit(self) -> str:
        """"MAC" or "vol%"."""
        return "MAC" if self.end_tidal_mac is not None else "vol%"

    def levels_percent(self, mac_percent: float) -> list[tuple[float, float]]:
        """(start time min, target vol%) of every level, the first at 0."""
        first = self.end_tidal_mac if self.end_tidal_mac is not None else self.end_tidal_percent
        scale = mac_percent if self.end_tidal_mac is not None else 1.0
        return [(0.0, first * scale)] + [(t, v * scale) for t, v in self.changes]


@dataclass(frozen=True)
class Constraints:
    """Limits on the advisor's plans.

    Parameters
    ----------
    min_fio2 : float, 0.21–0.95
        Lowest inspired O2 fraction allowed at any time.
    min_fgf_l_min, max_fgf_l_min : float, L/min, 0.2–20
        Lowest and highest total fresh gas flow.
    max_dial_percent : float or None, vol%, 0.1–25
        Largest dial setting (default: the vaporizer's largest).
    max_changes_per_hour : int, 0–30
        At most this many changes of the knobs in any hour (0: one setting throughout).
    dial_step_percent : float, vol%, 0.1–0.5
        Resolution of the dial settings.
    washin_o2_fraction : float, 0.21–1
        O2 fraction of the fresh gas (O2 with air) during wash-in; raised where needed to keep
        FIO2 above ``min_fio2``.
    follow_labelling : bool
        Keep to the agent's product labelling as circlesim's alert rules state it (for
        sevoflurane: no fresh gas flow below 1 L/min, at most 2 MAC-hours at 1 to < 2 L/min).
    """

    min_fio2: float = field(default=0.30, metadata=bounded(0.21, 0.95))
    min_fgf_l_min: float = field(default=0.5, metadata=bounded(0.2, 20.0, "L/min"))
    max_fgf_l_min: float = field(default=8.0, metadata=bounded(0.2, 20.0, "L/min"))
    max_dial_percent: float | None = field(default=None,
                                           metadata=optional_bounded(0.1, 25.0, "vol%"))
    max_changes_per_hour: int = field(default=6, metadata=bounded(0, 30))
    dial_step_percent: float = field(default=0.1, metadata=bounded(0.1, 0.5, "vol%"))
    washin_o2_fraction: float = field(default=0.5, metadata=bounded(0.21, 1.0))
    follow_labelling: bool = True

    def __post_init__(self) -> None:
        check_fields(self)
        object.__setattr__(self, "max_changes_per_hour", int(self.max_changes_per_hour))
        if not isinstance(self.follow_labelling, bool):
            raise InputError("Constraints.follow_labelling must be true or false; got "
                             f"{self.follow_labelling!r}.")


@dataclass(frozen=True)
class ParetoPoint:
    """One point of the trade-off between time to target and agent used.

    Attributes
    ----------
    time_to_target_min : float, min
        When end-tidal agent first comes within the tolerance of the first target.
    agent_ml : float, mL of liquid agent
    co2e_kg : float or None, kg CO2-equivalent
    washin_fgf_l_min, washin_min, maintenance_fgf_l_min : float
        The plan's flows (L/min) and wash-in length (min).
    plan : Plan
    """

    time_to_target_min: float
    agent_ml: float
    co2e_kg: float | None
    washin_fgf_l_min: float
    washin_min: float
    maintenance_fgf_l_min: float
    plan: Plan


@dataclass(frozen=True, eq=False)
class Advice:
    """The advisor's answer.

    Attributes
    ----------
    feasible : bool
        Whether the plan meets every target and limit (checked on ``result``).
    plan : Plan
        The recommended plan (or, if not feasible, the closest plan found).
    result : Result
        A run of ``plan`` with :func:`circlesim.simulate`.
    objective : str
    agent_ml : float
        Liquid agent delivered, mL.
    co2e_kg : float or None
        CO2-equivalent of the agent delivered, kg (GWP horizon ``gwp_horizon_years``).
    time_to_target_min : float or None
    reference : Result
        A plain high-flow plan holding the same targets (the target controller at
        ``reference_fgf_l_min``), for comparison.
    reference_fgf_l_min : float
    saved_ml, saved_percent : float
        Agent saved against ``reference``.
    pareto : tuple of ParetoPoint
        Least agent for different times to target (non-dominated points, fastest first).
    checks : dict of str to bool
        Each limit, checked on ``result``.
    problems : tuple of str
        What cannot be met, and why (empty when feasible).
    explanation : str
        The advice in words.
    gwp_horizon_years : int
    elapsed_s : float
        Time the advisor took, s.
    evaluations : int
        Runs of the model.
    """

    feasible: bool
    plan: Plan
    result: Result
    objective: str
    agent_ml: float
    co2e_kg: float | None
    time_to_target_min: float | None
    reference: Result
    reference_fgf_l_min: float
    saved_ml: float
    saved_percent: float
    pareto: tuple[ParetoPoint, ...]
    checks: dict[str, bool]
    problems: tuple[str, ...]
    explanation: str
    gwp_horizon_years: int
    elapsed_s: float
    evaluations: int

    @property
    def reference_holds_target(self) -> bool:
        """Whether the plain comparison plan meets every target (a like-for-like yardstick)."""
        control = self.reference.control
        return control is None or all(r.met for r in control.targets)

    def to_toml(self) -> str:
        """The plan as TOML (a ``[plan]`` table with ``[[plan.steps]]``)."""
        return plan_to_toml(self.plan)

    def table(self):
        """The plan's steps as a pandas table (time, flows, dial, note)."""
        return plan_table(self.plan)


def plan_table(plan: Plan):
    """The steps of a plan as a pandas table with every setting filled in."""
    import pandas as pd

    rows = []
    for seg, step in zip(plan.segments(500.0, 12.0), plan.steps, strict=True):
        minutes, seconds = divmod(round(seg.start_min * 60.0), 60)
        rows.append({"time": f"{int(minutes)}:{int(seconds):02d}", "time_min": seg.start_min,
                     "o2_l_min": seg.o2_l_min, "air_l_min": seg.air_l_min,
                     "total_fgf_l_min": round(seg.fgf_l_min, 3),
                     "dial_percent": seg.dial_percent, "note": step.note})
    return pd.DataFrame(rows)


# ---- the search --------------------------------------------------------------------------------
@dataclass
class _Candidate:
    washin_fgf: float
    t1: float
    maintenance_fgf: float
    solution: DialSolution
    o2_bump: float = 0.0
    deadline: float = 0.0
    on_scale: bool = False

    @property
    def fits(self) -> bool:
        return self.solution.fits

    @property
    def agent_ml(self) -> float:
        return self.solution.agent_ml


@dataclass
class _Problem:
    runner: Runner
    targets: Targets
    constraints: Constraints
    mac_percent: float
    max_dial: float
    min_fgf: float
    max_fgf: float
    levels: list[tuple[float, float]]
    vo2_l_min: float
    cache: dict = field(default_factory=dict)

    # -- pieces of a schedule ----------------------------------------------------------------
    def flows(self, total: float, o2_bump: float = 0.0) -> tuple[float, float]:
        """(O2, air) L/min for a total flow: the wash-in O2 share, raised for FIO2."""
        c = self.constraints
        aim = min(c.min_fio2 + FIO2_MARGIN + o2_bump, 1.0)
        # steady state of the circuit: FIO2 ≈ (F × FO2 − VO2) / (F − VO2)
        need = (aim * max(total - self.vo2_l_min, 0.0) + self.vo2_l_min) / total
        share = min(max(c.washin_o2_fraction, need), 1.0)
        o2_exact = total * (share - AIR_O2_FRACTION) / (1.0 - AIR_O2_FRACTION)
        o2 = min(math.ceil(o2_exact / METER_STEP_L_MIN - 1e-6) * METER_STEP_L_MIN, total)
        return round(o2, 4), round(total - o2, 4)

    def schedule(self, washin_fgf: float, t1: float, maintenance_fgf: float,
                 o2_bump: float = 0.0) -> Schedule:
        duration = self.targets.duration_min
        n = self.constraints.max_changes_per_hour
        if n == 0:
            times = [0.0, duration]
        else:
            spacing = 60.0 / n
            times = [0.0] + [float(x) for x in np.arange(t1, duration - 0.25 * spacing, spacing)]
            times.append(duration)
        patient = self.runner.patient
        base = dict(n2o_l_min=0.0, tidal_volume_ml=patient.default_tidal_volume_ml,
                    rate_per_min=patient.default_rate_per_min, valve=self.runner.circuit.valve)
        knobs, notes = [], []
        for i in range(len(times) - 1):
            total = washin_fgf if i == 0 else maintenance_fgf
            o2, air = self.flows(total, o2_bump)
            guess = self.max_dial if i == 0 else min(self.max_dial, self.level_at(times[i])
                                                     * (1.0 + 1.0 / total))
            knobs.append(Knobs(o2_l_min=o2, air_l_min=air, dial_percent=guess, **base))
            notes.append("wash-in" if i == 0 and len(times) > 2 else
                         ("reduce the flow" if i == 1 and washin_fgf != maintenance_fgf
                          else ""))
        return Schedule(tuple(times), tuple(knobs), tuple(notes))

    def level_at(self, t: float) -> float:
        value = self.levels[0][1]
        for start, level in self.levels:
            if t >= start - _EPS:
                value = level
        return value

    def band(self, deadline: float, spacing: float = BAND_SPACING_MIN) -> Band:
        """The end-tidal band when the first target is due at ``deadline``, every
        ``spacing`` min (plus the deadlines and the moments just before each change)."""
        tol = self.targets.tolerance
        duration = self.targets.duration_min
        starts = [deadline] + [start + self.targets.reach_within_min
                               for start, _ in self.levels[1:]]
        starts += [start - dt for start, _ in self.levels[1:] for dt in (0.1, 0.2)]
        t = np.unique(np.round(np.concatenate([
            np.arange(spacing, duration + _EPS, spacing),
            [x for x in starts if 0.0 < x <= duration]]), 9))
        target = np.array([self.level_at(x) for x in t]) / 100.0
        upper = (1.0 + tol) * target
        lower = np.where(t >= deadline - _EPS, (1.0 - tol) * target, -np.inf)
        for (start, level), (_, before) in zip(self.levels[1:], self.levels[:-1],
                                               strict=True):
            window = (t >= start - _EPS) & (t < start + self.targets.reach_within_min - _EPS)
            if level < before:  # coming down: not above the old level, not below the new
                upper[window] = (1.0 + tol) * before / 100.0
            else:
                lower[window] = -np.inf
        return Band(t, target, lower, upper)

    # -- one candidate ----------------------------------------------------------------------
    def evaluate(self, washin_fgf: float, t1: float, maintenance_fgf: float, deadline: float,
                 o2_bump: float = 0.0) -> _Candidate:
        t1 = float(np.clip(round(4.0 * t1) / 4.0, 0.25, self.targets.duration_min - 0.5))
        key = (round(washin_fgf, 3), t1, round(maintenance_fgf, 3), round(deadline, 3),
               o2_bump)
        hit = self.cache.get(key)
        if hit is not None:
            return hit
        sch = self.schedule(washin_fgf, t1, maintenance_fgf, o2_bump)
        y0 = self.runner.initial_state(sch.knobs[0])
        sol = solve_dials(self.runner, y0, sch, self.band(deadline),
                          dial_step=self.constraints.dial_step_percent, max_dial=self.max_dial,
                          integer=False)
        cand = _Candidate(washin_fgf, t1, maintenance_fgf, sol, o2_bump, deadline)
        self.cache[key] = cand
        return cand

    def polish(self, cand: _Candidate, margins: tuple[float, ...] = POLISH_MARGINS
               ) -> _Candidate:
        """The candidate with its dials on the vaporizer's scale (from its continuous dials),
        aiming as close to the band's edges as ``margins`` allow, tightest first."""
        if cand.on_scale:
            return cand
        key = ("polished", id(cand), margins)
        if key in self.cache:
            return self.cache[key]
        sch = cand.solution.schedule
        y0 = self.runner.initial_state(sch.knobs[0])
        band = self.band(cand.deadline)
        fine = self.band(cand.deadline, FINE_SPACING_MIN)
        sol = None
        # aim as close to the band's edges as the exact model, checked every 0.1 min, allows
        for margin in margins:
            trial = solve_dials(self.runner, y0, sch, band,
                                dial_step=self.constraints.dial_step_percent,
                                max_dial=self.max_dial, margin=margin, max_rounds=1)
            if trial.fits:
                trial = excursion_on(self.runner, y0, trial, fine)
            if sol is None or better(trial, sol):
                sol = trial
            if sol.fits or not cand.fits:
                break
        sol = drop_changes(self.runner, y0, sol, fine)
        polished = replace(cand, solution=sol, on_scale=True)
        self.cache[key] = polished
        return polished

    def polish_best(self, cand: _Candidate, tries: int = 4,
                    margins: tuple[float, ...] = POLISH_MARGINS) -> _Candidate:
        """Polish ``cand``; if its dials do not fit on the scale, the next best fitting
        candidates for the same deadline (least agent first)."""
        polished = self.polish(cand, margins)
        if polished.fits or not cand.fits:
            return polished
        others = sorted((c for c in self.cache.values()
                         if isinstance(c, _Candidate) and not c.on_scale and c.fits
                         and c.deadline == cand.deadline and c is not cand),
                        key=lambda c: c.agent_ml)
        for other in others[:tries]:
            trial = self.polish(other, margins)
            if trial.fits:
                return trial
        return polished

    # -- searches -----------------------------------------------------------------------------
    def maintenance_flows(self) -> list[float]:
        lo = self.min_fgf
        limit = _labelling_mac_hours(self.runner.vaporizer.agent)
        if self.constraints.follow_labelling and limit is not None:
            # the labelling limits MAC-hours at 1 to < 2 L/min: above it, 2 L/min or more
            mac_hours = sum(
                (end - start) * level / self.mac_percent for (start, level), end in zip(
                    self.levels, [t for t, _ in self.levels[1:]] + [self.targets.duration_min],
                    strict=True)) * (1.0 + self.targets.tolerance) / 60.0
            if mac_hours > limit and lo < 2.0 <= self.max_fgf + _EPS:
                lo = 2.0
        out = [lo]
        for x in (lo + 0.2, lo + 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 8.0, 12.0, 20.0):
            if out[-1] + 0.05 < x <= self.max_fgf + _EPS:
                out.append(round(x, 2))
        return out

    def least_agent(self, deadline: float, refine: bool = True,
                    margins: tuple[float, ...] = POLISH_MARGINS) -> _Candidate:
        """Least-agent plan (dials on the scale) reaching the first target by ``deadline``;
        the closest one if none does."""
        closest: _Candidate | None = None
        for f2 in self.maintenance_flows():
            best: _Candidate | None = None
            washins = [f2] + [x for x in WASHIN_FLOWS if f2 + _EPS < x <= self.max_fgf + _EPS]
            for f1 in washins:
                cand = self.evaluate(f1, deadline, f2, deadline)
                if closest is None or _closer(cand, closest):
                    closest = cand
                if cand.fits:
                    if best is not None and cand.agent_ml > best.agent_ml:
                        break  # more flow only vents more from here on
                    if best is None or cand.agent_ml < best.agent_ml:
                        best = cand
            if best is not None:
                if refine:
                    best = self.refine_t1(best, deadline)
                polished = self.polish_best(best, margins=margins)
                if polished.fits:
                    return polished
                closest = polished if _closer(polished, closest) else closest
        return self.polish(closest, margins)

    def refine_t1(self, cand: _Candidate, deadline: float) -> _Candidate:
        """Tune the wash-in length (the first change) with a bounded scalar search."""
        duration = self.targets.duration_min
        spacing = 60.0 / max(self.constraints.max_changes_per_hour, 1)
        hi = min(deadline + spacing, duration - 1.0)
        lo = max(0.5, 0.25 * deadline)
        if self.constraints.max_changes_per_hour == 0 or hi <= lo + 0.5:
            return cand
        best = [cand]

        def objective(t1: float) -> float:
            c = self.evaluate(cand.washin_fgf, t1, cand.maintenance_fgf, deadline)
            if c.fits and c.agent_ml < best[0].agent_ml:
                best[0] = c
            return c.agent_ml + (0.0 if c.fits else 1e3 * (1.0 + c.solution.excursion))

        minimize_scalar(objective, bounds=(lo, hi), method="bounded",
                        options={"xatol": 0.25, "maxiter": 8})
        return best[0]

    def fastest(self, upper: float, margins: tuple[float, ...] = POLISH_MARGINS
                ) -> tuple[_Candidate, float]:
        """Plan (dials on the scale) at the highest wash-in flow that reaches the target
        soonest, trying deadlines up to ``upper`` first; and that deadline (min)."""
        f2 = self.maintenance_flows()[0]
        f1 = self.max_fgf
        hi = max(upper, 0.5)
        cand = self.evaluate(f1, hi, f2, hi)
        while not cand.fits and hi < self.targets.duration_min / 2:
            hi = min(2.0 * hi, self.targets.duration_min / 2)
            cand = self.evaluate(f1, hi, f2, hi)
        if not cand.fits:
            return self.polish(cand, margins), hi
        lo = 0.25
        while hi - lo > 0.25:
            mid = 0.5 * (lo + hi)
            trial = self.evaluate(f1, mid, f2, mid)
            if trial.fits:
                hi, cand = mid, trial
            else:
                lo = mid
        for _ in range(4):  # the dials on the scale may need a little longer
            polished = self.polish_best(cand, tries=1, margins=margins)
            if polished.fits:
                return polished, hi
            hi += 0.25
            cand = self.evaluate(f1, hi, f2, hi)
        return polished, hi


def _closer(a: _Candidate, b: _Candidate) -> bool:
    if a.fits != b.fits:
        return a.fits
    if a.fits:
        return a.agent_ml < b.agent_ml
    return a.solution.excursion < b.solution.excursion


# ---- checking a plan ----------------------------------------------------------------------------
def check_plan(result: Result, targets: Targets, constraints: Constraints,
               max_dial: float) -> dict[str, bool]:
    """Each target and limit, checked on a run of a plan (``True``: met).

    Keys: "end_tidal_target", "fio2", "flow_range", "dial_range", "changes_per_hour",
    "labelling".
    """
    t = result.time_min
    et = result.end_tidal_percent("agent")
    mac = result.mac_percent
    levels = targets.levels_percent(mac)
    tol = targets.tolerance
    ok_target = True
    for i, (start, level) in enumerate(levels):
        last = i + 1 == len(levels)
        end = targets.duration_min if last else levels[i + 1][0]
        within = (t <= end + 1e-6) if last else (t < end - 1e-6)
        judged = (t >= start + targets.reach_within_min - 1e-6) & within
        if judged.any():
            ok_target &= bool(np.all(np.abs(et[judged] / level - 1.0) <= tol + 1e-9))
        before = (t >= start) & ~judged & within
        if before.any():  # on the way: never past the higher of the old and new level
            ceiling = max(level, levels[i - 1][1] if i else level)
            ok_target &= bool(np.all(et[before] <= (1.0 + tol) * ceiling + 1e-9))
    fio2 = result.inspired[:, result.gas_index("oxygen")]
    segments = result.plan.segments(result.patient.default_tidal_volume_ml,
                                    result.patient.default_rate_per_min, result.circuit.valve)
    flows = np.array([s.fgf_l_min for s in segments])
    dials = np.array([s.dial_percent for s in segments])
    changes = np.array(result.plan.step_times[1:])
    n = constraints.max_changes_per_hour
    per_hour = max((int(np.sum((changes >= c - 1e-9) & (changes < c + 60.0 - 1e-9)))
                    for c in changes), default=0)
    labelling = True
    if constraints.follow_labelling:
        keys = {r.key for r in default_rules(constraints.min_fio2)
                if r.agents is not None and result.agent in r.agents}
        labelling = not any(a.key in keys for a in result.alerts)
    return {
        "end_tidal_target": ok_target,
        "fio2": bool(np.all(fio2 >= constraints.min_fio2 - 1e-9)),
        "flow_range": bool(np.all(flows >= constraints.min_fgf_l_min - 1e-9)
                           and np.all(flows <= constraints.max_fgf_l_min + 1e-9)),
        "dial_range": bool(np.all(dials <= max_dial + 1e-9)),
        "changes_per_hour": per_hour <= n,
        "labelling": labelling,
    }


# ---- the public entry ---------------------------------------------------------------------------
def advise(patient: Patient, circuit: Circuit, vaporizer: Vaporizer, targets: Targets,
           constraints: Constraints | None = None, objective: str = "agent", *,
           absorber: Absorber | None = None, pareto: bool = True,
           reference_fgf_l_min: float = 4.0, gwp_horizon_years: int = DEFAULT_GWP_HORIZON
           ) -> Advice:
    """Recommend a flow and dial plan that meets ``targets`` within ``constraints``.

    Parameters
    ----------
    patient, circuit, vaporizer
        As for :func:`circlesim.simulate` (a vaporizer outside or inside the circle).
    targets : Targets
    constraints : Constraints, optional
    objective : {"agent", "co2e", "time"}
        Least liquid agent, least CO2-equivalent, or soonest at the target (then least agent).
    absorber : Absorber, optional
    pareto : bool
        Also compute the trade-off between time to target and agent used.
    reference_fgf_l_min : float, L/min, 1–20
        Flow of the plain high-flow plan the advice is compared with.
    gwp_horizon_years : {20, 100}
        Horizon of the global-warming potential for the CO2-equivalents.

    Returns
    -------
    Advice

    Raises
    ------
    InputError
        For invalid inputs (a bad number, a dial limit above the vaporizer's range).
    """
    start = time.perf_counter()
    absorber = Absorber() if absorber is None else absorber
    constraints = Constraints() if constraints is None else constraints
    for name, obj, kind in (("patient", patient, Patient), ("circuit", circuit, Circuit),
                            ("vaporizer", vaporizer, Vaporizer), ("targets", targets, Targets),
                            ("constraints", constraints, Constraints),
                            ("absorber", absorber, Absorber)):
        if not isinstance(obj, kind):
            raise InputError(f"{name} must be a {kind.__name__}; got {type(obj).__name__}.")
    objective = check_choice("advise", "objective", objective, OBJECTIVES)
    check_number("advise", "reference_fgf_l_min", reference_fgf_l_min,
                 Interval(1.0, 20.0, "L/min"))
    gwp_value = gwp(vaporizer.agent, gwp_horizon_years)
    if (constraints.max_dial_percent is not None
            and constraints.max_dial_percent > vaporizer.max_dial + _EPS):
        raise InputError(f"Constraints.max_dial_percent must be a number from 0.1 to "
                         f"{vaporizer.max_dial:g} vol% (the {vaporizer.agent} vaporizer's "
                         f"range); got {constraints.max_dial_percent:g}.")
    max_dial = (vaporizer.max_dial if constraints.max_dial_percent is None
                else constraints.max_dial_percent)
    mac = vaporizer.properties.mac_percent(patient.age_years)
    problems, min_fgf, max_fgf = _reconcile(constraints, vaporizer, targets)
    reference_plan = Plan((Step(0.0, o2_l_min=1.0, air_l_min=1.0, dial_percent=0.0),),
                          duration_min=targets.duration_min)
    runner = Runner(patient, circuit, absorber, vaporizer, reference_plan)
    vo2 = patient.vo2 / 1000.0 / atpd_to_stpd(circuit.gas_temperature_c,
                                              circuit.ambient_pressure_kpa)
    prob = _Problem(runner, targets, constraints, mac, max_dial, min_fgf, max_fgf,
                    targets.levels_percent(mac), vo2)
    deadline = targets.reach_within_min
    if deadline <= 0.0:
        best, when = prob.fastest(targets.duration_min / 4)
        problems.append(
            "A target time of 0 min cannot be met: end-tidal agent starts from zero and rises "
            "only as the lungs and circuit fill. "
            + (f"The soonest this equipment reaches the target is about {when:.1f} min (the "
               "plan given)." if best.fits else ""))
    elif objective == "time":
        best, when = prob.fastest(deadline)
        if best.fits:
            cheaper = prob.least_agent(when, refine=False)
            if cheaper.fits and cheaper.agent_ml < best.agent_ml:
                best = cheaper
            if when > deadline + _EPS:
                problems.append(_too_soon(prob, deadline, when))
    else:
        best = prob.least_agent(deadline)
        if not best.fits:
            fast, when = prob.fastest(deadline)
            if fast.fits and when > deadline + _EPS:  # reachable, only later than allowed
                problems.append(_too_soon(prob, deadline, when))
                later = prob.least_agent(when, refine=False)
                best = later if later.fits else fast
    best = _fix_fio2(prob, best)
    result = simulate(patient, circuit, _plan_of(prob, best, objective),
                      vaporizer=vaporizer, absorber=absorber,
                      fio2_threshold=constraints.min_fio2)
    checks = check_plan(result, targets, constraints, max_dial)
    if not constraints.follow_labelling:
        checks.pop("labelling")
    if not problems and (not best.fits or not all(checks.values())):
        problems.extend(_diagnose(prob, best, checks, deadline))
    elif not checks.get("fio2", True):
        problems.extend(_diagnose(prob, best, {"fio2": False}, deadline))
    agent_ml = float(result.agent_delivered_ml[-1])
    co2e = _co2e(result, gwp_value)
    reference = _reference(patient, circuit, absorber, vaporizer, targets,
                           reference_fgf_l_min)
    ref_ml = float(reference.agent_delivered_ml[-1])
    points = _pareto(prob, deadline, best, gwp_value) if pareto else ()
    feasible = not problems
    reach = _time_to_target(result, targets, mac)
    advice = Advice(
        feasible=feasible, plan=result.plan, result=result, objective=objective,
        agent_ml=agent_ml, co2e_kg=co2e, time_to_target_min=reach, reference=reference,
        reference_fgf_l_min=float(reference_fgf_l_min), saved_ml=ref_ml - agent_ml,
        saved_percent=100.0 * (ref_ml - agent_ml) / ref_ml if ref_ml > 0 else 0.0,
        pareto=points, checks=checks, problems=tuple(problems), explanation="",
        gwp_horizon_years=int(gwp_horizon_years), elapsed_s=0.0,
        evaluations=runner.calls)
    return replace(advice, explanation=_explain(advice, prob, best, reference),
                   elapsed_s=time.perf_counter() - start)


# ---- helpers of advise -------------------------------------------------------------------------
def _reconcile(constraints: Constraints, vaporizer: Vaporizer, targets: Targets
               ) -> tuple[list[str], float, float]:
    """Problems with the limits themselves, and the flow range actually searched."""
    problems: list[str] = []
    lo, hi = constraints.min_fgf_l_min, constraints.max_fgf_l_min
    if lo > hi:
        problems.append(f"The lowest fresh gas flow ({lo:g} L/min) is above the highest "
                        f"({hi:g} L/min): both cannot hold. The plan given keeps the flow at "
                        f"{lo:g} L/min and meets the other limits.")
        hi = lo
    label = _labelling_min_flow(vaporizer.agent) if constraints.follow_labelling else None
    if label is not None and label > lo:
        if label > hi:
            problems.append(f"The {vaporizer.agent} labelling asks for at least {label:g} L/min "
                            f"of fresh gas, above the highest flow allowed ({hi:g} L/min): both "
                            f"cannot hold. The plan given follows the labelling.")
            hi = label
        lo = label
    if constraints.max_changes_per_hour == 0 and targets.changes:
        problems.append("With no changes allowed (max_changes_per_hour = 0) the later "
                        "changes of the target cannot be followed; the plan given holds one "
                        "setting throughout.")
    return problems, lo, hi


def _labelling_min_flow(agent: str) -> float | None:
    """Lowest flow the agent's labelling allows, from circlesim's alert rules (or None)."""
    for rule in default_rules():
        if (rule.agents is not None and agent in rule.agents
                and rule.watches == "fresh_gas_while_agent_l_min"):
            return float(rule.threshold)
    return None


def _labelling_mac_hours(agent: str) -> float | None:
    """Most MAC-hours the agent's labelling allows at 1 to < 2 L/min (alert rules), or None."""
    for rule in default_rules():
        if (rule.agents is not None and agent in rule.agents
                and rule.watches == "mac_hours_at_1_to_2_l_min"):
            return float(rule.threshold)
    return None


def _plan_of(prob: _Problem, cand: _Candidate, objective: str) -> Plan:
    what = {"agent": "least liquid agent", "co2e": "least CO2-equivalent",
            "time": "soonest at the target"}[objective]
    return cand.solution.schedule.to_plan(
        name=f"advised plan ({what})",
        description=(f"Recommended by circlesim's plan advisor: wash-in at "
                     f"{cand.washin_fgf:g} L/min, then {cand.maintenance_fgf:g} L/min."))


def _fix_fio2(prob: _Problem, cand: _Candidate) -> _Candidate:
    """Raise the O2 share until FIO2 stays above the limit in the exact run (3 tries)."""
    for bump in (0.05, 0.15, 0.3):
        result = simulate(prob.runner.patient, prob.runner.circuit,
                          _plan_of(prob, cand, "agent"), vaporizer=prob.runner.vaporizer,
                          absorber=prob.runner.absorber)
        fio2 = result.inspired[:, result.gas_index("oxygen")]
        if fio2.min() >= prob.constraints.min_fio2:
            return cand
        cand = prob.polish(prob.evaluate(cand.washin_fgf, cand.t1, cand.maintenance_fgf,
                                         cand.deadline, o2_bump=cand.o2_bump + bump))
    return cand


def _reach_time(prob: _Problem, cand: _Candidate) -> float:
    """First band time at which the candidate is within the tolerance of the first target."""
    level = prob.levels[0][1] / 100.0
    ok = np.abs(cand.solution.et / level - 1.0) <= prob.targets.tolerance
    return float(cand.solution.time_min[np.argmax(ok)]) if ok.any() else float(cand.t1)


def _time_to_target(result: Result, targets: Targets, mac: float) -> float | None:
    level = targets.levels_percent(mac)[0][1]
    e = np.abs(result.end_tidal_percent("agent") / level - 1.0) <= targets.tolerance
    return float(result.time_min[np.argmax(e)]) if e.any() else None


def _co2e(result: Result, gwp_value) -> float | None:
    grams = float(result.grams(result.cumulative["delivered"][-1, result.gas_index("agent")]))
    return co2_equivalent_kg(grams, gwp_value)


def _reference(patient: Patient, circuit: Circuit, absorber: Absorber, vaporizer: Vaporizer,
               targets: Targets, flow: float) -> Result:
    """A plain high-flow plan: O2/air 1:1 at ``flow``, the controller holding the targets."""
    key = "target_mac" if targets.unit == "MAC" else "target_end_tidal_percent"
    first = (targets.end_tidal_mac if targets.unit == "MAC" else targets.end_tidal_percent)
    steps = [Step(0.0, o2_l_min=flow / 2, air_l_min=flow / 2, note=f"plain {flow:g} L/min",
                  **{key: first})]
    steps += [Step(t, **{key: v}) for t, v in targets.changes]
    plan = Plan(tuple(steps), duration_min=targets.duration_min,
                name=f"plain high flow ({flow:g} L/min)")
    return simulate_with_targets(patient, circuit, plan, vaporizer=vaporizer,
                                 absorber=absorber, settings=ControllerSettings())


def _pareto(prob: _Problem, deadline: float, best: _Candidate, gwp_value
            ) -> tuple[ParetoPoint, ...]:
    """Least agent for a spread of deadlines; the non-dominated points."""
    fastest, soonest = prob.fastest(max(deadline, 0.5), PARETO_MARGINS)
    if not fastest.fits:
        return ()
    far = max(3.0 * max(deadline, soonest), 20.0)
    deadlines = sorted({round(x, 1) for x in np.geomspace(soonest, far, 4)[1:]}
                       - {round(deadline, 1)})
    cands = [fastest, best] + [prob.least_agent(d, refine=False, margins=PARETO_MARGINS)
                               for d in deadlines]
    points = []
    for c in cands:
        if not c.fits:
            continue
        c = prob.polish_best(c, tries=1, margins=PARETO_MARGINS)
        if not c.fits:
            continue
        plan = _plan_of(prob, c, "agent")
        reach = _reach_time(prob, c)
        grams = c.agent_ml * prob.runner.vaporizer.properties.liquid_density_g_ml
        points.append(ParetoPoint(reach, c.agent_ml, co2_equivalent_kg(grams, gwp_value),
                                  c.washin_fgf, c.t1, c.maintenance_fgf, plan))
    points.sort(key=lambda p: (p.time_to_target_min, p.agent_ml))
    front: list[ParetoPoint] = []
    for p in points:
        if not front or p.agent_ml < front[-1].agent_ml - 1e-6:
            front.append(p)
    return tuple(front)


def _full_dial_et(prob: _Problem, time_min: float) -> float:
    """End-tidal agent (vol%) at ``time_min`` with the dial fully open at the highest flow
    allowed from the start: the most the equipment can give by then."""
    runner = prob.runner
    full = Knobs(*prob.flows(prob.max_fgf), n2o_l_min=0.0, dial_percent=prob.max_dial,
                 tidal_volume_ml=runner.patient.default_tidal_volume_ml,
                 rate_per_min=runner.patient.default_rate_per_min, valve=runner.circuit.valve)
    at = max(time_min, 0.1)
    states, _ = runner.run(runner.initial_state(full), [full], np.array([0.0, at]),
                           np.array([at]))
    return float(states[-1, runner.et_index]) * 100.0


def _too_soon(prob: _Problem, deadline: float, when: float) -> str:
    """Why the target cannot be reached in the time allowed, with the numbers."""
    et = _full_dial_et(prob, deadline)
    first = prob.levels[0][1]
    return (f"The target cannot be reached within {deadline:g} min: even at "
            f"{prob.max_fgf:g} L/min with the dial at {prob.max_dial:g} % end-tidal is only "
            f"{et:.2f} % then ({100 * (1 - et / first):.0f} % short of {first:.2f} %). The plan "
            f"given reaches it as soon as the limits allow, at about {when:.1f} min.")


def _diagnose(prob: _Problem, best: _Candidate, checks: dict[str, bool], deadline: float
              ) -> list[str]:
    """Which target or limit the closest plan misses, and by how much."""
    out = []
    if not checks.get("end_tidal_target", True) or not best.fits:
        at_end = _full_dial_et(prob, prob.targets.duration_min)
        tol = prob.targets.tolerance
        top = max(level for _, level in prob.levels)
        if at_end < (1.0 - tol) * top:
            out.append(f"The target end-tidal {top:.2f} % is above what the {prob.max_dial:g} % "
                       f"dial can give at any allowed flow: even at {prob.max_fgf:g} L/min with "
                       f"the dial fully open end-tidal reaches only {at_end:.2f} % "
                       f"({100 * (1 - at_end / top):.0f} % short). The plan given comes "
                       "closest.")
        else:
            out.append(f"No plan within the limits keeps end-tidal within "
                       f"{100 * tol:g} % of the target (closest: "
                       f"{100 * best.solution.excursion:.1f} % beyond the band). Allow more "
                       "changes per hour, a finer dial step or a wider flow range.")
    if not checks.get("fio2", True):
        out.append(f"FIO2 cannot be kept above {prob.constraints.min_fio2:g} with these flows; "
                   "raise the lowest flow or the O2 share.")
    for key, words in (("flow_range", "the flow range"), ("dial_range", "the dial limit"),
                       ("changes_per_hour", "the number of changes per hour"),
                       ("labelling", "the agent's labelling")):
        if not checks.get(key, True):
            out.append(f"The closest plan does not keep to {words}.")
    return out


def _explain(advice: Advice, prob: _Problem, best: _Candidate, reference: Result) -> str:
    t = prob.targets
    c = prob.constraints
    agent = prob.runner.vaporizer.agent
    first = prob.levels[0][1]
    unit_text = (f"{t.end_tidal_mac:g} MAC ({first:.2f} %)" if t.unit == "MAC"
                 else f"{first:.2f} %")
    goal = {"agent": "the least liquid agent", "co2e": "the least CO2-equivalent",
            "time": "the soonest time to target"}[advice.objective]
    lines = [f"Aim: end-tidal {agent} {unit_text} within {t.reach_within_min:g} min, held "
             f"within ±{100 * t.tolerance:g} % to {t.duration_min:g} min, with {goal}; limits: "
             f"flow {prob.min_fgf:g}–{prob.max_fgf:g} L/min, FIO2 ≥ {c.min_fio2:g}, dial ≤ "
             f"{prob.max_dial:g} % in {c.dial_step_percent:g} % steps, at most "
             f"{c.max_changes_per_hour} changes per hour"
             + (", product labelling followed." if c.follow_labelling else ".")]
    if advice.feasible:
        lines.append("Plan: " + _describe_plan(best))
    else:
        lines.append("Cannot be met: " + " ".join(advice.problems))
        lines.append("Closest plan: " + _describe_plan(best))
    reach = advice.time_to_target_min
    lines.append(f"Predicted: target reached at {reach:.1f} min; " if reach is not None else
                 "Predicted: target not reached; ")
    co2 = "" if advice.co2e_kg is None else (
        f", {advice.co2e_kg:.1f} kg CO2-equivalent (GWP{advice.gwp_horizon_years})")
    lines[-1] += f"{advice.agent_ml:.1f} mL of liquid {agent}{co2}."
    ref_ml = float(reference.agent_delivered_ml[-1])
    missed = [r for r in reference.control.targets if not r.met]
    if not advice.reference_holds_target:  # no like-for-like yardstick: say so
        lines.append(f"Against a plain {advice.reference_fgf_l_min:g} L/min plan, which does "
                     f"NOT hold the same target ({missed[0].message.rstrip('.')}), "
                     f"{ref_ml:.1f} mL: {advice.saved_ml:.1f} mL saved "
                     f"({advice.saved_percent:.0f} %), not a like-for-like comparison.")
    else:
        lines.append(f"Against a plain {advice.reference_fgf_l_min:g} L/min plan holding the "
                     f"same target ({ref_ml:.1f} mL): {advice.saved_ml:.1f} mL saved "
                     f"({advice.saved_percent:.0f} %).")
    return "\n".join(lines)


def _describe_plan(cand: _Candidate) -> str:
    sch = cand.solution.schedule
    first = sch.knobs[0]
    text = (f"start at {first.fgf_l_min:g} L/min (O2 {first.o2_l_min:g}, air "
            f"{first.air_l_min:g}) with the dial at {first.dial_percent:g} %")
    if cand.washin_fgf != cand.maintenance_fgf:
        text += f"; at {cand.t1:.1f} min reduce to {cand.maintenance_fgf:g} L/min"
    dials = [k.dial_percent for k in sch.knobs[1:]]
    if dials:
        text += f"; the dial then {min(dials):g}–{max(dials):g} % ({len(sch.changes())} changes)"
    return text + "."


def summary_rows(advice: Advice) -> list[tuple[str, Any]]:
    """Headline figures as (label, value) pairs for front ends."""
    return [("feasible", advice.feasible), ("agent used (mL)", round(advice.agent_ml, 1)),
            ("CO2-equivalent (kg)", None if advice.co2e_kg is None else round(advice.co2e_kg,
                                                                              1)),
            ("time to target (min)", advice.time_to_target_min),
            (f"plain {advice.reference_fgf_l_min:g} L/min plan (mL)",
             round(float(advice.reference.agent_delivered_ml[-1]), 1)),
            ("saved (mL)", round(advice.saved_ml, 1)),
            ("saved (%)", round(advice.saved_percent, 0))]
