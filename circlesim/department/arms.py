"""The runs of one case for one patient: the record's own settings, the measured end-tidal course
held at the recorded flows, and the same course held under the rule.

The two held runs use the project's target controller (:mod:`circlesim.targets`) with the
same settings, so their difference is the effect of the flows alone: how the person turned the
dial does not count as a saving of the rule. Under the rule a warning the rule responds to
(FIO2 low, bag empty) raises the flow ``after_min`` later and the run is repeated from the
start with the raised flow in the plan, at most :data:`MAX_RESPONSES` times.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from circlesim.cases.record import CaseRecord
from circlesim.department.course import (
    EndTidalCourse,
    FlowChange,
    held_plan,
    recorded_flows,
    rule_flows,
)
from circlesim.department.rule import FlowRule
from circlesim.department.usage import Usage, usage_of
from circlesim.domain.costs import Prices
from circlesim.domain.equipment import Circuit
from circlesim.domain.patient import Patient
from circlesim.domain.plan import AIR_O2_FRACTION
from circlesim.engine.result import Result
from circlesim.targets.predict import simulate, simulate_with_targets
from circlesim.targets.settings import ControllerSettings

__all__ = ["MAX_RESPONSES", "Arms", "HoldQuality", "hold_quality", "run_arms"]

#: Most warnings the rule responds to in one case.
MAX_RESPONSES = 3
#: Output interval of the runs, min.
OUTPUT_INTERVAL_MIN = 0.25
#: Course values below this (vol%) are not scored for how closely it was held.
HOLD_FLOOR_PERCENT = 0.1


@dataclass(frozen=True)
class HoldQuality:
    """How closely a run held the measured end-tidal course.

    Attributes
    ----------
    median_percent : float, %
        Median of |predicted − course| / course over the measurement times after the first
        target stretch (course at or above 0.1 vol%).
    worst_percent : float, %
        Largest such deviation.
    targets_met : float, fraction
        Share of the controller's targets met within its tolerance (5 %).
    """

    median_percent: float
    worst_percent: float
    targets_met: float


@dataclass(frozen=True, eq=False)
class Arms:
    """The runs of one case for one patient.

    Attributes
    ----------
    recorded, held, rule : Usage
        The record's own settings; the course held at the recorded flows; held under the rule.
    held_quality, rule_quality : HoldQuality
    responses : tuple of str
        The rule's responses to warnings, in words.
    rule_result : Result or None
        The run under the rule (kept only when asked).
    held_result : Result or None
    """

    recorded: Usage | None
    held: Usage
    rule: Usage
    held_quality: HoldQuality
    rule_quality: HoldQuality
    responses: tuple[str, ...]
    rule_result: Result | None = None
    held_result: Result | None = None


def hold_quality(result: Result, course: EndTidalCourse, *,
                 from_min: float = 0.0) -> HoldQuality:
    """:class:`HoldQuality` of ``result`` against ``course`` from ``from_min`` (min) on (the
    first target stretch is the wash-in, where any plan lags the measured rise)."""
    keep = (course.smoothed >= HOLD_FLOOR_PERCENT) & (course.time_min >= from_min - 1e-9)
    if not keep.any():
        return HoldQuality(0.0, 0.0, 1.0)
    t = course.time_min[keep]
    predicted = np.interp(t, result.time_min, result.end_tidal_percent("agent"))
    dev = 100.0 * np.abs(predicted - course.smoothed[keep]) / course.smoothed[keep]
    met = 1.0
    if result.control is not None and result.control.targets:
        met = float(np.mean([r.met for r in result.control.targets]))
    return HoldQuality(float(np.median(dev)), float(dev.max()), met)


def _raised(rule: FlowRule, current: FlowChange, time_min: float) -> FlowChange:
    """The response's flows: total ``raise_to_l_min`` of O2 and air at the response's O2
    fraction (or the current flows' fraction)."""
    r = rule.respond
    total = r.raise_to_l_min
    if r.o2_fraction is not None:
        fraction = r.o2_fraction
    else:
        fraction = (current.o2_l_min + AIR_O2_FRACTION * current.air_l_min) / current.total_l_min
    o2 = round(total * (fraction - AIR_O2_FRACTION) / (1.0 - AIR_O2_FRACTION), 3)
    o2 = min(max(o2, 0.0), total)
    return FlowChange(time_min, o2, round(total - o2, 3), 0.0,
                      note="raised in response to a warning")


def _in_force(flows: list[FlowChange], time_min: float) -> FlowChange:
    current = flows[0]
    for f in flows:
        if f.time_min <= time_min + 1e-9:
            current = f
    return current


def _respond(rule: FlowRule, base: list[FlowChange], flows: list[FlowChange], at_min: float,
             duration_min: float) -> list[FlowChange]:
    """``flows`` with the response from ``at_min`` inserted."""
    current = _in_force(flows, at_min)
    raised = _raised(rule, current, at_min)
    until = duration_min if rule.respond.for_min is None else at_min + rule.respond.for_min
    out = [f for f in flows if f.time_min < at_min - 1e-9 or f.time_min >= until - 1e-9]
    out.append(raised)
    if until < duration_min - 1e-6 and not any(abs(f.time_min - until) < 1e-9 for f in out):
        resume = _in_force(base, until)
        out.append(replace(resume, time_min=until, note="rule resumed after the response"))
    return sorted(out, key=lambda f: f.time_min)


def run_arms(record: CaseRecord, rule: FlowRule, course: EndTidalCourse, patient: Patient,
             circuit: Circuit, prices: Prices | None, *, every_min: float = 5.0,
             with_recorded: bool = True, keep_results: bool = False) -> Arms:
    """Run the case for one patient: recorded settings, held at recorded flows, under the rule.

    Parameters
    ----------
    record : CaseRecord
    rule : FlowRule
    course : EndTidalCourse
    patient : Patient
        The fitted (or drawn) patient.
    circuit : Circuit
        The record's circuit with the fitted leak.
    prices : Prices or None
    every_min : float, min
        Spacing of the end-tidal targets (:func:`~circlesim.department.course.held_plan`).
    with_recorded : bool
        Also run the record's own settings (skipped for the uncertainty draws).
    keep_results : bool
        Keep the held and rule runs in the returned :class:`Arms`.
    """
    sc = record.scenario
    settings = ControllerSettings(max_fgf_l_min=rule.hold_max_fgf_l_min)
    options = dict(vaporizer=sc.vaporizer, absorber=sc.absorber,
                   output_interval_min=OUTPUT_INTERVAL_MIN, fio2_threshold=rule.fio2_threshold)

    def held_run(flows: list[FlowChange], name: str) -> Result:
        plan = held_plan(record, course, flows, every_min=every_min, name=name)
        return simulate_with_targets(patient, circuit, plan, settings=settings, **options)

    recorded = None
    if with_recorded:
        own = simulate(patient, circuit, record.plan, **options)
        recorded = usage_of(own, prices, rule.fio2_threshold)
    held = held_run(recorded_flows(record), "held at the recorded flows")
    base = rule_flows(rule, course)
    flows = list(base)
    responses: list[str] = []
    duration = record.plan.duration_min
    after = -1.0
    under_rule = held_run(flows, f"under the rule {rule.name}")
    for _ in range(MAX_RESPONSES if rule.respond is not None else 0):
        alert = next((a for a in under_rule.alerts if a.key in rule.respond.on
                      and a.start_min > after + 1e-9), None)
        if alert is None:
            break
        at = round(alert.start_min + rule.respond.after_min, 3)
        if at >= duration - 0.5:
            break
        flows = _respond(rule, base, flows, at, duration)
        responses.append(f"{alert.key} at {alert.start_min:.1f} min: flow raised to "
                         f"{rule.respond.raise_to_l_min:g} L/min at {at:.1f} min")
        after = at
        under_rule = held_run(flows, f"under the rule {rule.name}")
    return Arms(recorded=recorded, held=usage_of(held, prices, rule.fio2_threshold),
                rule=usage_of(under_rule, prices, rule.fio2_threshold),
                held_quality=hold_quality(held, course, from_min=every_min),
                rule_quality=hold_quality(under_rule, course, from_min=every_min),
                responses=tuple(responses),
                rule_result=under_rule if keep_results else None,
                held_result=held if keep_results else None)
