"""Target mode: the feedback controller reaches and holds an end-tidal target, or says why not.

Acceptance criterion of the issue (the project's own requirement, not a published value): the
controller reaches the target within 5 % and holds it within 5 % for the rest of the plan for
sevoflurane, isoflurane and desflurane at 0.5, 1 and 2 L/min for adult and elderly patients,
whenever the dial range allows; when it cannot, the result says so and by how much.

Every check here is made on the result's own arrays, on a fresh run of the controller's plan
with :func:`circlesim.simulate`, or on an independent full-dial run — never on the
controller's own report alone. Targets are multiples of the age-adjusted MAC of Mapleson
(Br J Anaesth 1996;76:179-85).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.validation import InputError
from circlesim.targets.predict import simulate_with_targets
from circlesim.targets.settings import ControllerSettings

TOLERANCE = 0.05  # the criterion, fraction of the target
ADULT = cs.Patient(weight_kg=70, height_cm=175, age_years=40, sex="male")
ELDERLY = cs.Patient(weight_kg=70, height_cm=165, age_years=80, sex="female")


def _first_within(t, et, target, tol=TOLERANCE):
    ok = np.abs(et / target - 1.0) <= tol
    return float(t[np.argmax(ok)]) if ok.any() else None


def _plan(flow, duration=60.0, **target):
    return cs.Plan([cs.Step(0, o2_l_min=flow / 2, air_l_min=flow / 2, **target)],
                   duration_min=duration)


def _full_dial_et(patient, vaporizer, flow, duration):
    """End-tidal agent (vol%) with the dial fully open from the start: the most it can be."""
    plan = cs.Plan([cs.Step(0, o2_l_min=flow / 2, air_l_min=flow / 2,
                            dial_percent=vaporizer.max_dial)], duration_min=duration)
    r = cs.simulate(patient, cs.Circuit(), plan, vaporizer=vaporizer)
    return r.time_min, r.end_tidal_percent("agent")


@pytest.mark.parametrize("patient", [ADULT, ELDERLY], ids=["adult40", "elderly80"])
@pytest.mark.parametrize("flow", [0.5, 1.0, 2.0])
@pytest.mark.parametrize("agent", ["sevoflurane", "isoflurane", "desflurane"])
def test_reaches_and_holds_one_mac(agent, flow, patient):
    vap = cs.Vaporizer(agent)
    duration = 60.0
    result = cs.simulate(patient, cs.Circuit(), _plan(flow, duration, target_mac=1.0),
                         vaporizer=vap)
    target = vap.properties.mac_percent(patient.age_years)
    t, et = result.time_min, result.end_tidal_percent("agent")
    report = result.control.targets[0]
    # does the dial range allow it? the fully open dial must bring end-tidal to the band
    t_full, et_full = _full_dial_et(patient, vap, flow, duration)
    allowed = _first_within(t_full, np.minimum(et_full, target), target) is not None
    reached = _first_within(t, et, target)
    if allowed:
        assert report.met, report.message
        assert reached is not None
        after = t >= reached
        worst = float(np.max(np.abs(et[after] / target - 1.0)))
        assert worst <= TOLERANCE, f"held only within {100 * worst:.1f} %"
        assert report.reached_min == pytest.approx(reached, abs=1e-9)
    else:  # then the result must say so, and by how much
        assert not report.met
        assert report.limited_by == "dial range"
        short = 100.0 * (1.0 - et.max() / target)
        assert report.largest_below_percent == pytest.approx(short, abs=0.5)
    # the controller's plan is one a person can follow: dial on the 0.1 % scale within the
    # vaporizer's range, flows unchanged, at least 1 min between changes
    segs = result.plan.segments(patient.default_tidal_volume_ml, patient.default_rate_per_min)
    dials = np.array([s.dial_percent for s in segs])
    assert np.all((dials >= 0) & (dials <= vap.max_dial + 1e-9))
    assert np.allclose(dials * 10, np.round(dials * 10), atol=1e-9)
    assert all(s.fgf_l_min == pytest.approx(flow) for s in segs)
    assert np.all(np.diff(result.plan.step_times) >= 1.0 - 1e-9)
    # and a fresh run of that plan is what the result shows
    again = cs.simulate(patient, cs.Circuit(), result.plan, vaporizer=vap)
    assert again.control is None
    np.testing.assert_allclose(again.end_tidal_percent("agent"), et, rtol=1e-9, atol=1e-12)


# ---- high targets near the top of the dial range ------------------------------------------------
# Regression: the look-ahead paired each first dial with the later dial of least squared error,
# which for a high target lay beyond the top of the scale and was clipped there; the clipped
# later dial passed the target late in the look-ahead, so every bold first dial was ruled out
# and the controller hovered at 0-1 % (sevoflurane 3 MAC at 4 L/min for an 80-year-old stayed
# at 0.42 % end-tidal and blamed itself). The checks are the acceptance rule, with
# "the dial range allows it" decided by an independent run of the engine with the dial fully
# open from the start, which no plan can beat.
DWELL_MIN = 1.0  # the controller's least time between changes (ControllerSettings default)


def _check_high_target(agent, mac_multiple, patient, o2, air, duration=30.0, **target):
    vap = cs.Vaporizer(agent)
    target = target or {"target_mac": mac_multiple}
    plan = cs.Plan([cs.Step(0, o2_l_min=o2, air_l_min=air, **target)], duration_min=duration)
    result = cs.simulate(patient, cs.Circuit(), plan, vaporizer=vap)
    goal = target.get("target_end_tidal_percent") or (
        mac_multiple * vap.properties.mac_percent(patient.age_years))
    t, et = result.time_min, result.end_tidal_percent("agent")
    report = result.control.targets[0]
    assert report.target_percent == pytest.approx(goal)
    full = cs.simulate(patient, cs.Circuit(), cs.Plan(
        [cs.Step(0, o2_l_min=o2, air_l_min=air, dial_percent=vap.max_dial)],
        duration_min=duration), vaporizer=vap)
    t_full, et_full = full.time_min, full.end_tidal_percent("agent")
    full_reached = _first_within(t_full, np.minimum(et_full, goal), goal)
    reached = _first_within(t, et, goal)
    # never blames itself while the fully open dial would have reached the target
    assert report.limited_by != "controller", report.message
    if full_reached is not None:  # the dial range allows it: reach it, about as soon, and hold
        assert report.met, report.message
        assert reached is not None
        # tolerance: one interval between changes behind the fully open dial
        assert reached <= full_reached + DWELL_MIN + 1e-9, (reached, full_reached)
        worst = float(np.max(np.abs(et[t >= reached] / goal - 1.0)))
        assert worst <= TOLERANCE, f"held only within {100 * worst:.1f} %"
        assert "reached (within 5 %)" in report.message
    else:  # it does not: say so and by how much, having come as close as the full dial
        assert not report.met and report.limited_by == "dial range", report.message
        short = 100.0 * (1.0 - et.max() / goal)
        assert report.largest_below_percent == pytest.approx(short, abs=0.05)
        assert f"{short:.1f} % below the target" in report.message
        # tolerance 1 %: the closest plan keeps the dial (nearly) fully open
        assert et.max() >= 0.99 * et_full.max()
    return result


HIGH_TARGETS = (
    [("sevoflurane", m) for m in (2.5, 2.8, 2.9, 3.0)]  # dial 8 %: within reach at 2-4 L/min
    + [("desflurane", m) for m in (2.0, 2.5, 3.0)]  # dial 18 %: 3 MAC of a 40-year-old is not
    + [("isoflurane", m) for m in (2.0, 2.5, 3.0)])  # dial 5 %: 2.5-3 MAC at 40 y is not at 2 L


@pytest.mark.parametrize("flow", [2.0, 4.0])
@pytest.mark.parametrize("patient", [ADULT, ELDERLY], ids=["adult40", "elderly80"])
@pytest.mark.parametrize("agent,mac_multiple", HIGH_TARGETS)
def test_high_targets_are_reached_when_the_dial_allows(agent, mac_multiple, patient, flow):
    _check_high_target(agent, mac_multiple, patient, flow / 2, flow / 2)


@pytest.mark.parametrize("target", [{"target_mac": 3.0}, {"target_mac": 2.9},
                                    {"target_end_tidal_percent": 6.0}],
                         ids=["3.0MAC", "2.9MAC", "6.0vol%"])
def test_reported_case_three_mac_elderly_at_four_litres(target):
    # the report: 80 y, O2 1.5 + air 2.5 L/min, 30 min; 3 MAC is 4.2 % end-tidal (Mapleson 1996)
    patient = cs.Patient(weight_kg=75, height_cm=175, age_years=80)
    result = _check_high_target("sevoflurane", target.get("target_mac"), patient, 1.5, 2.5,
                                **target)
    dials = np.array([s.dial_percent for s in result.plan.segments(500.0, 12.0)])
    assert dials[0] == pytest.approx(8.0)  # wash-in starts with the dial fully open


def test_cannot_reach_in_time_says_so_and_by_how_much():
    # isoflurane at 0.5 L/min, 1 MAC within 8 min: the 5 % dial cannot do it
    vap = cs.Vaporizer("isoflurane")
    result = cs.simulate(ADULT, cs.Circuit(),
                         _plan(0.5, 60.0, target_mac=1.0, target_within_min=8.0), vaporizer=vap)
    report = result.control.targets[0]
    target = vap.properties.mac_percent(ADULT.age_years)
    t_full, et_full = _full_dial_et(ADULT, vap, 0.5, 60.0)
    at_deadline = float(np.interp(8.0, t_full, et_full))
    assert at_deadline < (1 - TOLERANCE) * target  # the dial range really does not allow it
    assert not report.met and report.limited_by == "dial range"
    assert report.deadline_min == 8.0 and report.reached_min > 8.0
    shown = float(np.interp(8.0, result.time_min, result.end_tidal_percent("agent")))
    short = 100.0 * (1.0 - shown / target)
    assert f"{short:.1f} % short" in report.message
    assert any(a.key == "target_not_met" for a in result.alerts)


def test_target_above_the_vaporizer_gives_the_closest_plan():
    vap = cs.Vaporizer("sevoflurane")
    result = cs.simulate(ADULT, cs.Circuit(), _plan(2.0, 30.0, target_end_tidal_percent=9.0),
                         vaporizer=vap)
    report = result.control.targets[0]
    assert not report.met and report.reached_min is None
    assert report.limited_by == "dial range"
    assert "NOT reached" in report.message
    segs = result.plan.segments(500.0, 12.0)
    assert all(s.dial_percent == pytest.approx(vap.max_dial) for s in segs)
    best = float(result.end_tidal_percent("agent").max())
    assert report.largest_below_percent == pytest.approx(100 * (1 - best / 9.0), abs=0.1)


def test_flow_is_raised_when_allowed_and_lowered_again():
    vap = cs.Vaporizer("isoflurane")
    settings = ControllerSettings(max_fgf_l_min=8.0)
    result = simulate_with_targets(ADULT, cs.Circuit(),
                                   _plan(0.5, 60.0, target_mac=1.0, target_within_min=8.0),
                                   vaporizer=vap, settings=settings)
    report = result.control.targets[0]
    assert report.met, report.message
    target = vap.properties.mac_percent(ADULT.age_years)
    reached = _first_within(result.time_min, result.end_tidal_percent("agent"), target)
    assert reached <= 8.0
    flows = np.array([s.fgf_l_min for s in result.plan.segments(500.0, 12.0)])
    assert flows.max() > 0.5 + 1e-9 and flows.max() <= 8.0 + 1e-9
    assert flows[-1] == pytest.approx(0.5)  # back to the step's own flow
    assert np.allclose(flows * 10, np.round(flows * 10), atol=1e-6)  # 0.1 L/min steps


def test_lower_target_later_in_the_plan():
    vap = cs.Vaporizer("sevoflurane")
    plan = cs.Plan([cs.Step(0, o2_l_min=1, air_l_min=1, target_mac=1.0),
                    cs.Step(30, target_mac=0.6, target_within_min=10)], duration_min=60)
    result = cs.simulate(ADULT, cs.Circuit(), plan, vaporizer=vap)
    mac = vap.properties.mac_percent(ADULT.age_years)
    t, et = result.time_min, result.end_tidal_percent("agent")
    late = t >= 40.0
    assert np.all(np.abs(et[late] / (0.6 * mac) - 1) <= TOLERANCE)
    assert [r.met for r in result.control.targets] == [True, True]
    target_column = result.frame()["target_end_tidal_sevoflurane_pct"].to_numpy()
    assert target_column[np.searchsorted(t, 10.0)] == pytest.approx(mac)
    assert target_column[-1] == pytest.approx(0.6 * mac)


@pytest.mark.parametrize("agent,patient,high,low", [
    ("sevoflurane", ELDERLY, 2.5, 1.0), ("sevoflurane", ADULT, 1.0, 0.5),
    ("isoflurane", ADULT, 2.5, 1.0), ("desflurane", ELDERLY, 1.0, 0.5)],
    ids=["sevoflurane-80y-2.5to1", "sevoflurane-40y-1to0.5", "isoflurane-40y-2.5to1",
         "desflurane-80y-1to0.5"])
def test_lower_target_at_four_litres_is_reached_about_as_soon_as_with_the_dial_off(
        agent, patient, high, low):
    # regression: at 4 L/min the controller used to keep the dial high and never came down
    vap = cs.Vaporizer(agent)
    plan = cs.Plan([cs.Step(0, o2_l_min=2, air_l_min=2, target_mac=high),
                    cs.Step(20, target_mac=low)], duration_min=40)
    result = cs.simulate(patient, cs.Circuit(), plan, vaporizer=vap)
    goal = low * vap.properties.mac_percent(patient.age_years)
    t, et = result.time_min, result.end_tidal_percent("agent")
    later = t >= 20.0 - 1e-9
    reached = _first_within(t[later], et[later], goal)
    # independently: the dial off from 20 min is the fastest way down
    off = cs.simulate(patient, cs.Circuit(), cs.Plan(
        [cs.Step(0, o2_l_min=2, air_l_min=2, dial_percent=0)], duration_min=20),
        vaporizer=vap, initial_state=result.states[int(np.argmax(later))])
    fastest = 20.0 + _first_within(off.time_min, np.maximum(off.end_tidal_percent("agent"),
                                                           goal), goal)
    assert reached is not None and reached <= fastest + DWELL_MIN + 1e-9, (reached, fastest)
    worst = float(np.max(np.abs(et[t >= reached] / goal - 1.0)))
    assert worst <= TOLERANCE, f"held only within {100 * worst:.1f} %"
    assert [r.met for r in result.control.targets] == [True, True]


def test_explicit_dial_after_a_target_ends_target_mode():
    plan = cs.Plan([cs.Step(0, o2_l_min=1, air_l_min=1, target_mac=1.0),
                    cs.Step(20, dial_percent=0.0)], duration_min=30)
    result = cs.simulate(ADULT, cs.Circuit(), plan)
    segs = result.plan.segments(500.0, 12.0)
    assert segs[-1].dial_percent == 0.0 and segs[-1].start_min == pytest.approx(20.0)
    assert len(result.control.targets) == 1
    assert result.control.targets[0].end_min == pytest.approx(20.0)
    column = result.frame()["target_end_tidal_sevoflurane_pct"].to_numpy()
    assert math.isnan(column[-1])


def test_coarse_dial_steps_are_followed():
    settings = ControllerSettings(dial_step_percent=0.5, min_dwell_min=3.0)
    result = simulate_with_targets(ADULT, cs.Circuit(), _plan(1.0, 45.0, target_mac=1.0),
                                   vaporizer=cs.Vaporizer("desflurane"), settings=settings)
    segs = result.plan.segments(500.0, 12.0)
    dials = np.array([s.dial_percent for s in segs])
    assert np.allclose(dials * 2, np.round(dials * 2))
    assert np.all(np.diff(result.plan.step_times) >= 3.0 - 1e-9)


def test_plans_without_targets_are_unchanged():
    plan = cs.Plan([cs.Step(0, o2_l_min=1, air_l_min=1, dial_percent=3)], duration_min=20)
    result = cs.simulate(ADULT, cs.Circuit(), plan)
    assert result.control is None
    assert "dial_sevoflurane_pct" not in result.frame().columns
    assert result.plan is plan


def test_continues_from_a_final_state():
    first = cs.simulate(ADULT, cs.Circuit(), _plan(2.0, 20.0, target_mac=1.0))
    plan = cs.Plan([cs.Step(0, o2_l_min=0.5, air_l_min=0.5, target_mac=1.0)], duration_min=20)
    second = cs.simulate(ADULT, cs.Circuit(), plan, initial_state=first.final_state)
    mac = cs.Vaporizer().properties.mac_percent(40)
    assert np.all(np.abs(second.end_tidal_percent("agent") / mac - 1) <= TOLERANCE)


def test_scenario_round_trip_keeps_targets(tmp_path):
    from circlesim.scenario import load_scenario, save_scenario

    plan = cs.Plan([cs.Step(0, o2_l_min=0.3, air_l_min=0.2, target_mac=1.0,
                            target_within_min=8.0),
                    cs.Step(60, target_end_tidal_percent=1.2)], duration_min=90)
    path = save_scenario(cs.Scenario(plan=plan), tmp_path / "s.toml")
    assert load_scenario(path).plan == plan


def test_assemble_refuses_target_steps():
    from circlesim.engine.assembly import assemble

    with pytest.raises(InputError, match="holds an end-tidal target"):
        assemble(ADULT, cs.Circuit(), cs.Absorber(), cs.Vaporizer(),
                 _plan(1.0, 10.0, target_mac=1.0))


# ---- bad input ---------------------------------------------------------------------------------
def test_target_and_dial_together():
    with pytest.raises(InputError, match=r"dial_percent \(2\) cannot be set together with an "
                                         r"end-tidal target"):
        cs.Step(0, o2_l_min=1, dial_percent=2, target_mac=1.0)


def test_target_both_ways():
    with pytest.raises(InputError, match=r"target_end_tidal_percent and Step\.target_mac "
                                         r"cannot both be set"):
        cs.Step(0, o2_l_min=1, target_mac=1.0, target_end_tidal_percent=1.8)


def test_target_time_of_zero():
    with pytest.raises(InputError, match=r"Step.target_within_min must be a number above 0 "
                                         r"and at most 240 min; got 0"):
        cs.Step(0, o2_l_min=1, target_mac=1.0, target_within_min=0)


def test_target_time_without_a_target():
    with pytest.raises(InputError, match="needs a target on the same step"):
        cs.Step(0, o2_l_min=1, dial_percent=1, target_within_min=5)


def _settings_bad_values():
    from dataclasses import fields

    from circlesim.base.validation import Interval

    for f in fields(ControllerSettings):
        constraint = f.metadata.get("constraint")
        if isinstance(constraint, Interval):
            for bad in constraint.invalid_examples():
                yield pytest.param(f.name, bad, constraint, id=f"{f.name}={bad:g}")


@pytest.mark.parametrize("name,bad,constraint", list(_settings_bad_values()))
def test_controller_settings_reject_bad_values(name, bad, constraint):
    with pytest.raises(InputError) as info:
        ControllerSettings(**{name: bad})
    assert f"ControllerSettings.{name}" in str(info.value)
    assert constraint.describe() in str(info.value)


def test_aim_must_be_inside_the_tolerance():
    with pytest.raises(InputError, match="aim must be below the tolerance"):
        ControllerSettings(aim=0.06, tolerance=0.05)
