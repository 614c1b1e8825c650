"""From the controller's knob changes to a plan a person can follow, and the verdict on each target.

:func:`followable_plan` writes the knob changes as an ordinary plan of dial and flow settings;
:func:`assess` judges every target on the re-run of that plan, and :func:`target_alerts` turns
unmet targets into alerts.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from circlesim.domain.plan import Plan, Segment, Step
from circlesim.engine.result import Alert, Result
from circlesim.engine.runner import Knobs, Runner, knobs_of
from circlesim.targets.controller import KnobTrace, scaled_flows
from circlesim.targets.settings import EPS as _EPS
from circlesim.targets.settings import (
    ControllerSettings,
    TargetReport,
    dial_series,
    target_percent,
)

__all__ = ["assess", "followable_plan", "target_alerts"]


# ---- from knob changes to a plan a person can follow -----------------------------------------
def followable_plan(plan: Plan, segments: tuple[Segment, ...], trace: KnobTrace,
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


def assess(result: Result, segments: tuple[Segment, ...], runner: Runner,
            settings: ControllerSettings) -> tuple[TargetReport, ...]:
    """Judge every target on the re-run of the controller's plan."""
    t = result.time_min
    et = result.end_tidal_percent("agent")
    dial = dial_series(result.plan, t)
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
            full = scaled_flows(full, ceiling)
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


def target_alerts(reports: Iterable[TargetReport]) -> tuple[Alert, ...]:
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
