"""Bad input to the oxygen analyses, the alert rules they add, and unsafe plans shown with
their warnings.

Expected messages name the field, the value and the allowed range (house rule). Sources for
the alert thresholds: see circlesim.engine.alerts.default_rules (FIO2 0.30 common practice;
fresh-gas
O2 minimum defaulting to the FIO2 threshold by the mass balance; FGF below uptake by the mass
balance).
"""

import math

import pytest

import circlesim as cs
from circlesim.engine.alerts import default_rules
from circlesim.oxygen.course import oxygen_course
from circlesim.oxygen.flow_map import oxygen_map
from circlesim.oxygen.losses import loss_effects
from circlesim.oxygen.minimum import lowest_safe_o2_fraction, safe_fraction_table
from circlesim.oxygen.setup import FreshGas, Setup, minimal_flow_plan, steady_state

ORIGINAL_RULES = ("fio2_low", "inspired_co2", "bag_empty", "bag_overfilled",
                  "sevoflurane_low_flow", "sevoflurane_mac_hours")


@pytest.mark.parametrize("threshold", [0.2, 1.01, math.nan, "0.3", -1.0])
def test_threshold_outside_range(adult, threshold):
    setup = Setup(adult)
    for call in (lambda: lowest_safe_o2_fraction(setup, [1.0], fio2_threshold=threshold),
                 lambda: oxygen_map(setup, [1.0], [0.5], fio2_threshold=threshold),
                 lambda: safe_fraction_table(setup, [1.0], fio2_threshold=threshold),
                 lambda: oxygen_course(setup, FreshGas(1.0, 0.5), fio2_threshold=threshold),
                 lambda: loss_effects(setup, FreshGas(1.0, 0.5), fio2_threshold=threshold)):
        with pytest.raises(cs.InputError, match=r"fio2_threshold must be a number from 0\.21 "
                                                r"to 1"):
            call()


@pytest.mark.parametrize("grid, field", [([], "fgf_l_min must hold at least one"),
                                         ([0.5, -0.5], r"fgf_l_min\[1\] must be a number from "
                                                       r"0\.1 to 20 L/min; got -0\.5"),
                                         ([0.0], r"fgf_l_min\[0\]"),
                                         ([math.inf], r"fgf_l_min\[0\]"),
                                         (["fast"], r"fgf_l_min\[0\]")])
def test_empty_or_negative_flow_grid(adult, grid, field):
    setup = Setup(adult)
    with pytest.raises(cs.InputError, match=field):
        lowest_safe_o2_fraction(setup, grid)
    with pytest.raises(cs.InputError, match=field):
        oxygen_map(setup, grid, [0.5], with_plan=False)
    with pytest.raises(cs.InputError, match=field):
        safe_fraction_table(setup, grid, duration_min=None)


def test_empty_o2_grid(adult):
    with pytest.raises(cs.InputError, match="o2_fraction must hold at least one"):
        oxygen_map(Setup(adult), [1.0], [], with_plan=False)
    with pytest.raises(cs.InputError, match=r"o2_fraction\[0\] must be a number from 0\.20946"):
        oxygen_map(Setup(adult), [1.0], [0.1], with_plan=False)


def test_leak_larger_than_fresh_gas_flow(adult):
    leaky = Setup(adult, cs.Circuit(leak_ml_min=600.0))
    message = (r"leak_ml_min must be smaller than the fresh gas flow \(500 mL/min\); got 600 "
               "mL/min")
    with pytest.raises(cs.InputError, match=message):
        lowest_safe_o2_fraction(leaky, [0.5, 1.0])
    with pytest.raises(cs.InputError, match=message):
        oxygen_map(leaky, [0.5, 1.0], [0.5], with_plan=False)
    with pytest.raises(cs.InputError, match=message):
        oxygen_course(leaky, FreshGas(0.5, 0.5))
    with pytest.raises(cs.InputError, match="leak_ml_min"):
        loss_effects(Setup(adult), FreshGas(0.5, 0.5), leaks_ml_min=(700.0,))
    lost = Setup(adult, cs.Circuit(leak_ml_min=400.0, sample_ml_min=200.0,
                                   sample_returned=False))
    with pytest.raises(cs.InputError, match=r"leak_ml_min \+ sample_ml_min"):
        lowest_safe_o2_fraction(lost, [0.5])


