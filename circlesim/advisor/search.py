"""The advisor's search for flow and dial schedules (analysis).

A plan has a wash-in stretch at flow F1 (L/min) until time t1 (min), then flow F2; the dial may
change at t1 and every 60/N minutes after it. For each (F1, t1, F2) :class:`Problem` gets the
dials from a mixed-integer programme on the linearised model
(:func:`circlesim.advisor.schedule.solve_dials`), checked against the exact model. F2 is the
lowest flow the limits allow that still fits; F1 is scanned upwards from F2; t1 is refined with
:func:`scipy.optimize.minimize_scalar`. :class:`Candidate` is one plan tried; :func:`plan_of`
turns it into a :class:`~circlesim.domain.plan.Plan` and :func:`fix_fio2` raises its O2 share
until FIO2 holds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.optimize import minimize_scalar

from circlesim.advisor.checks import labelling_mac_hours
from circlesim.advisor.inputs import Constraints, Targets
from circlesim.advisor.schedule import (
    Band,
    DialSolution,
    Schedule,
    better,
    drop_changes,
    excursion_on,
    solve_dials,
)
from circlesim.domain.plan import AIR_O2_FRACTION, Plan
from circlesim.engine.runner import Knobs, Runner
from circlesim.targets.predict import simulate

__all__ = ["EPS", "Candidate", "Problem", "fix_fio2", "plan_of"]

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
#: FIO2 margin above the limit aimed at when choosing the O2 share of the fresh gas.
FIO2_MARGIN = 0.04
#: Tolerance of the comparisons of times (min) and flows (L/min).
EPS = 1e-9


@dataclass
class Candidate:
    """One plan the search tried.

    Attributes
    ----------
    washin_fgf : float, L/min
        Fresh gas flow until ``t1``.
    t1 : float, min
        End of the wash-in stretch.
    maintenance_fgf : float, L/min
        Fresh gas flow after ``t1``.
    solution : DialSolution
        The dials and how well they keep to the band.
    o2_bump : float, fraction
        Raise of the FIO2 aimed at when choosing the O2 share.
    deadline : float, min
        When the first target was due.
    on_scale : bool
        Whether the dials are on the vaporizer's scale.
    """

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
class Problem:
    """One advisor question and its searches.

    Attributes
    ----------
    runner : Runner
        Runs the model for the patient and equipment.
    targets : Targets
    constraints : Constraints
    mac_percent : float, vol%
        The patient's age-adjusted MAC.
    max_dial : float, vol%
        Largest dial setting allowed.
    min_fgf, max_fgf : float, L/min
        Fresh gas flow range searched (after the labelling).
    levels : list of (float, float)
        (start time min, target vol%) of every target level.
    vo2_l_min : float, L/min
        O2 uptake at the circuit's conditions.
    cache : dict
        Candidates tried, by their flows, times and deadline.
    """

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
            if t >= start - EPS:
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
            np.arange(spacing, duration + EPS, spacing),
            [x for x in starts if 0.0 < x <= duration]]), 9))
        target = np.array([self.level_at(x) for x in t]) / 100.0
        upper = (1.0 + tol) * target
        lower = np.where(t >= deadline - EPS, (1.0 - tol) * target, -np.inf)
        for (start, level), (_, before) in zip(self.levels[1:], self.levels[:-1],
                                               strict=True):
            window = (t >= start - EPS) & (t < start + self.targets.reach_within_min - EPS)
            if level < before:  # coming down: not above the old level, not below the new
                upper[window] = (1.0 + tol) * before / 100.0
            else:
                lower[window] = -np.inf
        return Band(t, target, lower, upper)

    # -- one candidate ----------------------------------------------------------------------
    def evaluate(self, washin_fgf: float, t1: float, maintenance_fgf: float, deadline: float,
                 o2_bump: float = 0.0) -> Candidate:
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
        cand = Candidate(washin_fgf, t1, maintenance_fgf, sol, o2_bump, deadline)
        self.cache[key] = cand
        return cand

    def polish(self, cand: Candidate, margins: tuple[float, ...] = POLISH_MARGINS
               ) -> Candidate:
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

    def polish_best(self, cand: Candidate, tries: int = 4,
                    margins: tuple[float, ...] = POLISH_MARGINS) -> Candidate:
        """Polish ``cand``; if its dials do not fit on the scale, the next best fitting
        candidates for the same deadline (least agent first)."""
        polished = self.polish(cand, margins)
        if polished.fits or not cand.fits:
            return polished
        others = sorted((c for c in self.cache.values()
                         if isinstance(c, Candidate) and not c.on_scale and c.fits
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
        limit = labelling_mac_hours(self.runner.vaporizer.agent)
        if self.constraints.follow_labelling and limit is not None:
            # the labelling limits MAC-hours at 1 to < 2 L/min: above it, 2 L/min or more
            mac_hours = sum(
                (end - start) * level / self.mac_percent for (start, level), end in zip(
                    self.levels, [t for t, _ in self.levels[1:]] + [self.targets.duration_min],
                    strict=True)) * (1.0 + self.targets.tolerance) / 60.0
            if mac_hours > limit and lo < 2.0 <= self.max_fgf + EPS:
                lo = 2.0
        out = [lo]
        for x in (lo + 0.2, lo + 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 8.0, 12.0, 20.0):
            if out[-1] + 0.05 < x <= self.max_fgf + EPS:
                out.append(round(x, 2))
        return out

    def least_agent(self, deadline: float, refine: bool = True,
                    margins: tuple[float, ...] = POLISH_MARGINS) -> Candidate:
        """Least-agent plan (dials on the scale) reaching the first target by ``deadline``;
        the closest one if none does."""
        closest: Candidate | None = None
        for f2 in self.maintenance_flows():
            best: Candidate | None = None
            washins = [f2] + [x for x in WASHIN_FLOWS if f2 + EPS < x <= self.max_fgf + EPS]
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

    def refine_t1(self, cand: Candidate, deadline: float) -> Candidate:
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
                ) -> tuple[Candidate, float]:
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


def _closer(a: Candidate, b: Candidate) -> bool:
    if a.fits != b.fits:
        return a.fits
    if a.fits:
        return a.agent_ml < b.agent_ml
    return a.solution.excursion < b.solution.excursion


def plan_of(prob: Problem, cand: Candidate, objective: str) -> Plan:
    """The candidate as a plan (flows in L/min, dials in vol%) named after ``objective``.

    Parameters
    ----------
    prob : Problem
    cand : Candidate
    objective : {"agent", "co2e", "time"}
    """
    what = {"agent": "least liquid agent", "co2e": "least CO2-equivalent",
            "time": "soonest at the target"}[objective]
    return cand.solution.schedule.to_plan(
        name=f"advised plan ({what})",
        description=(f"Recommended by circlesim's plan advisor: wash-in at "
                     f"{cand.washin_fgf:g} L/min, then {cand.maintenance_fgf:g} L/min."))


def fix_fio2(prob: Problem, cand: Candidate) -> Candidate:
    """Raise the O2 share until FIO2 stays above the limit in the exact run (3 tries).

    Returns
    -------
    Candidate
        ``cand``, or one with more O2 in the fresh gas (L/min) and its dials polished again.
    """
    for bump in (0.05, 0.15, 0.3):
        result = simulate(prob.runner.patient, prob.runner.circuit,
                          plan_of(prob, cand, "agent"), vaporizer=prob.runner.vaporizer,
                          absorber=prob.runner.absorber)
        fio2 = result.inspired[:, result.gas_index("oxygen")]
        if fio2.min() >= prob.constraints.min_fio2:
            return cand
        cand = prob.polish(prob.evaluate(cand.washin_fgf, cand.t1, cand.maintenance_fgf,
                                         cand.deadline, o2_bump=cand.o2_bump + bump))
    return cand
