"""The plan advisor: its plans keep every limit when re-run, and use no more agent than the
best simple fixed plan that meets the same targets.

Acceptance criteria of the issue (the project's own requirements): the advisor never violates
a constraint on its own output (checked here by re-running its plan with
:func:`circlesim.simulate` and checking each limit from the run's arrays, independently of the
advisor's own checks), and its plan uses no more agent than the best of a grid of simple fixed
plans that meet the same targets. Targets are multiples of the age-adjusted MAC (Mapleson,
Br J Anaesth 1996;76:179-85); the 5 % band is the issue's.
"""

from __future__ import annotations

import itertools
from dataclasses import fields

import numpy as np
import pytest

import circlesim as cs
from circlesim.advisor.advise import advise
from circlesim.advisor.inputs import Constraints, Targets
from circlesim.base.validation import InputError, Interval

PATIENT = cs.Patient(weight_kg=70, height_cm=175, age_years=40, sex="male")
PATIENT_MAC = cs.Vaporizer("sevoflurane").properties.mac_percent(40.0)  # Mapleson 1996: 1.80 %
TARGETS = Targets(end_tidal_mac=1.0, reach_within_min=8.0, duration_min=60.0)
LIMITS = Constraints(min_fio2=0.30, min_fgf_l_min=0.5, max_fgf_l_min=8.0,
                     max_changes_per_hour=6, follow_labelling=False)


def violations(result, targets, limits, max_dial):
    """Every limit checked on a run's own arrays; returns the list of what is broken."""
    out = []
    t, et = result.time_min, result.end_tidal_percent("agent")
    target = (targets.end_tidal_percent if targets.end_tidal_percent is not None
              else targets.end_tidal_mac * result.mac_percent)
    judged = t >= targets.reach_within_min - 1e-9
    if np.any(np.abs(et[judged] / target - 1.0) > targets.tolerance):
        out.append("end-tidal outside the band")
    if np.any(et > (1 + targets.tolerance) * target):
        out.append("overshoot")
    if result.inspired[:, 0].min() < limits.min_fio2:
        out.append("FIO2")
    segs = result.plan.segments(result.patient.default_tidal_volume_ml,
                                result.patient.default_rate_per_min)
    flows = np.array([s.fgf_l_min for s in segs])
    dials = np.array([s.dial_percent for s in segs])
    if flows.min() < limits.min_fgf_l_min - 1e-9 or flows.max() > limits.max_fgf_l_min + 1e-9:
        out.append("flow range")
    if dials.max() > max_dial + 1e-9 or dials.min() < 0:
        out.append("dial range")
    step = limits.dial_step_percent
    if not np.allclose(dials / step, np.round(dials / step), atol=1e-6):
        out.append("dial scale")
    changes = np.array(result.plan.step_times[1:])
    for c in changes:
        if np.sum((changes >= c) & (changes < c + 60.0)) > limits.max_changes_per_hour:
            out.append("changes per hour")
            break
    return out


@pytest.fixture(scope="module")
def advice():
    return advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"), TARGETS, LIMITS)


def test_advice_keeps_every_limit_when_rerun(advice):
    assert advice.feasible, advice.explanation
    rerun = cs.simulate(PATIENT, cs.Circuit(), advice.plan, vaporizer=cs.Vaporizer())
    assert violations(rerun, TARGETS, LIMITS, 8.0) == []
    assert float(rerun.agent_delivered_ml[-1]) == pytest.approx(advice.agent_ml, rel=1e-9)
    assert all(advice.checks.values())


def _simple_plan(f1, t1, d1, f2, d2, d3, duration=60.0, interval=0.5):
    """Wash-in at flow f1 with dial d1 until t1, then flow f2 with dial d2, dial d3 from 30 min."""
    steps = [cs.Step(0, o2_l_min=f1 / 2, air_l_min=f1 / 2, dial_percent=d1)]
    if t1 < duration:
        steps.append(cs.Step(t1, o2_l_min=f2 / 2, air_l_min=f2 / 2, dial_percent=d2))
    if 30.0 < duration:
        steps.append(cs.Step(30.0, dial_percent=d3))
    return cs.simulate(PATIENT, cs.Circuit(), cs.Plan(steps, duration_min=duration),
                       output_interval_min=interval)