def test_other_bad_input(adult):
    with pytest.raises(cs.InputError, match=r"o2_fraction must be a number from 0\.20946 to 1"):
        FreshGas(1.0, 0.15)
    with pytest.raises(cs.InputError, match="carrier must be one of"):
        FreshGas(1.0, 0.5, "helium")
    with pytest.raises(cs.InputError, match=r"fgf_l_min must be a number from 0\.1 to 20"):
        FreshGas(-1.0, 0.5)
    with pytest.raises(cs.InputError, match="method must be one of"):
        lowest_safe_o2_fraction(Setup(adult), [1.0], method="guess")
    with pytest.raises(cs.InputError, match="duration_min must be longer"):
        minimal_flow_plan(FreshGas(1.0, 0.5), duration_min=5.0, initial_min=10.0)
    with pytest.raises(cs.InputError, match=r"Setup\.patient must be a Patient"):
        Setup(patient="adult")
    with pytest.raises(cs.InputError, match="draw-over"):
        steady_state(Setup(adult, vaporizer=cs.Vaporizer(placement="inside")), 1.0, 0.5,
                     dial_percent=1.0)
    with pytest.raises(cs.InputError, match="fresh_o2_minimum"):
        default_rules(fresh_o2_minimum=0.1)
    with pytest.raises(cs.InputError, match="fresh_gas_margin_l_min"):
        default_rules(fresh_gas_margin_l_min=10.0)


def test_existing_rules_are_kept_and_new_ones_added():
    keys = tuple(r.key for r in default_rules())
    assert keys[:len(ORIGINAL_RULES)] == ORIGINAL_RULES
    assert {"fresh_o2_low", "fgf_below_uptake"} <= set(keys)
    rules = {r.key: r for r in default_rules(0.35)}
    assert rules["fresh_o2_low"].threshold == 0.35  # defaults to the FIO2 threshold
    assert {r.key: r for r in default_rules(0.35, fresh_o2_minimum=0.5)}[
        "fresh_o2_low"].threshold == 0.5


def test_unsafe_plan_is_computed_and_shown_with_its_warnings(adult):
    """0.2 L/min of 30 % O2 in air with a 0.35 threshold: the oxygen rules fire, and the
    prediction is still there to look at."""
    course = oxygen_course(Setup(adult), FreshGas(0.2, 0.3, "air"), fio2_threshold=0.35,
                           duration_min=60.0)
    keys = {a.key for a in course.result.alerts}
    assert {"fio2_low", "fresh_o2_low", "fgf_below_uptake"} <= keys
    assert course.result.time_min[-1] == 60.0
    assert course.lowest_fio2 < 0.2
    frame = course.frame()
    assert len(frame) == len(course.result.time_min)
    message = next(str(a) for a in course.result.alerts if a.key == "fresh_o2_low")
    assert "0.30 is below the local minimum 0.35" in message


def test_safe_plan_raises_no_oxygen_rule(adult):
    course = oxygen_course(Setup(adult), FreshGas(1.0, 0.6, "air"), duration_min=60.0)
    keys = {a.key for a in course.result.alerts}
    assert not keys & {"fio2_low", "fresh_o2_low", "fgf_below_uptake", "bag_empty"}


def test_closed_circuit_supply_does_not_trip_the_uptake_rule_on_round_off(adult):
    """Supplying exactly the uptake (a closed circuit after denitrogenation) must not fire
    'fgf_below_uptake' from round-off."""
    setup = Setup(adult)
    flush = setup.simulate(cs.Plan([cs.Step(0, o2_l_min=10.0)], duration_min=600),
                           output_interval_min=10.0).final_state
    supply = adult.vo2 / 1000.0 / setup.k_circuit
    r = setup.simulate(cs.Plan([cs.Step(0, o2_l_min=supply)], duration_min=60),
                       initial_state=flush)
    assert "fgf_below_uptake" not in {a.key for a in r.alerts}
