"""The batch engine: many members in one compiled integration give the single-patient numbers.

The reference is :func:`circlesim.simulate`, the engine checked against closed-form solutions
and scipy's ``solve_ivp`` in the engine tests. Tolerance: 1e-4 relative in end-tidal and FIO2
(the issue's requirement), with an absolute floor of 1e-12 for values at zero.
"""

import numpy as np
import pytest

import circlesim as cs
from circlesim.engine.batch import simulate_batch
from circlesim.engine.batch_result import BatchResult

RTOL = 1e-4
FLOOR = 1e-12

#: A mixed batch: a child, an adult, an elderly woman and an obese man (invented patients).
MIXED = (
    cs.Patient(weight_kg=20.0, height_cm=115.0, age_years=6.0, sex="female"),
    cs.Patient(weight_kg=70.0, height_cm=175.0, age_years=40.0, sex="male"),
    cs.Patient(weight_kg=58.0, height_cm=158.0, age_years=88.0, sex="female"),
    cs.Patient(weight_kg=150.0, height_cm=172.0, age_years=52.0, sex="male"),
)

#: Three plans of different lengths (padding) for the many-plans batch.
PLANS = (
    cs.Plan([cs.Step(0, o2_l_min=2.0, air_l_min=4.0, dial_percent=5.0),
             cs.Step(8, o2_l_min=0.35, air_l_min=0.15, dial_percent=3.5),
             cs.Step(40, dial_percent=2.5)], duration_min=60.0),
    cs.Plan([cs.Step(0, o2_l_min=1.0, air_l_min=1.0, dial_percent=8.0)], duration_min=60.0),
    cs.Plan([cs.Step(0, o2_l_min=6.0, dial_percent=0.0),
             cs.Step(5, o2_l_min=0.3, valve="closed", inject_ml=2.0),
             cs.Step(15, inject_ml=1.0), cs.Step(30, inject_ml=1.0)], duration_min=60.0),
)


def _close(batch_values: np.ndarray, single_values: np.ndarray) -> None:
    np.testing.assert_array_less(np.abs(batch_values - single_values),
                                 RTOL * np.abs(single_values) + FLOOR)


def test_mixed_batch_matches_single_patient_runs():
    circuit = cs.Circuit()
    batch = simulate_batch(MIXED, circuit, PLANS[0])
    assert isinstance(batch, BatchResult) and len(batch) == len(MIXED)
    assert batch.end_tidal.shape == (4, batch.time_min.size, len(batch.gases))
    for b, patient in enumerate(MIXED):
        single = cs.simulate(patient, circuit, PLANS[0])
        np.testing.assert_array_equal(batch.time_min, single.time_min)
        _close(batch.end_tidal[b], single.end_tidal)
        _close(batch.inspired[b, :, 0], single.inspired[:, 0])  # FIO2
        _close(batch.end_tidal_percent("agent")[b], single.end_tidal_percent("agent"))
        _close(batch.agent_delivered_ml[b], single.agent_delivered_ml)
        _close(batch.brain_percent()[b], single.brain_percent())
        assert batch.mac_percent[b] == pytest.approx(single.mac_percent, rel=1e-12)


def test_many_plans_with_different_step_counts_match_single_runs():
    # Plans of 3, 1 and 4 steps in one batch: shorter plans are padded with empty segments.
    patient = cs.Patient()
    circuit = cs.Circuit()
    vaporizer = cs.Vaporizer("sevoflurane")
    batch = simulate_batch(patient, circuit, PLANS, vaporizer=vaporizer)
    for b, plan in enumerate(PLANS):
        single = cs.simulate(patient, circuit, plan, vaporizer=vaporizer)
        # the batch's output times are the union of every plan's step times
        on_grid = np.isin(batch.time_min, single.time_min)
        assert on_grid.sum() == single.time_min.size
        _close(batch.end_tidal[b][on_grid], single.end_tidal)
        _close(batch.inspired[b][on_grid][:, 0], single.inspired[:, 0])
        _close(batch.bag_volume_l[b][on_grid], single.bag_volume_l)
        _close(batch.final_state[b], single.final_state)


def test_member_is_a_full_result_with_alerts():
    # A closed circuit at O2 near consumption lets FIO2 fall: the member carries the alert.
    plans = [PLANS[2], PLANS[0]]
    batch = simulate_batch(MIXED[3], cs.Circuit(), plans, vaporizer=cs.Vaporizer("isoflurane"))
    for b, plan in enumerate(plans):
        member = batch.member(b)
        single = cs.simulate(MIXED[3], cs.Circuit(), plan, vaporizer=cs.Vaporizer("isoflurane"))
        assert [a.key for a in member.alerts] == [a.key for a in single.alerts]
        np.testing.assert_allclose(member.gas_balance()["residual"], 0.0, atol=1e-6)