def _least_dial(ok):
    """Least dial on the 0.1 % scale (0-8 %) for which ``ok(dial)`` holds (ok is monotone)."""
    lo, hi = 0, 80
    while lo < hi:
        mid = (lo + hi) // 2
        if ok(mid / 10):
            hi = mid
        else:
            lo = mid + 1
    return lo / 10


def _lowest(result, start, end):
    window = (result.time_min >= start) & (result.time_min < end)
    return result.end_tidal_percent("agent")[window].min()


def _simple_dials(f1, t1, f2, target):
    """The three dials of a simple plan (see the test below)."""
    d1 = _least_dial(lambda d: _simple_plan(f1, t1, d, f2, 0, 0, duration=t1)
                     .end_tidal_percent("agent")[-1] >= target)
    d2 = _least_dial(lambda d: _lowest(_simple_plan(f1, t1, d1, f2, d, d), 8.0, 30.0)
                     >= 0.95 * target)
    d3 = _least_dial(lambda d: _lowest(_simple_plan(f1, t1, d1, f2, d2, d), 30.0, 61.0)
                     >= 0.95 * target)
    return d1, d2, d3


def test_uses_no_more_agent_than_the_best_simple_plan(advice):
    # A grid of simple plans: a wash-in at flow F1 for t1 min, then flow F2, with three dial
    # settings: the least wash-in dial that brings end-tidal to the target by t1, then the
    # least dials that keep it from falling below the band from 8 to 30 min and from 30 min on
    # (end-tidal rises with the dial, so bisection finds them). Every plan is then checked
    # against every limit, with outputs every 0.1 min like the advisor's plan.
    target = PATIENT_MAC
    best = np.inf
    meeting = 0
    for f1, t1, f2 in itertools.product((0.5, 1.0, 2.0, 4.0, 8.0), (2.0, 4.0, 6.0, 8.0),
                                        (0.5, 1.0, 2.0)):
        if f1 < f2:
            continue
        d1, d2, d3 = _simple_dials(f1, t1, f2, target)
        r = _simple_plan(f1, t1, d1, f2, d2, d3, interval=0.1)
        if not violations(r, TARGETS, LIMITS, 8.0):
            meeting += 1
            best = min(best, float(r.agent_delivered_ml[-1]))
    assert meeting >= 10, "the grid must hold plans that meet the targets"
    assert advice.agent_ml <= best + 1e-9, (advice.agent_ml, best)


def test_saves_against_a_plain_high_flow_plan(advice):
    ref = float(advice.reference.agent_delivered_ml[-1])
    assert advice.saved_ml == pytest.approx(ref - advice.agent_ml)
    assert advice.saved_ml > 0
    assert advice.reference.control.targets[0].met


def test_savings_at_three_mac_compare_with_a_plain_plan_that_meets_the_target():
    # regression: the plain 4 L/min plan's controller used to stall at 3 MAC, so the advice
    # reported "-405 % saved". 3 MAC for an 80-year-old is 4.2 % end-tidal (Mapleson 1996).
    patient = cs.Patient(weight_kg=75, height_cm=175, age_years=80)
    vap = cs.Vaporizer("sevoflurane")
    advice = advise(patient, cs.Circuit(), vap,
                    Targets(end_tidal_mac=3.0, reach_within_min=8.0, duration_min=30.0),
                    LIMITS, pareto=False)
    target = 3.0 * vap.properties.mac_percent(80.0)
    # independently: the fully open 8 % dial at 4 L/min reaches the 5 % band within 8 min ...
    full = cs.simulate(patient, cs.Circuit(), cs.Plan(
        [cs.Step(0, o2_l_min=2, air_l_min=2, dial_percent=8)], duration_min=30), vaporizer=vap)
    ok_full = full.end_tidal_percent("agent") >= (1 - TARGETS.tolerance) * target
    assert ok_full.any() and full.time_min[np.argmax(ok_full)] <= 8.0
    # ... so the plain plan compared against must reach and hold it (on its own arrays)
    ref = advice.reference
    t, et = ref.time_min, ref.end_tidal_percent("agent")
    inside = np.abs(et / target - 1.0) <= TARGETS.tolerance
    assert inside.any() and t[np.argmax(inside)] <= 8.0
    assert inside[np.argmax(inside):].all()
    assert ref.control.targets[0].met
    assert advice.feasible
    assert 0.0 < advice.saved_percent < 100.0
    assert advice.saved_ml == pytest.approx(float(ref.agent_delivered_ml[-1]) - advice.agent_ml)
    assert "plan holding the same target" in advice.explanation


