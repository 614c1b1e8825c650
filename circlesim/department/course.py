"""The measured end-tidal course of a record, and the plans that hold it at other flows.

The counterfactual of a case keeps what the anaesthetist aimed at — the end-tidal agent that
was measured — and changes only the fresh gas. :func:`end_tidal_course` smooths the measured
end-tidal agent (a running median over ``window_min``, which removes single-breath noise but
keeps steps) and states the case's maintenance level. :func:`held_plan` writes a plan for the
target controller: an end-tidal target every ``every_min`` minutes, each the mean of the
smoothed course over its stretch, with the fresh gas of a flow schedule — the record's own
(:func:`recorded_flows`) or the rule's (:func:`rule_flows`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from circlesim.base.validation import InputError, Interval, check_number
from circlesim.cases.columns import MeasuredSeries
from circlesim.cases.record import CaseRecord
from circlesim.department.rule import FlowRule, RuleStep
from circlesim.domain.plan import Plan, Step

__all__ = ["MIN_TARGET_PERCENT", "EndTidalCourse", "FlowChange", "end_tidal_course",
           "held_plan", "recorded_flows", "rule_flows"]

#: Lowest end-tidal target a plan step takes, vol% (:class:`~circlesim.domain.plan.Step`);
#: below it the course is held with the dial off.
MIN_TARGET_PERCENT = 0.05
#: Fewest measured end-tidal values a course needs.
MIN_COURSE_POINTS = 3


@dataclass(frozen=True)
class FlowChange:
    """Flowmeter settings from ``time_min`` on (L/min), with where they come from."""

    time_min: float
    o2_l_min: float
    air_l_min: float
    n2o_l_min: float
    note: str = ""

    @property
    def total_l_min(self) -> float:
        """Total fresh gas flow, L/min."""
        return self.o2_l_min + self.air_l_min + self.n2o_l_min


@dataclass(frozen=True, eq=False)
class EndTidalCourse:
    """The measured end-tidal agent of a record, smoothed.

    Attributes
    ----------
    time_min : ndarray, shape (N,), min
        Times in the patient (the monitor's sampling delay taken off).
    measured : ndarray, shape (N,), vol%
    smoothed : ndarray, shape (N,), vol%
    maintenance_percent : float, vol%
        Median of the smoothed values at or above half the highest: the level the case was
        held at, leaving out the wash-in and emergence.
    duration_min : float, min
    """

    time_min: np.ndarray
    measured: np.ndarray
    smoothed: np.ndarray
    maintenance_percent: float
    duration_min: float

    def at(self, time_min: np.ndarray | float) -> np.ndarray:
        """Smoothed course at ``time_min`` (vol%), held flat beyond the measurements."""
        return np.interp(time_min, self.time_min, self.smoothed)

    def mean_over(self, start_min: float, end_min: float) -> float:
        """Mean of the smoothed course over ``start_min``–``end_min`` (vol%)."""
        t = np.linspace(start_min, end_min, 21)
        return float(np.mean(self.at(t)))

    def reaches(self, fraction: float, after_min: float) -> float | None:
        """First time from ``after_min`` that the smoothed course is at or above ``fraction``
        of the maintenance level (min), or None."""
        level = fraction * self.maintenance_percent
        ok = (self.time_min >= after_min - 1e-9) & (self.smoothed >= level)
        return float(self.time_min[np.argmax(ok)]) if ok.any() else None


def end_tidal_course(record: CaseRecord, *, window_min: float = 5.0) -> EndTidalCourse:
    """The smoothed measured end-tidal agent of ``record``.

    Parameters
    ----------
    record : CaseRecord
        Must measure end-tidal agent (``end_tidal_<agent>_pct``) at 3 or more times.
    window_min : float, min, 0–30
        Width of the running median (0: no smoothing).

    Raises
    ------
    InputError
        If the record has no end-tidal agent column or too few values in it.
    """
    check_number("end_tidal_course", "window_min", window_min, Interval(0.0, 30.0, "min"))
    where = str(record.path or record.name)
    series = MeasuredSeries("end_tidal", record.agent)
    values = record.measured.get(series)
    if values is None:
        raise InputError(f"{where}: the record has no {series.column} column; the review "
                         "holds the measured end-tidal course and needs it.")
    ok = np.isfinite(values)
    if ok.sum() < MIN_COURSE_POINTS:
        raise InputError(f"{where}: {int(ok.sum())} measured value(s) in {series.column}; the "
                         f"review needs at least {MIN_COURSE_POINTS}.")
    t = record.time_min[ok] - record.monitor.sampling_delay_s / 60.0
    y = values[ok]
    half = 0.5 * window_min
    smooth = np.array([np.median(y[(t >= ti - half - 1e-9) & (t <= ti + half + 1e-9)])
                       for ti in t])
    high = float(smooth.max())
    if high < MIN_TARGET_PERCENT:
        raise InputError(f"{where}: the measured end-tidal {record.agent} never reaches "
                         f"{MIN_TARGET_PERCENT:g} vol%; there is no course to hold.")
    level = float(np.median(smooth[smooth >= 0.5 * high]))
    return EndTidalCourse(t, y, smooth, level, record.plan.duration_min)


def recorded_flows(record: CaseRecord) -> list[FlowChange]:
    """The record's own flowmeter settings, one change per step that changes them."""
    out: list[FlowChange] = []
    p = record.scenario.patient
    for seg in record.plan.segments(p.default_tidal_volume_ml, p.default_rate_per_min,
                                    record.scenario.circuit.valve):
        flows = (seg.o2_l_min, seg.air_l_min, seg.n2o_l_min)
        if out and (out[-1].o2_l_min, out[-1].air_l_min, out[-1].n2o_l_min) == flows:
            continue
        out.append(FlowChange(seg.start_min, *flows, note="as recorded"))
    return out


def rule_flows(rule: FlowRule, course: EndTidalCourse) -> list[FlowChange]:
    """The rule's flowmeter settings for a case with this end-tidal course.

    A step with ``until_end_tidal_fraction`` ends at the first time the smoothed measured
    course reaches that fraction of the maintenance level (at least one measurement after the
    step starts, at most ``at_most_min``); if the course never reaches it, the step lasts
    ``at_most_min`` or to the end of the case.
    """
    out: list[FlowChange] = []
    start = 0.0
    for i, step in enumerate(rule.steps):
        if start >= course.duration_min - 1e-9:
            break
        out.append(_change(start, step, f"rule step {i + 1}"))
        if step.open_ended:
            break
        if step.for_min is not None:
            end = start + step.for_min
        else:
            reached = course.reaches(step.until_end_tidal_fraction, start + 1e-6)
            cap = None if step.at_most_min is None else start + step.at_most_min
            end = reached if reached is not None else (cap if cap is not None else np.inf)
            if cap is not None:
                end = min(end, cap)
            end = max(end, start + 0.5)  # a flowmeter is not turned twice within half a minute
        start = float(end)
    return out


def _change(time_min: float, step: RuleStep, note: str) -> FlowChange:
    return FlowChange(float(time_min), step.o2_l_min, step.air_l_min, step.n2o_l_min, note)


def held_plan(record: CaseRecord, course: EndTidalCourse, flows: list[FlowChange], *,
              every_min: float = 5.0, name: str = "held") -> Plan:
    """A target-mode plan that holds ``course`` with the fresh gas of ``flows``.

    Parameters
    ----------
    record : CaseRecord
        Supplies the length of the case and its ventilation settings (kept as recorded);
        injected liquid is left out (the controller delivers agent with the dial).
    course : EndTidalCourse
    flows : list of FlowChange
        In time order, the first at 0 min.
    every_min : float, min, 1–30
        Spacing of the end-tidal targets.
    name : str

    Returns
    -------
    Plan
        Steps at the union of the target times, the flow changes and the record's ventilation
        changes; each target is the mean of the smoothed course over its stretch (the dial is
        turned off where that is below :data:`MIN_TARGET_PERCENT`).
    """
    check_number("held_plan", "every_min", every_min, Interval(1.0, 30.0, "min"))
    duration = record.plan.duration_min
    if not flows or abs(flows[0].time_min) > 1e-9:
        raise InputError("held_plan: the flow schedule must start at 0 min.")
    target_times = list(np.arange(0.0, duration - 1e-9, every_min))
    vent = {round(s.time_min, 6): s for s in record.plan.steps
            if s.tidal_volume_ml is not None or s.rate_per_min is not None or s.valve}
    flow_at = {round(f.time_min, 6): f for f in flows}
    times = sorted({round(float(t), 6) for t in target_times} | set(flow_at) | set(vent))
    times = [t for t in times if t < duration - 1e-6]
    steps = []
    targets = {round(float(t), 6) for t in target_times}
    for t in times:
        kwargs: dict = {}
        if t in flow_at:
            f = flow_at[t]
            kwargs.update(o2_l_min=f.o2_l_min, air_l_min=f.air_l_min, n2o_l_min=f.n2o_l_min)
        if t in vent:
            s = vent[t]
            kwargs.update(tidal_volume_ml=s.tidal_volume_ml, rate_per_min=s.rate_per_min,
                          valve=s.valve)
        if t in targets:
            level = course.mean_over(t, min(t + every_min, duration))
            if level >= MIN_TARGET_PERCENT:
                kwargs["target_end_tidal_percent"] = round(level, 4)
            else:
                kwargs["dial_percent"] = 0.0
        steps.append(Step(time_min=t, **kwargs))
    return Plan(tuple(steps), duration_min=duration, name=name)
