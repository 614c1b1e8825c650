"""Target mode: a feedback controller that holds end-tidal agent at a target (engine layer).

A plan step may ask for an end-tidal concentration (``target_end_tidal_percent``) or a
multiple of the age-adjusted MAC (``target_mac``) instead of a dial setting. The controller
here, of circlesim's own design, plays the part of the person at the machine:

* every ``decision_interval_min`` (10 s by default) it looks ahead with the model from the
  current state and asks which dial to set now, and which to set at the next chance to change
  it, so that predicted end-tidal agent stays closest to the target over the look-ahead
  horizon (overshoot counts three times as much as undershoot);
* it only touches the dial when leaving it alone would drift more than ``aim`` (2 %) from
  the target, and never sooner than ``min_dwell_min`` after the last change, in whole steps
  of ``dial_step_percent`` within the vaporizer's range — so its output is a plan a person
  can follow with real knobs;
* if ``max_fgf_l_min`` allows, it raises the total fresh gas flow in 0.1 L/min steps when the
  dial alone cannot reach the target by the step's ``target_within_min`` or hold it, and lowers
  the flow back as soon as the dial alone can hold the target again.

The look-ahead uses four runs of the model besides the run with the current dial, and treats
end-tidal agent as linear in the two dial settings about the current one — measured not in
vol% but in a blend of the setting and the vapour it adds per litre of carrier gas, fitted at
each look (:meth:`_Controller._effect`); the feedback every few seconds corrects what that
linearisation misses.

:func:`simulate_with_targets` runs the controller, writes the knob changes as an ordinary
:class:`~circlesim.plan.Plan`, re-runs that plan with :func:`circlesim.simulate` and returns
its :class:`~circlesim.result.Result` with a :class:`ControlReport` attached as
``result.control``: the target, the dial it needed, and, for every target, whether it was met
— and if not, why and by how much. :func:`circlesim.simulate` hands plans with targets to it.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field, replace

import numpy as np

from .alerts import Alert, AlertRule, default_rules, evaluate_alerts
from .equipment import Absorber, Circuit, Vaporizer
from .patient import Patient
from .plan import Plan, Segment, Step
from .result import Result
from .runner import Knobs, Runner, knobs_of
from .validation import InputError, bounded, check_fields, optional_bounded

__all__ = ["ControlReport", "ControllerSettings", "TargetReport", "concrete_plan",
           "simulate_with_targets", "target_percent"]

#: Flow resolution of the flowmeters the controller sets, L/min.
FLOW_STEP_L_MIN = 0.1
#: Weight of overshoot relative to undershoot in the look-ahead cost.
OVERSHOOT_WEIGHT = 3.0
#: Look-ahead samples per decision.
N_SAMPLES = 24
#: On the way to the target, moves predicted to pass it by more than this fraction of the
#: tolerance are ruled out.
APPROACH_OVERSHOOT = 0.5
#: Exact checks of a move on the way to the target before settling for a milder one.
APPROACH_CHECKS = 4
#: A single dial change is preferred to a change now and another soon after unless the
#: latter's look-ahead cost is less than 1/1.5 of the former's.
SINGLE_MOVE_PREFERENCE = 1.5
_EPS = 1e-9


@dataclass(frozen=True)
class ControllerSettings:
    """How the controller works.

    Parameters
    ----------
    decision_interval_min : float, min, 0.05–2
        How often the controller looks at the patient (default 10 s).
    dial_step_percent : float, vol%, 0.1–0.5
        Smallest dial change, as on the vaporizer's scale.
    min_dwell_min : float, min, 0.1–30
        Shortest time between two changes of the knobs.
    tolerance : float, fraction, 0.01–0.2
        A target counts as reached and held while end-tidal agent is within this fraction of
        it (default 5 %).
    aim : float, fraction, 0.005–0.1
        The controller leaves the dial alone while the look-ahead stays within this fraction
        of the target (default 2 %); must be below ``tolerance``.
    max_fgf_l_min : float or None, L/min, 0.1–20
        Highest total fresh gas flow the controller may raise the flow to when the dial alone
        cannot reach or hold the target; None: the controller never changes the flows.
    horizon_min : float or None, min, 2–60
        Look-ahead; default three circuit time constants (circuit and bag volume over the
        fresh gas flow), 4–30 min.
    """

    decision_interval_min: float = field(default=1.0 / 6.0,
                                         metadata=bounded(0.05, 2.0, "min"))
    dial_step_percent: float = field(default=0.1, metadata=bounded(0.1, 0.5, "vol%"))
    min_dwell_min: float = field(default=1.0, metadata=bounded(0.1, 30.0, "min"))
    tolerance: float = field(default=0.05, metadata=bounded(0.01, 0.2))
    aim: float = field(default=0.02, metadata=bounded(0.005, 0.1))
    max_fgf_l_min: float | None = field(default=None,
                                        metadata=optional_bounded(0.1, 20.0, "L/min"))
    horizon_min: float | None = field(default=None, metadata=optional_bounded(2.0, 60.0,
                                                                              "min"))

    def __post_init__(self) -> None:
        check_fields(self)
        if self.aim >= self.tolerance:
            raise InputError(f"ControllerSettings.aim must be below the tolerance "
                             f"({self.tolerance:g}); got {self.aim:g}.")


@dataclass(frozen=True)
class TargetReport:
    """How well one target was met (judged on the re-run of the controller's plan).

    Attributes
    ----------
    start_min, end_min : float, min
        The stretch of the plan in which the target applies.
    target_percent : float, vol%
        End-tidal target.
    target_mac : float
        The target as a multiple of the age-adjusted MAC.
    deadline_min : float or None, min
        Time by which the target should be reached (None: as fast as the dial allows).
    reached_min : float or None, min
        First time end-tidal agent is within the tolerance of the target (None: never).
    settled_min : float or None, min
        First time, from ``reached_min`` on, that it is within half the tolerance.
    met : bool
        Reached (by the deadline, if any) and held within the tolerance to ``end_min``.
    largest_below_percent, largest_above_percent : float, %
        Largest deviation below and above the target from the time it was reached (or
        should have been, whichever is earlier) to ``end_min``, as a percentage of the
        target (0 when none). If it was never reached: how far short it stayed.
    hold_deviation_percent : float or None, %
        Largest deviation either way from ``settled_min`` to ``end_min``.
    limited_by : str
        "" when met; otherwise what stopped it: "dial range" (the vaporizer was at its limit),
        "flow" (the dial could not be turned down far enough to lower it in time),
        or "controller" (the dial range would have allowed it).
    message : str
        One sentence for people.
    """

    start_min: float
    end_min: float
    target_percent: float
    target_mac: float
    deadline_min: float | None
    reached_min: float | None
    settled_min: float | None
    met: bool
    largest_below_percent: float
    largest_above_percent: float
    hold_deviation_percent: float | None
    limited_by: str
    message: str


@dataclass(frozen=True, eq=False)
class ControlReport:
    """What the controller did, attached to a result as ``result.control``.

    Attributes
    ----------
    requested_plan : Plan
        The plan with targets as given.
    plan : Plan
        The controller's output as a plan with dial (and flow) settings only; the result is a
        run of this plan.
    targets : tuple of TargetReport
    settings : ControllerSettings
    decisions : int
        How many times the controller looked ahead.
    """

    requested_plan: Plan
    plan: Plan
    targets: tuple[TargetReport, ...]
    settings: ControllerSettings
    decisions: int

    @property
    def met(self) -> bool:
        """Whether every target was met."""
        return all(t.met for t in self.targets)

    def target_series(self, time_min: np.ndarray) -> np.ndarray:
        """End-tidal target (vol%) at ``time_min``; NaN where no target applies."""
        t = np.asarray(time_min, dtype=float)
        out = np.full(t.shape, np.nan)
        for rep in self.targets:
            last = rep is self.targets[-1] and rep.end_min >= self.plan.duration_min - _EPS
            inside = (t >= rep.start_min) & ((t <= rep.end_min) if last else
                                             (t < rep.end_min))
            out[inside] = rep.target_percent
        return out

    def dial_series(self, time_min: np.ndarray) -> np.ndarray:
        """Dial setting (vol%) of the controller's plan at ``time_min``."""
        return _dial_series(self.plan, np.asarray(time_min, dtype=float))

    def summary(self) -> str:
        """One line per target."""
        return "\n".join(t.message for t in self.targets)


def target_percent(segment: Segment, mac_percent: float) -> float:
    """End-tidal target of a target segment in vol% (``target_mac`` × age-adjusted MAC)."""
    if segment.target_end_tidal_percent is not None:
        return float(segment.target_end_tidal_percent)
    return float(segment.target_mac) * mac_percent


def concrete_plan(plan: Plan) -> Plan:
    """``plan`` with every target replaced by the dial off (the flows and the rest kept)."""
    steps = [replace(s, target_end_tidal_percent=None, target_mac=None,
                     target_within_min=None, dial_percent=0.0) if s.has_target else s
             for s in plan.steps]
    return plan.with_steps(steps)


# ---- the controller -------------------------------------------------------------------------
class _Controller:
    """The decision rule; one instance per run."""

    def __init__(self, runner: Runner, settings: ControllerSettings) -> None:
        self.runner = runner
        self.s = settings
        step = settings.dial_step_percent
        self.grid = np.round(np.arange(0.0, runner.max_dial + _EPS, step), 6)
        self.decisions = 0

    # -- helpers ----------------------------------------------------------------------------
    def horizon(self, knobs: Knobs) -> float:
        if self.s.horizon_min is not None:
            return self.s.horizon_min
        tau = self.runner.circuit.total_volume_l / knobs.fgf_l_min
        return float(np.clip(3.0 * tau, 4.0, 30.0))

    def snap(self, dial: float) -> float:
        """Nearest dial on the vaporizer's scale."""
        return float(self.grid[int(np.argmin(np.abs(self.grid - dial)))])

    def predict(self, y: np.ndarray, t: float, now: Knobs, hold: Knobs, t_switch: float,
                samples: np.ndarray) -> np.ndarray:
        """End-tidal agent fraction at ``samples``: ``now`` until ``t_switch``, then ``hold``."""
        if t_switch >= samples[-1] - _EPS:
            states, _ = self.runner.run(y, [now], np.array([t, samples[-1]]), samples)
        else:
            states, _ = self.runner.run(y, [now, hold], np.array([t, t_switch, samples[-1]]),
                                        samples)
        return states[:, self.runner.et_index]

    # -- one decision -----------------------------------------------------------------------
    def decide(self, y: np.ndarray, t: float, knobs: Knobs, target: float
               ) -> tuple[float, float]:
        """Dial to set now (vol%), and the worst predicted relative error if it is kept.

        The look-ahead weighs three moves, with end-tidal agent taken as linear in the dial's
        effect (:meth:`_effect`) about the current setting (five runs of the model):

        * wait: keep the dial until the next look, then set the best dial;
        * one change: set a dial now and keep it;
        * two changes: set a dial now and another one ``min_dwell_min`` later.

        On the way to the target (outside the tolerance) only moves predicted not to pass
        the target by more than :data:`APPROACH_OVERSHOOT` of the tolerance count — for each
        dial now, the later dials that keep it so (:meth:`_later_bounds`) — and the
        controller takes the two-change move of least look-ahead cost among them; waiting
        wins if the current dial is already at least as bold, keeps off the target and does
        no worse. Near the target it takes the move of least look-ahead cost, preferring one
        change to two, and leaves the dial alone while the look-ahead stays within ``aim``.

        Parameters
        ----------
        y : ndarray
            State at ``t``.
        t : float, min
        knobs : Knobs
            Settings in force (the dial among them).
        target : float, fraction
            End-tidal target as a dry-gas fraction.
        """
        self.decisions += 1
        h = self.horizon(knobs)
        dwell = self.s.min_dwell_min
        dt = self.s.decision_interval_min
        # denser early in the look-ahead, where the wash-in moves fast
        samples = t + dt + (max(h, dwell + 2.0) - dt) * np.linspace(0.0, 1.0, N_SAMPLES) ** 1.5
        judged = samples >= t + min(dwell, 0.25 * h) - _EPS
        dc = knobs.dial_percent
        base = self.predict(y, t, knobs, knobs, t + dwell, samples)
        worst_keep = float(np.max(np.abs(base[judged] / target - 1.0)))
        if worst_keep <= self.s.aim:
            return dc, worst_keep
        top = self.runner.max_dial
        delta = self.snap(0.3 * top)
        other = knobs._replace(dial_percent=self.snap(dc + delta if dc + delta <= top + _EPS
                                                      else dc - delta))
        grid = self.grid
        pa = self.predict(y, t, other, knobs, t + dwell, samples) - base  # now, to dwell
        pb = self.predict(y, t, knobs, other, t + dwell, samples) - base  # after dwell
        pc = self.predict(y, t, knobs, other, t + dt, samples) - base  # after waiting
        # end-tidal agent is linear neither in the setting nor in the vapour it adds per
        # litre of carrier gas, but nearly so in a blend of the two; a run with the dial at
        # the far end of the scale picks the blend
        far = knobs._replace(dial_percent=0.0 if dc > 0.5 * top else self.snap(top))
        pf = self.predict(y, t, far, far, t + dwell, samples) - base
        u = self._effect(knobs, (dc, other.dial_percent, far.dial_percent), pa + pb, pf)
        uc = float(np.interp(dc, grid, u))
        d = float(np.interp(other.dial_percent, grid, u)) - uc
        a, b, c = pa / d, pb / d, pc / d
        dn = u - uc  # (n,)
        error_now = float(y[self.runner.et_index]) / target - 1.0
        approaching = abs(error_now) > self.s.tolerance
        sign = 1.0 if error_now < 0.0 else -1.0  # +1: end-tidal has to rise
        # two changes: for each dial now, the best dial after the dwell; on the way to the
        # target only among the later dials that keep the move from passing it by more than
        # the cap (the best dial is often beyond the scale's end — rising too slowly early in
        # the look-ahead — and the end of the scale would then pass the target late in it)
        resid = target - base[None, :] - dn[:, None] * a[None, :]
        bounds = self._later_bounds(resid, b, sign, target, u, uc) if approaching else None
        later = self._best_later(resid, b, u, uc, bounds)  # (n, 5) indices on the scale
        two = (base[None, None, :] + dn[:, None, None] * a[None, None, :]
               + (u[later] - uc)[:, :, None] * b[None, None, :]) / target - 1.0
        two_costs = self.cost(two)
        pick = np.argmin(two_costs, axis=1)
        two = two[np.arange(grid.size), pick]  # (n, S)
        two_cost = two_costs[np.arange(grid.size), pick]
        later = grid[later[np.arange(grid.size), pick]]  # (n,) vol%
        resid = (target - base)[None, :]
        bounds = self._later_bounds(resid, c, sign, target, u, uc) if approaching else None
        wait_later = self._best_later(resid, c, u, uc, bounds)[0]
        waits = (base[None, :] + (u[wait_later] - uc)[:, None] * c[None, :]) / target - 1.0
        wait = waits[int(np.argmin(self.cost(waits)))]
        if approaching:
            check = (y, t, knobs, target, samples)
            return self._approach(error_now, dc, two, two_cost, later, wait, check), worst_keep
        one = (base[None, :] + dn[:, None] * (a + b)[None, :]) / target - 1.0
        one_cost = self.cost(one)
        i_two, i_one = int(np.argmin(two_cost)), int(np.argmin(one_cost))
        if self.cost(wait) <= min(two_cost[i_two], one_cost[i_one]):
            return dc, worst_keep
        # once settled, one change is easier to follow than two: take it unless two are
        # clearly better
        settled = abs(error_now) <= 0.5 * self.s.tolerance
        slack = SINGLE_MOVE_PREFERENCE if settled else 1.0
        if one_cost[i_one] <= slack * two_cost[i_two] + settled * N_SAMPLES * (
                0.5 * self.s.aim) ** 2:
            return float(grid[i_one]), worst_keep
        return self._unless_nudge(float(grid[i_two]), dc), worst_keep

    def _approach(self, error_now: float, dc: float, two: np.ndarray, two_cost: np.ndarray,
                  later: np.ndarray, wait: np.ndarray, check: tuple) -> float:
        """Dial on the way to the target (see :meth:`decide`).

        The chosen move is checked with the exact model (the linear look-ahead is least
        accurate for large moves); if it would pass the target by more than the cap, milder
        ones are tried in turn (at most :data:`APPROACH_CHECKS`).
        """
        rising = error_now < 0.0
        sign = 1.0 if rising else -1.0
        cap = APPROACH_OVERSHOOT * self.s.tolerance
        passes = (sign * two).max(axis=1) > cap  # (n,) overshoots, at any time ahead
        if passes.all():  # every move passes the target: the least bad one
            return self._unless_nudge(float(self.grid[int(np.argmin(two_cost))]), dc)
        ok = np.flatnonzero(~passes)
        best = ok[int(np.argmin(two_cost[ok]))]  # least cost among those not passing it
        order = ok[ok <= best][::-1] if rising else ok[ok >= best]
        y, t, knobs, target, samples = check
        step = max(1, order.size // (2 * APPROACH_CHECKS))
        pick = order[0]
        for pick in order[:step * APPROACH_CHECKS:step]:
            choice = float(self.grid[pick])
            if abs(choice - dc) <= _EPS:
                break
            exact = self.predict(y, t, knobs._replace(dial_percent=choice),
                                 knobs._replace(dial_percent=float(later[pick])),
                                 t + self.s.min_dwell_min, samples) / target - 1.0
            if (sign * exact).max() <= cap:
                break
        # keep the dial for another look only if it is already at least as bold and waiting
        # is predicted to keep off the target and to do no worse
        if (sign * (dc - self.grid[pick]) >= -_EPS and (sign * wait).max() <= cap
                and self.cost(wait) <= two_cost[pick]):
            return dc
        return self._unless_nudge(float(self.grid[pick]), dc)

    def _unless_nudge(self, dial: float, dc: float) -> float:
        """``dc`` if ``dial`` is within two steps of it: a change blocks the next one for
        ``min_dwell_min``, so it is not spent on a nudge; the next look decides again."""
        if abs(dial - dc) <= 2.0 * self.s.dial_step_percent + _EPS:
            return dc
        return dial

    def cost(self, e: np.ndarray) -> np.ndarray:
        """Look-ahead cost of relative errors ``e`` (last axis: samples): squared error,
        weighted :data:`OVERSHOOT_WEIGHT` times more above the target than below it."""
        return (np.where(e < 0.0, 1.0, OVERSHOOT_WEIGHT) * e) ** 2 @ np.ones(e.shape[-1])

    def _effect(self, knobs: Knobs, dials: tuple[float, float, float], near: np.ndarray,
                far: np.ndarray) -> np.ndarray:
        """The dial's effect at each setting on the scale, in which the look-ahead treats
        end-tidal agent as linear: ``(1 − w) d + w · 100 g(d / 100)``, with ``g`` the
        vapour per litre of carrier gas (:meth:`Runner.dial_effect`) and the weight ``w``
        (0–1 in steps of 0.05) that best predicts, from the response ``near`` to the
        dial moved from ``dials[0]`` to ``dials[1]``, the response ``far`` to
        ``dials[2]`` (both end-tidal fractions at the look-ahead samples, less the
        current dial's)."""
        d = np.array(dials + tuple(self.grid))
        g = self.runner.dial_effect(knobs, d)
        weights = np.linspace(0.0, 1.0, 21)
        v = (1.0 - weights)[:, None] * d[None, :] + weights[:, None] * g[None, :]
        ratio = (v[:, 2] - v[:, 0]) / (v[:, 1] - v[:, 0])  # (21,)
        misfit = ((ratio[:, None] * near[None, :] - far[None, :]) ** 2).sum(axis=1)
        return v[int(np.argmin(misfit)), 3:]

    def _best_later(self, resid: np.ndarray, slope: np.ndarray, u: np.ndarray, uc: float,
                    bounds: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
        """Candidate later dials (indices on the scale) for each row of residuals: the
        least-squares dial on the scale and its two neighbours either side, shape (rows, 5),
        kept within ``bounds`` (lowest and highest index, per row) if given.

        ``u`` (n,) is the dial's effect (:meth:`Runner.dial_effect`) at each setting on the
        scale, ``uc`` at the current one; ``slope`` (S,) end-tidal fraction per unit of it."""
        ss = float(np.dot(slope, slope))
        x = uc + (resid @ slope / ss if ss > 1e-18 else np.zeros(resid.shape[0]))
        # position on the scale, extended linearly beyond its ends
        pos = (np.interp(x, u, np.arange(u.size))
               + np.where(x > u[-1], (x - u[-1]) / (u[-1] - u[-2]), 0.0)
               + np.where(x < u[0], (x - u[0]) / (u[1] - u[0]), 0.0))
        index = np.round(pos)[:, None] + np.arange(-2, 3)[None, :]
        lo, hi = (0, u.size - 1) if bounds is None else (bounds[0][:, None], bounds[1][:, None])
        return np.clip(index, lo, hi).astype(int)

    def _later_bounds(self, resid: np.ndarray, slope: np.ndarray, sign: float, target: float,
                      u: np.ndarray, uc: float) -> tuple[np.ndarray, np.ndarray]:
        """Range of later dials (indices on the scale, per row) that keep the linear
        look-ahead from passing the target by more than :data:`APPROACH_OVERSHOOT` of the
        tolerance: at most the returned highest when rising (``sign`` +1), at least the
        lowest when falling (−1). ``resid`` (rows, S): what the later dial has to add to
        reach the target; ``slope``, ``u``, ``uc`` as for :meth:`_best_later`. A row no
        later dial keeps from passing gets the mildest one (0 or the top)."""
        n = u.size
        lo, hi = np.zeros(resid.shape[0], dtype=int), np.full(resid.shape[0], n - 1)
        acts = slope > 1e-3 * max(float(slope.max()), 0.0)  # samples the later dial moves
        if not acts.any():
            return lo, hi
        # sign·(u(later) − uc)·slope ≤ cap + sign·resid at every sample it moves
        cap = APPROACH_OVERSHOOT * self.s.tolerance * target
        room = ((cap + sign * resid[:, acts]) / slope[acts]).min(axis=1)
        tiny = 1e-9 * float(u[-1])
        if sign > 0.0:
            hi = np.clip(np.searchsorted(u, uc + room + tiny, side="right") - 1, 0, n - 1)
        else:
            lo = np.clip(np.searchsorted(u, uc - room - tiny, side="left"), 0, n - 1)
        return lo, hi

    def full_dial_reach(self, y: np.ndarray, t: float, knobs: Knobs, until: float) -> float:
        """End-tidal agent fraction at ``until`` with the dial at its largest setting."""
        full = knobs._replace(dial_percent=self.snap(self.runner.max_dial))
        states, _ = self.runner.run(y, [full], np.array([t, until]), np.array([until]))
        return float(states[-1, self.runner.et_index])


def _scaled_flows(base: Knobs, total: float) -> Knobs:
    """``base`` with the flowmeters scaled to ``total`` L/min, keeping the O2 share."""
    share_o2 = base.o2_l_min / base.fgf_l_min
    share_n2o = base.n2o_l_min / base.fgf_l_min
    o2 = round(total * share_o2, 2)
    n2o = round(total * share_n2o, 2)
    air = round(max(total - o2 - n2o, 0.0), 2)
    return base._replace(o2_l_min=o2, air_l_min=air, n2o_l_min=n2o)


@dataclass
class _Trace:
    """Knob changes in time order."""

    changes: list[tuple[float, Knobs, int]] = field(default_factory=list)

    def set(self, t: float, knobs: Knobs, segment: int) -> None:
        if self.changes and abs(self.changes[-1][0] - t) < _EPS:
            self.changes[-1] = (self.changes[-1][0], knobs, segment)
        elif not self.changes or self.changes[-1][1] != knobs:
            self.changes.append((t, knobs, segment))


def _run_controller(runner: Runner, segments: tuple[Segment, ...], y0: np.ndarray,
                    jumps: np.ndarray, settings: ControllerSettings, mac_percent: float
                    ) -> tuple[_Trace, int]:
    """Run the controller through the plan; return the knob changes."""
    ctl = _Controller(runner, settings)
    trace = _Trace()
    y = y0.copy()
    knobs: Knobs | None = None
    last_change = -math.inf
    dt = settings.decision_interval_min
    for k, seg in enumerate(segments):
        y = y + jumps[k]
        base = knobs_of(seg)
        t = seg.start_min
        if not seg.has_target:
            knobs = base
            trace.set(t, knobs, k)
            _, y = runner.run(y, [knobs], np.array([t, seg.end_min]), np.array([seg.end_min]))
            continue
        target = target_percent(seg, mac_percent) / 100.0
        dial = 0.0 if knobs is None else min(knobs.dial_percent, runner.max_dial)
        flow = base.fgf_l_min if knobs is None else max(knobs.fgf_l_min, base.fgf_l_min)
        if settings.max_fgf_l_min is None or flow > settings.max_fgf_l_min + _EPS:
            flow = base.fgf_l_min
        knobs = _scaled_flows(base, flow)._replace(dial_percent=ctl.snap(dial))
        force = True  # a step of the plan: the person is at the machine anyway
        while t < seg.end_min - _EPS:
            t_next = min(t + dt, seg.end_min)
            if seg.end_min - t_next < 0.5 * dt:
                t_next = seg.end_min
            if force or t - last_change >= settings.min_dwell_min - _EPS:
                new = _choose(ctl, y, t, knobs, base, target, seg, settings)
                if new != knobs or force:
                    if new != knobs:
                        last_change = t
                    knobs = new
                    trace.set(t, knobs, k)
                force = False
            _, y = runner.run(y, [knobs], np.array([t, t_next]), np.array([t_next]))
            t = t_next
    return trace, ctl.decisions


def _choose(ctl: _Controller, y: np.ndarray, t: float, knobs: Knobs, base: Knobs,
            target: float, seg: Segment, settings: ControllerSettings) -> Knobs:
    """The knobs to set at ``t``: the dial, and the flow if the settings allow raising it."""
    dial, _ = ctl.decide(y, t, knobs, target)
    new = knobs._replace(dial_percent=dial)
    ceiling = settings.max_fgf_l_min
    if ceiling is None or ceiling <= base.fgf_l_min + _EPS:
        return new
    et_now = float(y[ctl.runner.et_index])
    rising = et_now < target * (1.0 - settings.tolerance)
    top = ctl.snap(ctl.runner.max_dial)
    # lower the flow back when the dial alone can hold the target at the step's own flow
    if knobs.fgf_l_min > base.fgf_l_min + _EPS and not rising:
        at_base = base._replace(dial_percent=knobs.dial_percent)
        dial_base, worst = ctl.decide(y, t, at_base, target)
        if worst <= settings.tolerance or dial_base < top - _EPS:
            return at_base._replace(dial_percent=dial_base)
        return new
    # raise the flow when the full dial cannot reach the target in time at this flow
    if dial < top - _EPS:
        return new
    deadline = seg.target_by_min
    if deadline is None or deadline <= t + _EPS:
        deadline = t + ctl.horizon(new)
    aim = target * (1.0 - 0.5 * settings.tolerance)
    if not rising or ctl.full_dial_reach(y, t, new, deadline) >= aim:
        return new
    flows = np.round(np.arange(knobs.fgf_l_min + FLOW_STEP_L_MIN, ceiling + _EPS,
                               FLOW_STEP_L_MIN), 6)
    if flows.size == 0:
        return new
    lo, hi = 0, flows.size - 1  # smallest flow on the grid that reaches ``aim`` in time
    if ctl.full_dial_reach(y, t, _scaled_flows(base, flows[hi]), deadline) < aim:
        return _scaled_flows(base, flows[hi])._replace(dial_percent=top)
    while lo < hi:
        mid = (lo + hi) // 2
        if ctl.full_dial_reach(y, t, _scaled_flows(base, flows[mid]), deadline) >= aim:
            hi = mid
        else:
            lo = mid + 1
    return _scaled_flows(base, flows[lo])._replace(dial_percent=top)


# ---- from knob changes to a plan a person can follow -----------------------------------------
def _followable_plan(plan: Plan, segments: tuple[Segment, ...], trace: _Trace,
                     mac_percent: float) -> Plan:
    steps: list[Step] = []
    previous: Knobs | None = None
    by_time = {round(s.time_min, 9): s for s in plan.steps}
    for t, knobs, k in trace.changes:
        given = by_time.get(round(t, 9))
        fields_ = {}
        for name, value in knobs._asdict().items():
            if previous is None:
                keep = name in ("o2_l_min", "air_l_min", "n2o_l_min", "dial_percent") or (
                    given is not None and getattr(given, name) is not None)
            else:
                keep = getattr(previous, name) != value
            if keep:
                fields_[name] = value
        seg = segments[k]
        note = given.note if given is not None else ""
        if seg.has_target and given is not None and given.has_target:
            tag = f"target end-tidal {target_percent(seg, mac_percent):.2f} %"
            note = f"{note}; {tag}" if note else tag
        inject = given.inject_ml if given is not None else 0.0
        steps.append(Step(time_min=round(t, 9), inject_ml=inject, note=note, **fields_))
        previous = knobs
    # steps of the requested plan at which nothing changed (an injection, a note) stay
    have = {round(s.time_min, 9) for s in steps}
    for s in plan.steps:
        if round(s.time_min, 9) not in have and (s.inject_ml > 0.0 or s.note):
            steps.append(Step(time_min=s.time_min, inject_ml=s.inject_ml, note=s.note))
    steps.sort(key=lambda s: s.time_min)
    name = f"{plan.name} (dial from the target controller)"
    description = (plan.description + " " if plan.description else "") + (
        "Dial settings chosen by circlesim's target controller.")
    return Plan(tuple(steps), duration_min=plan.duration_min, name=name,
                description=description)


# ---- judging the result ------------------------------------------------------------------------
def _periods(segments: tuple[Segment, ...]) -> list[tuple[int, int]]:
    """Runs of consecutive segments with the same target: (first, last) indices."""
    out: list[tuple[int, int]] = []
    for i, seg in enumerate(segments):
        key = (seg.target_end_tidal_percent, seg.target_mac, seg.target_by_min)
        if not seg.has_target:
            continue
        prev = segments[i - 1] if i else None
        same = (prev is not None and prev.has_target and out and out[-1][1] == i - 1
                and (prev.target_end_tidal_percent, prev.target_mac, prev.target_by_min)
                == key)
        if same:
            out[-1] = (out[-1][0], i)
        else:
            out.append((i, i))
    return out


def _assess(result: Result, segments: tuple[Segment, ...], runner: Runner,
            settings: ControllerSettings) -> tuple[TargetReport, ...]:
    """Judge every target on the re-run of the controller's plan."""
    t = result.time_min
    et = result.end_tidal_percent("agent")
    dial = _dial_series(result.plan, t)
    tol = settings.tolerance
    reports = []
    for first, last in _periods(segments):
        seg0 = segments[first]
        start, end = seg0.start_min, segments[last].end_min
        target = target_percent(seg0, result.mac_percent)
        inside = (t >= start - _EPS) & (t <= end + _EPS)
        ts, es, ds = t[inside], et[inside] / target - 1.0, dial[inside]
        ok = np.abs(es) <= tol
        reached = float(ts[np.argmax(ok)]) if ok.any() else None
        deadline = seg0.target_by_min
        if deadline is not None and deadline > end:
            deadline = end
        judge_from = end if reached is None else reached
        if deadline is not None:
            judge_from = min(judge_from, deadline)
        judged = ts >= judge_from - _EPS
        below = max(0.0, -float(es[judged].min())) * 100.0
        above = max(0.0, float(es[judged].max())) * 100.0
        if reached is None:  # how far short the closest approach stayed
            judged = np.ones_like(judged)
            below, above = ((-float(es.max()) * 100.0, 0.0) if es[0] < 0
                            else (0.0, float(es.min()) * 100.0))
        settle = (np.abs(es) <= 0.5 * tol) & (ts >= (reached or end) - _EPS)
        settled = float(ts[np.argmax(settle)]) if settle.any() else None
        hold = (float(np.abs(es[ts >= settled - _EPS]).max()) * 100.0 if settled is not None
                else None)
        late = reached is not None and deadline is not None and reached > deadline + _EPS
        met = reached is not None and not late and max(below, above) <= tol * 100.0
        label = (f"{result.agent} end-tidal target {target:.2f} % "
                 f"({target / result.mac_percent:.2f} MAC)")
        limited_by = ""
        if met:
            after = (f"largest deviation after settling {hold:.1f} %" if hold is not None
                     else f"never within {50 * tol:g} % (up to {below:.1f} % below and "
                          f"{above:.1f} % above)")
            message = (f"{label}: reached (within {100 * tol:g} %) at {reached:.1f} min and "
                       f"held to {end:.0f} min; {after}.")
        else:
            bad = judged & (np.abs(es) > tol)
            low, high = bad & (es < 0), bad & (es > 0)
            top = runner.max_dial
            if low.any() and (np.mean(ds[low] >= top - _EPS) >= 0.5 or _full_dial_fails(
                    result, runner, segments, first, last, target, tol, deadline,
                    settings.max_fgf_l_min)):
                limited_by = "dial range"
            elif high.any() and not low.any() and np.mean(ds[high] <= _EPS) >= 0.5:
                limited_by = "flow"
            else:
                limited_by = "controller"
            message = _shortfall_message(label, reached, deadline, end, below, above,
                                         limited_by, top, settings, ts, et[inside], target)
        reports.append(TargetReport(
            start_min=start, end_min=end, target_percent=target,
            target_mac=target / result.mac_percent, deadline_min=deadline,
            reached_min=reached, settled_min=settled, met=met, largest_below_percent=below,
            largest_above_percent=above, hold_deviation_percent=hold, limited_by=limited_by,
            message=message))
    return tuple(reports)


def _full_dial_fails(result: Result, runner: Runner, segments: tuple[Segment, ...], first: int,
                     last: int, target: float, tol: float, deadline: float | None,
                     ceiling: float | None) -> bool:
    """Whether even the largest dial (at the highest flow allowed) from the start of the
    target leaves end-tidal agent short of it at the deadline (or the end)."""
    start = segments[first].start_min
    until = segments[last].end_min if deadline is None else deadline
    y = result.states[int(np.searchsorted(result.time_min, start - _EPS))]
    knobs, times = [], [start]
    for seg in segments[first:last + 1]:
        if seg.start_min >= until - _EPS:
            break
        full = knobs_of(seg)._replace(dial_percent=runner.max_dial)
        if ceiling is not None and ceiling > full.fgf_l_min:
            full = _scaled_flows(full, ceiling)
        knobs.append(full)
        times.append(min(seg.end_min, until))
    states, _ = runner.run(y, knobs, np.array(times), np.array([until]))
    return float(states[-1, runner.et_index]) * 100.0 < target * (1.0 - tol)


def _shortfall_message(label: str, reached: float | None, deadline: float | None, end: float,
                       below: float, above: float, limited_by: str, top: float,
                       settings: ControllerSettings, ts: np.ndarray, et: np.ndarray,
                       target: float) -> str:
    ceiling = settings.max_fgf_l_min
    step, dwell = settings.dial_step_percent, settings.min_dwell_min
    flows = ("at these flows" if ceiling is None
             else f"even with the flow raised up to {ceiling:g} L/min")
    why = {"dial range": f"the vaporizer's largest setting ({top:g} %) {flows} is not "
                         "enough",
           "flow": "with the dial off, the fresh gas flow washes the agent out too slowly",
           "controller": (f"the controller could not hold it this closely with dial steps of "
                          f"{step:g} % and at least {dwell:g} min between changes, although "
                          "the dial range would allow it")}[limited_by]
    if reached is None:
        best = float(et.max()) if et[0] < target else float(et.min())
        gap = abs(best / target - 1.0) * 100
        side = "below" if best < target else "above"
        return (f"{label}: NOT reached by {end:.0f} min; closest {best:.2f} % ({gap:.1f} % "
                f"{side} the target): {why}.")
    parts = [f"{label}: NOT met"]
    if deadline is not None and reached > deadline + _EPS:
        at = float(np.interp(deadline, ts, et))
        parts.append(f"reached at {reached:.1f} min, {reached - deadline:.1f} min after the "
                     f"{deadline:.1f} min allowed ({at:.2f} % then, "
                     f"{abs(at / target - 1) * 100:.1f} % short)")
    else:
        parts.append(f"reached at {reached:.1f} min, then up to {below:.1f} % below and "
                     f"{above:.1f} % above the target")
    return "; ".join(parts) + f": {why}."


def _dial_series(plan: Plan, time_min: np.ndarray) -> np.ndarray:
    """Dial (vol%) of a plan without targets at ``time_min`` (the dial is independent of the
    ventilation, so any defaults resolve it)."""
    segments = plan.segments(500.0, 12.0)
    starts = np.array([s.start_min for s in segments])
    index = np.clip(np.searchsorted(starts, time_min + _EPS, side="right") - 1, 0,
                    len(segments) - 1)
    return np.array([s.dial_percent for s in segments])[index]


def _target_alerts(reports: Iterable[TargetReport]) -> tuple[Alert, ...]:
    out = []
    for rep in reports:
        if rep.met:
            continue
        start = rep.deadline_min if rep.reached_min is None and rep.deadline_min else (
            rep.reached_min if rep.reached_min is not None else rep.start_min)
        out.append(Alert(key="target_not_met", severity="warning", message=rep.message,
                         source="circlesim target controller (model prediction)",
                         start_min=float(start), end_min=None,
                         extreme=max(rep.largest_below_percent, rep.largest_above_percent)))
    return tuple(out)


# ---- public entry ---------------------------------------------------------------------------
def simulate_with_targets(patient: Patient, circuit: Circuit, plan: Plan, *,
                          vaporizer: Vaporizer | None = None, absorber: Absorber | None = None,
                          settings: ControllerSettings | None = None,
                          output_interval_min: float = 0.1, method: str = "dopri5",
                          rtol: float = 1e-6, initial_state: np.ndarray | None = None,
                          fio2_threshold: float = 0.30,
                          alert_rules: Iterable[AlertRule] | None = None) -> Result:
    """Run a plan whose steps may hold end-tidal targets, with the controller choosing the dial.

    Parameters
    ----------
    patient, circuit, plan, vaporizer, absorber, output_interval_min, method, rtol,
    initial_state, fio2_threshold, alert_rules
        As for :func:`circlesim.simulate`.
    settings : ControllerSettings, optional
        How the controller works (default: decisions every 10 s, dial steps of 0.1 %, at
        least 1 min between changes, 5 % tolerance, flows never raised).

    Returns
    -------
    Result
        A run of the controller's plan (``result.plan``, dial and flow settings only), with
        ``result.control`` (:class:`ControlReport`): the requested plan, each target and
        whether it was met (if not: why and by how much). Unmet targets also appear in
        ``result.alerts``.

    Raises
    ------
    InputError
        For invalid inputs, naming the field, the value and the allowed range.
    """
    from .simulate import simulate  # simulate hands plans with targets to this function

    vaporizer = Vaporizer() if vaporizer is None else vaporizer
    absorber = Absorber() if absorber is None else absorber
    settings = ControllerSettings() if settings is None else settings
    if not isinstance(settings, ControllerSettings):
        raise InputError("settings must be a ControllerSettings; got "
                         f"{type(settings).__name__}.")
    if not isinstance(plan, Plan):
        raise InputError(f"plan must be a Plan; got {type(plan).__name__}.")
    base = concrete_plan(plan)
    runner = Runner(patient, circuit, absorber, vaporizer, base, rtol=rtol)
    segments = plan.segments(patient.default_tidal_volume_ml, patient.default_rate_per_min,
                             circuit.valve)
    mac = vaporizer.properties.mac_percent(patient.age_years)
    y0 = runner.inputs.y0
    if initial_state is not None:
        y0 = np.array(initial_state, dtype=float)
        if y0.shape != runner.inputs.y0.shape or not np.all(np.isfinite(y0)):
            raise InputError("initial_state must be the final_state of a result for the same "
                             f"patient and agent (length {runner.inputs.y0.size}); got shape "
                             f"{y0.shape}.")
    trace, decisions = _run_controller(runner, segments, y0, runner.inputs.jumps, settings,
                                       mac)
    followable = _followable_plan(plan, segments, trace, mac)
    rules = default_rules(fio2_threshold) if alert_rules is None else tuple(alert_rules)
    result = simulate(patient, circuit, followable, vaporizer=vaporizer, absorber=absorber,
                      output_interval_min=output_interval_min, method=method, rtol=rtol,
                      initial_state=initial_state, alert_rules=rules)
    reports = _assess(result, segments, runner, settings)
    report = ControlReport(requested_plan=plan, plan=followable, targets=reports,
                           settings=settings, decisions=decisions)
    object.__setattr__(result, "control", report)
    object.__setattr__(result, "alerts", evaluate_alerts(result, rules)
                       + _target_alerts(reports))
    return result