def test_pareto_points_are_a_trade_off(advice):
    points = advice.pareto
    assert len(points) >= 2
    times = [p.time_to_target_min for p in points]
    agents = [p.agent_ml for p in points]
    assert times == sorted(times) and agents == sorted(agents, reverse=True)
    for p in points:  # each point's plan reaches the target when it says, within 0.5 min
        r = cs.simulate(PATIENT, cs.Circuit(), p.plan)
        target = r.mac_percent
        ok = np.abs(r.end_tidal_percent("agent") / target - 1) <= 0.05
        assert r.time_min[np.argmax(ok)] == pytest.approx(p.time_to_target_min, abs=0.5)
        assert float(r.agent_delivered_ml[-1]) == pytest.approx(p.agent_ml, rel=1e-6)


def test_time_objective_is_faster_and_agent_objective_cheaper(advice):
    fast = advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"), TARGETS, LIMITS,
                  objective="time", pareto=False)
    assert fast.feasible
    assert fast.time_to_target_min <= advice.time_to_target_min + 1e-9
    assert advice.agent_ml <= fast.agent_ml + 1e-9
    rerun = cs.simulate(PATIENT, cs.Circuit(), fast.plan)
    assert violations(rerun, TARGETS, LIMITS, 8.0) == []


def test_co2e_objective_reports_co2_equivalent(advice):
    # GWP20 of sevoflurane 349 (Ryan & Nielsen, Anesth Analg 2010;111:92-8)
    grams = float(advice.result.grams(advice.result.cumulative["delivered"][-1, -1]))
    assert advice.co2e_kg == pytest.approx(grams * 349 / 1000, rel=1e-6)


@pytest.mark.parametrize("agent,age", [("isoflurane", 80), ("desflurane", 40)])
def test_other_agents_keep_the_limits(agent, age):
    patient = cs.Patient(age_years=age)
    targets = Targets(end_tidal_mac=1.0, reach_within_min=10.0, duration_min=90.0,
                      changes=((60.0, 0.8),))
    vap = cs.Vaporizer(agent)
    result = advise(patient, cs.Circuit(), vap, targets, LIMITS, pareto=False)
    assert result.feasible, result.explanation
    rerun = cs.simulate(patient, cs.Circuit(), result.plan, vaporizer=vap)
    t, et = rerun.time_min, rerun.end_tidal_percent("agent")
    mac = rerun.mac_percent
    first = (t >= 10.0) & (t < 60.0)
    second = t >= 70.0
    assert np.all(np.abs(et[first] / mac - 1) <= 0.05)
    assert np.all(np.abs(et[second] / (0.8 * mac) - 1) <= 0.05)
    assert rerun.inspired[:, 0].min() >= 0.30


def test_labelling_keeps_sevoflurane_at_or_above_one_litre():
    # US sevoflurane labelling as circlesim's alert rules state it (secondary; check the label)
    result = advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"), TARGETS,
                    Constraints(follow_labelling=True), pareto=False)
    flows = [s.fgf_l_min for s in result.plan.segments(500.0, 12.0)]
    assert min(flows) >= 1.0 - 1e-9
    assert not any(a.key.startswith("sevoflurane_") for a in result.result.alerts)


