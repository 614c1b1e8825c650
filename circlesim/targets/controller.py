"""Target mode: a feedback controller that holds end-tidal agent at a target.

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
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from circlesim.domain.plan import Segment
from circlesim.engine.runner import Knobs, Runner, knobs_of
from circlesim.targets.settings import EPS as _EPS
from circlesim.targets.settings import ControllerSettings, target_percent

__all__ = ["Controller", "KnobTrace", "run_controller", "scaled_flows"]

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

# ---- the controller -------------------------------------------------------------------------
class Controller:
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


def scaled_flows(base: Knobs, total: float) -> Knobs:
    """``base`` with the flowmeters scaled to ``total`` L/min, keeping the O2 share."""
    share_o2 = base.o2_l_min / base.fgf_l_min
    share_n2o = base.n2o_l_min / base.fgf_l_min
    o2 = round(total * share_o2, 2)
    n2o = round(total * share_n2o, 2)
    air = round(max(total - o2 - n2o, 0.0), 2)
    return base._replace(o2_l_min=o2, air_l_min=air, n2o_l_min=n2o)


@dataclass
class KnobTrace:
    """Knob changes in time order."""

    changes: list[tuple[float, Knobs, int]] = field(default_factory=list)

    def set(self, t: float, knobs: Knobs, segment: int) -> None:
        if self.changes and abs(self.changes[-1][0] - t) < _EPS:
            self.changes[-1] = (self.changes[-1][0], knobs, segment)
        elif not self.changes or self.changes[-1][1] != knobs:
            self.changes.append((t, knobs, segment))


def run_controller(runner: Runner, segments: tuple[Segment, ...], y0: np.ndarray,
                    jumps: np.ndarray, settings: ControllerSettings, mac_percent: float
                    ) -> tuple[KnobTrace, int]:
    """Run the controller through the plan; return the knob changes."""
    ctl = Controller(runner, settings)
    trace = KnobTrace()
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
        knobs = scaled_flows(base, flow)._replace(dial_percent=ctl.snap(dial))
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


def _choose(ctl: Controller, y: np.ndarray, t: float, knobs: Knobs, base: Knobs,
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
    if ctl.full_dial_reach(y, t, scaled_flows(base, flows[hi]), deadline) < aim:
        return scaled_flows(base, flows[hi])._replace(dial_percent=top)
    while lo < hi:
        mid = (lo + hi) // 2
        if ctl.full_dial_reach(y, t, scaled_flows(base, flows[mid]), deadline) >= aim:
            hi = mid
        else:
            lo = mid + 1
    return scaled_flows(base, flows[lo])._replace(dial_percent=top)

