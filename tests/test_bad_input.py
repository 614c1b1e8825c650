"""Bad input gets a clear error naming the field, the value and the allowed range.

The invalid values are generated from each field's declared constraint, so a new field is
covered without anyone having to remember it (the habit of scikit-learn's
test_public_functions.py).
"""

import math
from dataclasses import fields

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.validation import InputError, Interval, OneOf, check_whole_number
from circlesim.domain.physiology import Factors
from circlesim.scenario import ReportSettings, scenario_from_toml

KINDS = {cs.Patient: {}, cs.Circuit: {}, cs.Absorber: {}, cs.Vaporizer: {},
         cs.Step: {"time_min": 0.0}, Factors: {}}


def _declared():
    for kind, required in KINDS.items():
        for f in fields(kind):
            constraint = f.metadata.get("constraint")
            if constraint is None:
                continue
            if isinstance(constraint, Interval):
                for bad in constraint.invalid_examples():
                    yield pytest.param(kind, required, f.name, bad,
                                       id=f"{kind.__name__}.{f.name}={bad:g}")
                yield pytest.param(kind, required, f.name, "ten",
                                   id=f"{kind.__name__}.{f.name}=text")
            elif isinstance(constraint, OneOf):
                yield pytest.param(kind, required, f.name, "nonsense",
                                   id=f"{kind.__name__}.{f.name}=nonsense")


@pytest.mark.parametrize("kind,required,name,bad", list(_declared()))
def test_declared_constraints_reject_bad_values(kind, required, name, bad):
    with pytest.raises(InputError) as info:
        kind(**{**required, name: bad})
    message = str(info.value)
    assert f"{kind.__name__}.{name}" in message
    shown = "nan" if isinstance(bad, float) and math.isnan(bad) else (
        f"{bad:g}" if isinstance(bad, float) else repr(bad))
    assert shown in message
    constraint = next(f for f in fields(kind) if f.name == name).metadata["constraint"]
    assert constraint.describe() in message


@pytest.mark.parametrize("weight,height", [(3.0, 140.0), (200.0, 120.0)])
def test_implausible_body_mass_index(weight, height):
    with pytest.raises(InputError, match=r"body-mass index of .* must be from 8 to 90 kg/m²"):
        cs.Patient(weight_kg=weight, height_cm=height)


def test_unknown_agent():
    with pytest.raises(InputError, match=r"agent must be one of .*got 'ether'"):
        cs.Vaporizer("ether")


def test_dial_above_vaporizer_range():
    plan = cs.Plan([cs.Step(0, o2_l_min=2, dial_percent=9.0)], duration_min=10)
    with pytest.raises(InputError, match=r"dial_percent must be a number from 0 to 8 vol% "
                                         r"\(the sevoflurane vaporizer's range\); got 9"):
        cs.simulate(cs.Patient(), cs.Circuit(), plan)


def test_fresh_gas_below_air_oxygen():
    with pytest.raises(InputError, match=r"fresh gas O2 fraction must be at least that of air "
                                         r"\(21 %\); got 20.0 %"):
        cs.Plan([cs.Step(0, o2_l_min=0.2, n2o_l_min=0.8)], duration_min=10)


@pytest.mark.parametrize("o2", [0.0, 0.05])
def test_total_flow_too_small(o2):
    with pytest.raises(InputError, match=r"total fresh gas flow .* must be a number from 0.1 "
                                         "to 20 L/min"):
        cs.Plan([cs.Step(0, o2_l_min=o2)], duration_min=10)


def test_steps_out_of_time_order():
    with pytest.raises(InputError, match=r"Plan.steps\[2\].time_min must be later than the "
                                         r"previous step \(10 min\); got 5"):
        cs.Plan([cs.Step(0, o2_l_min=1), cs.Step(10), cs.Step(5)], duration_min=30)


def test_step_past_the_end():
    with pytest.raises(InputError, match=r"before the end of the plan \(30 min\); got 30"):
        cs.Plan([cs.Step(0, o2_l_min=1), cs.Step(30)], duration_min=30)