# ---- bad input: an explanation and the closest plan --------------------------------------------
def test_target_above_what_the_vaporizer_gives():
    result = advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"),
                    Targets(end_tidal_percent=9.0, reach_within_min=10, duration_min=30),
                    LIMITS, pareto=False)
    assert not result.feasible
    assert any("above what the 8 % dial can give" in p for p in result.problems)
    rerun = cs.simulate(PATIENT, cs.Circuit(), result.plan)
    others = [v for v in violations(rerun, Targets(end_tidal_percent=9.0, duration_min=30),
                                    LIMITS, 8.0) if v != "end-tidal outside the band"]
    assert others == []  # the closest plan keeps every other limit
    full = cs.simulate(PATIENT, cs.Circuit(), cs.Plan(
        [cs.Step(0, o2_l_min=4, air_l_min=4, dial_percent=8)], duration_min=30))
    assert rerun.end_tidal_percent("agent")[-1] >= 0.9 * full.end_tidal_percent("agent")[-1]
    # the plain plan cannot hold 9 % either, and the comparison says so
    assert not result.reference.control.met
    assert "does NOT hold the same target" in result.explanation


def test_target_time_of_zero():
    result = advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"),
                    Targets(end_tidal_mac=1.0, reach_within_min=0.0, duration_min=30), LIMITS,
                    pareto=False)
    assert not result.feasible
    assert any("target time of 0 min cannot be met" in p for p in result.problems)
    assert result.time_to_target_min is not None and result.time_to_target_min < 4.0


def test_target_too_soon_for_the_flows_allowed():
    limits = Constraints(max_fgf_l_min=2.0, follow_labelling=False)
    result = advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"),
                    Targets(end_tidal_mac=1.0, reach_within_min=1.0, duration_min=30), limits,
                    pareto=False)
    assert not result.feasible
    assert any("cannot be reached within 1 min" in p for p in result.problems)
    assert result.time_to_target_min is not None


def test_contradictory_flow_limits():
    limits = Constraints(min_fgf_l_min=2.0, max_fgf_l_min=1.0, follow_labelling=False)
    result = advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"), TARGETS, limits,
                    pareto=False)
    assert not result.feasible
    assert any("lowest fresh gas flow (2 L/min) is above the highest (1 L/min)" in p
               for p in result.problems)
    assert all(s.fgf_l_min == pytest.approx(2.0) for s in result.plan.segments(500.0, 12.0))


def test_labelling_against_a_low_flow_ceiling():
    limits = Constraints(max_fgf_l_min=0.6, follow_labelling=True)
    result = advise(PATIENT, cs.Circuit(), cs.Vaporizer("sevoflurane"), TARGETS, limits,
                    pareto=False)
    assert not result.feasible
    assert any("labelling asks for at least 1 L/min" in p for p in result.problems)


def test_dial_limit_above_the_vaporizer():
    with pytest.raises(InputError, match=r"max_dial_percent must be a number from 0.1 to 5 "
                                         r"vol% \(the isoflurane vaporizer's range\); got 6"):
        advise(PATIENT, cs.Circuit(), cs.Vaporizer("isoflurane"), TARGETS,
               Constraints(max_dial_percent=6.0))


def test_unknown_objective():
    with pytest.raises(InputError, match=r"advise\.objective must be one of"):
        advise(PATIENT, cs.Circuit(), cs.Vaporizer(), TARGETS, LIMITS, objective="cost")


def test_targets_in_two_units():
    with pytest.raises(InputError, match="one of end_tidal_mac and end_tidal_percent, not both"):
        Targets(end_tidal_mac=1.0, end_tidal_percent=1.8)


def test_target_changes_out_of_order():
    with pytest.raises(InputError, match=r"changes\[1\].time_min must be later than 50"):
        Targets(duration_min=120, changes=((50, 0.8), (40, 0.9)))


def _declared(kind):
    for f in fields(kind):
        constraint = f.metadata.get("constraint")
        if isinstance(constraint, Interval):
            for bad in constraint.invalid_examples():
                yield pytest.param(kind, f.name, bad, constraint,
                                   id=f"{kind.__name__}.{f.name}={bad:g}")


@pytest.mark.parametrize("kind,name,bad,constraint",
                         list(_declared(Targets)) + list(_declared(Constraints)))
def test_declared_limits_reject_bad_values(kind, name, bad, constraint):
    with pytest.raises(InputError) as info:
        kind(**{name: bad})
    assert f"{kind.__name__}.{name}" in str(info.value)
    assert constraint.describe() in str(info.value)
