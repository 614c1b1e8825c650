"""Least-agent dial settings for a given flow schedule, by mixed-integer programming (analysis).

The advisor (:mod:`circlesim.advisor.advise`) fixes when the flows change and to what; this module
chooses the dial for every stretch of such a :class:`Schedule` so that end-tidal agent stays
inside a target band (:class:`Band`) with the least liquid agent, in whole steps of the
vaporizer's scale.

End-tidal agent is close to linear in the dial settings (the model is linear in the agent
except for its own small effect on gas volumes), so around a trial set of dials the
prediction is ``E(d) ≈ E(d̄) + S (d − d̄)`` with the sensitivities ``S`` from one run of the
model per stretch. The dials then follow from a small mixed-integer linear programme
(:func:`scipy.optimize.linprog` with continuous dials, HiGHS): a slack variable for the
largest relative excursion outside the band (so the closest schedule is found when none
fits), and the linearised agent delivered as the objective. The linearisation is renewed
around the new dials and the programme solved again until the dials settle (usually two or
three rounds). A last mixed-integer round (:func:`scipy.optimize.milp`) puts the dials on the
vaporizer's scale, and the exact model checks the result.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import Bounds, LinearConstraint, linprog, milp

from circlesim.base.units import vapour_l_stpd_to_liquid_ml
from circlesim.domain.plan import Plan, Step
from circlesim.engine.runner import Knobs, Runner

__all__ = ["Band", "DialSolution", "Schedule", "better", "drop_changes", "excursion_on",
           "solve_dials"]

#: Largest extra liquid agent (mL) accepted to drop one dial change from a plan.
CHANGE_WORTH_ML = 0.02
#: The mixed-integer round looks this many steps either side of the linearisation's dials.
NEAR_STEPS = 2
#: Relative optimality gap at which the mixed-integer round stops (HiGHS).
MIP_GAP = 0.002
#: Cost of excursions outside the band, mL of liquid agent per unit of relative excursion.
EXCURSION_COST_ML = 1.0e4
_EPS = 1e-9


@dataclass(frozen=True)
class Schedule:
    """Piecewise-constant settings: ``knobs[k]`` from ``times[k]`` to ``times[k + 1]``.

    Attributes
    ----------
    times : tuple of float, min
        Boundaries, strictly increasing, from 0 to the end of the plan.
    knobs : tuple of Knobs
        Settings of each stretch (``len(times) - 1`` of them).
    notes : tuple of str
        A note for each stretch ("" for none).
    """

    times: tuple[float, ...]
    knobs: tuple[Knobs, ...]
    notes: tuple[str, ...] = ()

    @property
    def dials(self) -> np.ndarray:
        """Dial of each stretch, vol%."""
        return np.array([k.dial_percent for k in self.knobs])

    def with_dials(self, dials: np.ndarray) -> Schedule:
        """A copy with other dials (vol%)."""
        knobs = tuple(k._replace(dial_percent=float(round(d, 6)))
                      for k, d in zip(self.knobs, dials, strict=True))
        return replace(self, knobs=knobs)

    def to_plan(self, name: str, description: str = "") -> Plan:
        """The schedule as a plan a person can follow: one step per change of the knobs."""
        steps: list[Step] = []
        previous: Knobs | None = None
        notes = self.notes or ("",) * len(self.knobs)
        for t, knobs, note in zip(self.times[:-1], self.knobs, notes, strict=True):
            if previous is None:
                steps.append(Step(time_min=t, o2_l_min=knobs.o2_l_min,
                                  air_l_min=knobs.air_l_min, n2o_l_min=knobs.n2o_l_min,
                                  dial_percent=knobs.dial_percent, note=note))
            elif knobs != previous:
                changed = {name: value for name, value in knobs._asdict().items()
                           if getattr(previous, name) != value}
                steps.append(Step(time_min=t, note=note, **changed))
            previous = knobs
        return Plan(tuple(steps), duration_min=self.times[-1], name=name,
                    description=description)

    def changes(self) -> np.ndarray:
        """Times (min) at which the knobs change, after the first setting."""
        return np.array([t for t, a, b in zip(self.times[1:-1], self.knobs[:-1],
                                              self.knobs[1:], strict=True) if a != b])


@dataclass(frozen=True)
class Band:
    """The end-tidal band the dials must keep, at evaluation times.

    Attributes
    ----------
    time_min : ndarray, shape (M,), min
    target : ndarray, shape (M,), fraction
        End-tidal target (dry-gas fraction).
    lower, upper : ndarray, shape (M,), fraction
        Band limits (``-inf`` for no lower limit while the target is being approached).
    """

    time_min: np.ndarray
    target: np.ndarray
    lower: np.ndarray
    upper: np.ndarray

    def excursion(self, et: np.ndarray) -> np.ndarray:
        """Relative excursion outside the band at each time (0 inside), shape (M,)."""
        out = np.maximum(self.lower - et, et - self.upper)
        return np.maximum(out, 0.0) / self.target

    def narrowed(self, margin: float) -> Band:
        """The band narrowed by ``margin`` × target on each side."""
        return replace(self, lower=self.lower + margin * self.target,
                       upper=self.upper - margin * self.target)


@dataclass(frozen=True)
class DialSolution:
    """Dials for one flow schedule.

    Attributes
    ----------
    schedule : Schedule
        With the chosen dials.
    excursion : float
        Largest relative excursion outside the band in the exact model (0: inside).
    agent_ml : float
        Liquid agent delivered, mL.
    et : ndarray, shape (M,)
        End-tidal agent fraction at ``time_min`` (exact model).
    rounds : int
        Linearise-and-solve rounds used.
    time_min : ndarray, shape (M,), min
        Times of ``et`` (the band's).
    """

    schedule: Schedule
    excursion: float
    agent_ml: float
    et: np.ndarray
    rounds: int
    time_min: np.ndarray

    @property
    def fits(self) -> bool:
        """Whether end-tidal agent stays inside the band."""
        return self.excursion <= 1e-9


def _liquid_ml(runner: Runner, vapour_l: np.ndarray) -> np.ndarray:
    agent = runner.vaporizer.properties
    return vapour_l_stpd_to_liquid_ml(vapour_l, agent.liquid_density_g_ml,
                                      agent.molar_mass_g_mol)


def _evaluate(runner: Runner, y0: np.ndarray, schedules: list[Schedule], band: Band
              ) -> tuple[np.ndarray, np.ndarray]:
    """End-tidal fraction at the band's times (B, M) and agent delivered, mL (B,)."""
    times = np.asarray(schedules[0].times)
    t_out = np.concatenate([band.time_min, [times[-1]]])
    out_et, out_ml = [], []
    for sch in schedules:
        states, final = runner.run(y0, list(sch.knobs), times, t_out)
        out_et.append(states[:-1, runner.et_index])
        out_ml.append(_liquid_ml(runner, final[runner.delivered_index]))
    return np.array(out_et), np.array(out_ml, dtype=float)


def solve_dials(runner: Runner, y0: np.ndarray, schedule: Schedule, band: Band, *,
                dial_step: float, max_dial: float, margin: float = 0.01,
                max_rounds: int = 4, integer: bool = True) -> DialSolution:
    """Least-agent dials that keep end-tidal agent inside ``band``.

    Parameters
    ----------
    runner : Runner
    y0 : ndarray
        State at time 0.
    schedule : Schedule
        Flows (and everything but the dial) of each stretch; its dials are the first guess.
    band : Band
    dial_step : float, vol%
        Step of the vaporizer's scale.
    max_dial : float, vol%
        Largest dial allowed.
    margin : float, fraction
        The programme aims inside the band narrowed by this much (linearisation and the
        gaps between evaluation times).
    max_rounds : int
        Linearise-and-solve rounds with continuous dials.
    integer : bool
        Finish with dials on the vaporizer's scale (a mixed-integer round from the last
        linearisation, checked with the exact model); otherwise the dials are continuous
        (fast, for screening).

    Returns
    -------
    DialSolution
        The best dials found; ``excursion`` > 0 when no dials keep the band (the closest).
    """
    k = len(schedule.knobs)
    top = np.floor(max_dial / dial_step + 1e-9) * dial_step
    dials = np.clip(schedule.dials, 0.0, top)
    aim = band.narrowed(margin)
    best: DialSolution | None = None
    last: tuple | None = None
    for rounds in range(1, max_rounds + 1):
        current = schedule.with_dials(dials)
        delta = max(5 * dial_step, 0.06 * max_dial)
        steps = np.where(dials + delta <= top + _EPS, delta, -delta)
        trials = [current]
        for j in range(k):
            d = dials.copy()
            d[j] += steps[j]
            trials.append(current.with_dials(d))
        et, ml = _evaluate(runner, y0, trials, band)
        solution = DialSolution(current, float(band.excursion(et[0]).max()), float(ml[0]),
                                et[0], rounds, band.time_min)
        if best is None or better(solution, best):
            best = solution
        sens = ((et[1:] - et[0]) / steps[:, None]).T  # (M, k), fraction per vol%
        grad = (ml[1:] - ml[0]) / steps  # mL per vol%
        last = (et[0], sens, grad, dials)
        new = _programme(*last, aim, top, None)
        if new is None or np.max(np.abs(new - dials)) < 0.2 * dial_step:
            break
        dials = new
    if not integer:
        return best
    # on the vaporizer's scale: a mixed-integer round from the last linearisation, and if
    # the exact model disagrees, one more about the rounded dials
    on_scale: DialSolution | None = None
    for extra in range(2):
        e0, sens, grad, around = last
        rounded = _programme(e0, sens, grad, around, aim, top, dial_step)
        if rounded is None:  # fall back to the nearest steps
            rounded = np.clip(np.round(best.schedule.dials / dial_step) * dial_step, 0.0, top)
        current = schedule.with_dials(rounded)
        et, ml = _evaluate(runner, y0, [current], band)
        solution = DialSolution(current, float(band.excursion(et[0]).max()), float(ml[0]),
                                et[0], best.rounds + 1 + extra, band.time_min)
        if on_scale is None or better(solution, on_scale):
            on_scale = solution
        if on_scale.fits or extra == 1:
            break
        steps = np.where(rounded + delta <= top + _EPS, delta, -delta)
        et_p, ml_p = _evaluate(runner, y0, [current.with_dials(rounded + steps[j] * np.eye(k)[j])
                                            for j in range(k)], band)
        last = (et[0], ((et_p - et[0]) / steps[:, None]).T, (ml_p - ml[0]) / steps, rounded)
    return on_scale


def better(a: DialSolution, b: DialSolution) -> bool:
    """Whether ``a`` beats ``b``: inside the band first, then less agent."""
    if a.fits != b.fits:
        return a.fits
    if not a.fits:
        return a.excursion < b.excursion
    return a.agent_ml < b.agent_ml


def _programme(e0: np.ndarray, sens: np.ndarray, grad: np.ndarray, dials: np.ndarray,
               band: Band, top: float, dial_step: float | None) -> np.ndarray | None:
    """Solve the linear programme about ``dials`` (integer dial steps if ``dial_step``).

    Variables: the dials (vol%, or whole steps) and ``s``, the largest relative excursion
    outside the band; objective: linearised agent plus :data:`EXCURSION_COST_ML` × ``s``.
    Returns the new dials (vol%), or None if the solver fails.
    """
    k = sens.shape[1]
    scale = 1.0 if dial_step is None else dial_step
    offset = e0 - sens @ dials  # E ≈ offset + sens @ dials
    has_lower = np.isfinite(band.lower)
    a = np.vstack([np.hstack([sens * scale, -band.target[:, None]]),
                   np.hstack([-sens[has_lower] * scale, -band.target[has_lower][:, None]])])
    b = np.concatenate([band.upper - offset, offset[has_lower] - band.lower[has_lower]])
    c = np.concatenate([grad * scale, [EXCURSION_COST_ML]])
    upper = np.concatenate([np.full(k, top / scale), [np.inf]])
    if dial_step is None:
        res = linprog(c, A_ub=a, b_ub=b, bounds=list(zip(np.zeros(k + 1), upper,
                                                         strict=True)), method="highs",
                      options={"presolve": False})
        return None if res.x is None else np.clip(res.x[:k], 0.0, top)
    # whole steps near the dials the linearisation was made about: a small search
    near = dials / dial_step
    lower = np.concatenate([np.clip(np.floor(near) - NEAR_STEPS, 0, None), [0.0]])
    upper = np.concatenate([np.minimum(np.ceil(near) + NEAR_STEPS, np.round(upper[:k])),
                            [np.inf]])
    res = milp(c, integrality=np.concatenate([np.ones(k), [0]]),
               bounds=Bounds(lower, upper),
               constraints=LinearConstraint(a, -np.inf, b),
               options={"time_limit": 2.0, "mip_rel_gap": MIP_GAP})
    if res.x is None:
        return None
    return np.round(res.x[:k]) * dial_step


def drop_changes(runner: Runner, y0: np.ndarray, solution: DialSolution, band: Band,
                 worth_ml: float = CHANGE_WORTH_ML) -> DialSolution:
    """Fewer dial changes: leave out each change (in time order) whose removal keeps the band
    in the exact model and costs at most ``worth_ml`` mL of liquid agent more."""
    best = solution
    if not best.fits:
        return best
    dials = best.schedule.dials.copy()
    for j in range(1, dials.size):
        if dials[j] == dials[j - 1]:
            continue
        trial = dials.copy()
        trial[j] = trial[j - 1]
        candidate = best.schedule.with_dials(trial)
        et, ml = _evaluate(runner, y0, [candidate], band)
        excursion = float(band.excursion(et[0]).max())
        if excursion <= 1e-9 and ml[0] <= best.agent_ml + worth_ml:
            best = DialSolution(candidate, excursion, float(ml[0]), et[0], best.rounds,
                                band.time_min)
            dials = trial
    return best


def excursion_on(runner: Runner, y0: np.ndarray, solution: DialSolution, band: Band
                 ) -> DialSolution:
    """``solution`` judged on another (e.g. finer) band with the exact model."""
    et, ml = _evaluate(runner, y0, [solution.schedule], band)
    return DialSolution(solution.schedule, float(band.excursion(et[0]).max()), float(ml[0]),
                        et[0], solution.rounds, band.time_min)