def test_serial_and_parallel_integration_agree_exactly():
    a = simulate_batch(MIXED, cs.Circuit(), PLANS[0], parallel=True)
    b = simulate_batch(MIXED, cs.Circuit(), PLANS[0], parallel=False)
    np.testing.assert_array_equal(a.states, b.states)
    np.testing.assert_array_equal(a.aux, b.aux)


def test_every_member_conserves_every_gas():
    # Conservation (design brief §4): delivered = vented + leaked + sampled + absorbed + held,
    # to 1e-6 relative of the amount delivered, for every member.
    batch = simulate_batch(MIXED, cs.Circuit(leak_ml_min=100, sample_returned=False), PLANS[0])
    for b in range(len(batch)):
        balance = batch.member(b).gas_balance()
        scale = np.maximum(np.abs(balance["in"]), 1e-3)
        assert np.all(np.abs(balance["residual"]) <= 1e-6 * scale)


def test_frame_stacks_members():
    batch = simulate_batch(MIXED[:2], cs.Circuit(), PLANS[1], output_interval_min=5.0)
    frame = batch.frame()
    assert list(frame["member"].unique()) == [0, 1]
    assert len(frame) == 2 * batch.time_min.size


@pytest.mark.parametrize("kwargs, words", [
    ({"patient": [], "plan": PLANS[0]}, "patient must hold at least one Patient"),
    ({"patient": MIXED[:2], "plan": PLANS}, "same length"),
    ({"patient": [MIXED[0], "adult"], "plan": PLANS[0]}, "patient[1] must be a Patient"),
    ({"patient": MIXED[0], "plan": [PLANS[0], cs.Plan([cs.Step(0, o2_l_min=2)],
                                                       duration_min=30.0)]},
     "duration_min must equal"),
    ({"patient": MIXED[0], "plan": PLANS[0],
      "vaporizer": [cs.Vaporizer("sevoflurane"), cs.Vaporizer("isoflurane")]},
     "same agent"),
    ({"patient": [MIXED[0], cs.Patient(intertissue_diffusion=False)], "plan": PLANS[0]},
     "same tissue layout"),
    ({"patient": MIXED[0], "plan": PLANS[0], "output_interval_min": 0.0},
     "output_interval_min must be a number from 0.005 to 10 min"),
    ({"patient": MIXED[0], "plan": cs.Plan([cs.Step(0, o2_l_min=2, dial_percent=12)]),
      "vaporizer": cs.Vaporizer("isoflurane")}, "batch member 0"),
])
def test_bad_batch_input_is_named(kwargs, words):
    kwargs = {"circuit": cs.Circuit(), **kwargs}
    with pytest.raises(cs.InputError, match=words.replace("[", r"\[").replace("]", r"\]")):
        simulate_batch(**kwargs)


def test_member_index_out_of_range():
    batch = simulate_batch(MIXED[:2], cs.Circuit(), PLANS[1], output_interval_min=5.0)
    with pytest.raises(IndexError, match="from 0 to 1"):
        batch.member(2)


def test_group_assembly_gives_each_patients_own_inputs_exactly():
    # Patients sharing a plan are assembled together (vectorised); each member's arrays must
    # be exactly those of the one-patient assembly, including a step that sets its own
    # ventilation next to steps that take each patient's default.
    from circlesim.engine.assembly import assemble, assemble_group

    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, air_l_min=4.0, dial_percent=5.0),
                    cs.Step(10, o2_l_min=0.5, tidal_volume_ml=450.0, rate_per_min=14.0),
                    cs.Step(30, dial_percent=2.0, inject_ml=1.0)], duration_min=60.0)
    circuit, absorber, vaporizer = cs.Circuit(), cs.Absorber(), cs.Vaporizer("desflurane")
    adults = MIXED[1:3]  # 450 mL breaths: larger than these adults' dead spaces
    group = assemble_group(adults, circuit, absorber, vaporizer, plan)
    for b, patient in enumerate(adults):
        one = assemble(patient, circuit, absorber, vaporizer, plan)
        member = group.member(b)
        for name in ("params", "seg_times", "jumps", "y0", "atol"):
            np.testing.assert_array_equal(getattr(member, name), getattr(one, name), name)
        assert member.segments == one.segments


def test_a_group_names_the_member_whose_breath_is_too_small():
    from circlesim.engine.assembly import assemble_group

    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, dial_percent=2.0),
                    cs.Step(5, tidal_volume_ml=200.0)], duration_min=20.0)
    with pytest.raises(cs.InputError, match=r"batch member 3: Plan.steps\[1\].tidal_volume_ml "
                                            r"must be larger than the dead space"):
        assemble_group(MIXED, cs.Circuit(), cs.Absorber(), cs.Vaporizer(), plan)