def test_first_step_not_at_zero():
    with pytest.raises(InputError, match=r"steps\[0\].time_min must be 0"):
        cs.Plan([cs.Step(5, o2_l_min=1)], duration_min=30)


def test_tidal_volume_not_above_dead_space():
    plan = cs.Plan([cs.Step(0, o2_l_min=2, tidal_volume_ml=100.0)], duration_min=10)
    with pytest.raises(InputError, match=r"tidal_volume_ml must be larger than the dead space "
                                         r"\(154 mL\); got 100"):
        cs.simulate(cs.Patient(), cs.Circuit(), plan)


def test_bad_simulation_options():
    plan = cs.Plan([cs.Step(0, o2_l_min=2)], duration_min=10)
    with pytest.raises(InputError, match=r"simulate\.output_interval_min"):
        cs.simulate(cs.Patient(), cs.Circuit(), plan, output_interval_min=0.0)
    with pytest.raises(InputError, match="method must be 'dopri5' or one of"):
        cs.simulate(cs.Patient(), cs.Circuit(), plan, method="euler")
    with pytest.raises(InputError, match="patient must be a Patient"):
        cs.simulate({"weight_kg": 70}, cs.Circuit(), plan)


def test_report_settings_range():
    with pytest.raises(InputError,
                       match=r"report\.fio2_threshold must be a number from 0\.21 to 1"):
        ReportSettings(fio2_threshold=0.1)


GOOD = """
[patient]
weight_kg = 70
[plan]
duration_min = 30
[[plan.steps]]
time_min = 0
o2_l_min = 2
"""


@pytest.mark.parametrize("text,expected", [
    ("[plan\nduration_min = 3", "is not valid TOML"),
    ("[patient]\nweight_kg = 70\n", "the [plan] section is missing"),
    (GOOD.replace("weight_kg", "wieght_kg"), "unknown setting 'wieght_kg'"),
    (GOOD + "[extras]\nx = 1\n", "unknown section or key 'extras'"),
    (GOOD.replace("o2_l_min = 2", "o2_l_min = -1"), "Step.o2_l_min must be a number from 0 to "
                                                     "15 L/min; got -1"),
    (GOOD.replace("time_min = 0\n", ""), "plan.steps[0].time_min is missing"),
    (GOOD.replace("weight_kg = 70", "weight_kg = 'heavy'"), "Patient.weight_kg must be"),
    (GOOD.replace("[[plan.steps]]\ntime_min = 0\no2_l_min = 2\n", ""),
     "plan.steps must be a list of at least one step"),
])
def test_malformed_or_incomplete_toml(text, expected):
    with pytest.raises(InputError) as info:
        scenario_from_toml(text, "case.toml")
    assert expected in str(info.value)
    assert "case.toml" in str(info.value)


def test_good_toml_round_trips(tmp_path):
    scenario = scenario_from_toml(GOOD)
    path = cs.scenario.save_scenario(scenario, tmp_path / "x.toml")
    again = cs.load_scenario(path)
    assert again.plan == scenario.plan
    assert again.patient == scenario.patient
    with pytest.raises(FileExistsError):
        cs.scenario.save_scenario(scenario, path)


@pytest.mark.parametrize("value", [3, 3.0, np.int64(3), np.float64(3.0)])
def test_whole_numbers_pass_as_int(value):
    checked = check_whole_number("chunks", value, Interval(1, 64))
    assert checked == 3 and type(checked) is int


@pytest.mark.parametrize("value, shown", [(2.5, "2.5"), (True, "True"), ("3", "'3'"),
                                          (math.nan, "nan"), (0, "0"), (65, "65")])
def test_whole_number_check_names_field_value_and_range(value, shown):
    with pytest.raises(InputError, match=rf"^chunks must be a whole number from 1 to 64; "
                                         rf"got {shown}\.$"):
        check_whole_number("chunks", value, Interval(1, 64))
    with pytest.raises(InputError, match=r"a whole number of at least 1;"):
        check_whole_number("patients", -1, Interval(1, math.inf))
