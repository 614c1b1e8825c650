"""Outcome measures of a plan: exact series, bookkeeping against ideal-gas arithmetic, the
canister-life extrapolation against a longer run, emissions and cost, and bad input."""

import math

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.units import GAS_CONSTANT, kelvin
from circlesim.domain.costs import Prices, cost_of
from circlesim.outcomes.canister import extrapolate_canister_life
from circlesim.outcomes.emissions import (
    check_horizon,
    co2_equivalent_kg,
    gwp,
    open_circuit_agent_grams,
)
from circlesim.outcomes.mac import age_adjusted_mac, mac_hours, total_mac
from circlesim.outcomes.summary import (
    minutes_below,
    minutes_within,
    overshoot_percent,
    settling_time,
    summarise,
    time_to_reach,
)
from circlesim.properties import NITROUS_OXIDE


# ---- series measures on series with known answers ------------------------------------------
def test_minutes_within_a_ramp():
    # y = t on 0..100: time with 40 <= y < 60 is exactly 20 min.
    t = np.linspace(0.0, 100.0, 1001)
    assert minutes_within(t, t, 40.0, 60.0) == pytest.approx(20.0, abs=0.02)
    assert minutes_below(t, t, 40.0) == pytest.approx(40.0, abs=0.02)


def test_settling_time_and_overshoot_of_a_damped_step():
    # y = 1 - exp(-t) cos(t): first reaches 1 at t = π/2, peaks at t = 3π/4 with
    # 1 + exp(-3π/4)/√2 (overshoot 6.70 %), and stays within ±10 % after the first crossing
    # of 0.9 (the peak is below 1.1).
    t = np.linspace(0.0, 20.0, 200001)
    y = 1.0 - np.exp(-t) * np.cos(t)
    assert time_to_reach(t, y, 1.0) == pytest.approx(math.pi / 2, abs=1e-4)
    expected = 100.0 * math.exp(-3 * math.pi / 4) / math.sqrt(2.0)
    assert overshoot_percent(t, y, 1.0) == pytest.approx(expected, abs=1e-4)
    first_090 = time_to_reach(t, y, 0.9)
    assert settling_time(t, y, 0.9, 1.1) == pytest.approx(first_090, abs=1e-4)
    assert overshoot_percent(t, 0.5 * y, 1.0) is None  # never reaches the target
    assert settling_time(t, 0.5 * y, 0.9, 1.1) is None


def test_mac_hours_of_a_constant_and_a_ramp():
    t = np.linspace(0.0, 120.0, 121)
    assert mac_hours(t, np.full_like(t, 1.2)) == pytest.approx(2.4, rel=1e-12)
    assert mac_hours(t, t / 120.0) == pytest.approx(1.0, rel=1e-12)  # area of a triangle


def test_total_mac_adds_fractions():
    assert total_mac(0.9, 1.8, 52.0, 104.0) == pytest.approx(1.0, rel=1e-12)


# ---- bookkeeping against ideal-gas arithmetic ------------------------------------------------
def test_n2o_used_and_liquid_agent_match_ideal_gas_arithmetic(adult):
    """2 L/min N2O for 30 min is 60 L at the flowmeters; its mass is P V M / (R T) (ideal gas,
    20 °C, 101.325 kPa). Liquid agent mL × density = its grams."""
    circuit = cs.Circuit(gas_temperature_c=20.0)
    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, n2o_l_min=2.0, dial_percent=1.0)],
                   duration_min=30.0)
    result = cs.simulate(adult, circuit, plan, vaporizer=cs.Vaporizer("isoflurane"))
    s = summarise(result, gwp_horizon=100)
    assert s.n2o_used_l == pytest.approx(60.0, rel=1e-9)
    grams = 101.325 * 60.0 * NITROUS_OXIDE.molar_mass_g_mol / (GAS_CONSTANT * kelvin(20.0))
    assert s.n2o_used_g == pytest.approx(grams, rel=1e-9)
    assert s.n2o_co2e_kg == pytest.approx(grams * 273.0 / 1000.0, rel=1e-9)  # IPCC AR6 273
    assert s.agent_delivered_ml * s.liquid_density_g_ml == pytest.approx(s.agent_delivered_g,
                                                                         rel=1e-9)
    assert "20 °C" in s.liquid_density_source or "25 °C" in s.liquid_density_source
    # total MAC-hours exceed the agent's alone once N2O is breathed
    assert s.total_mac_hours > s.mac_hours > 0.0


def test_brain_partial_pressure_is_fraction_times_dry_pressure(adult):
    plan = cs.Plan([cs.Step(0, o2_l_min=3.0, dial_percent=3.0)], duration_min=20.0)
    result = cs.simulate(adult, cs.Circuit(), plan)
    s = summarise(result, report_times_min=(10.0, 20.0))
    brain = result.tissue[:, result.tissue_index("brain"), result.soluble_index("agent")]
    for t in (10.0, 20.0):
        fraction = result.at(t, brain)
        assert s.brain_kpa_at[t] == pytest.approx(fraction * (101.325 - 6.2795), rel=1e-9)
        assert s.brain_mac_at[t] == pytest.approx(100.0 * fraction / s.mac_percent, rel=1e-9)


def test_agent_leaving_the_circuit_adds_up(adult):
    circuit = cs.Circuit(leak_ml_min=100.0, sample_returned=False)
    plan = cs.Plan([cs.Step(0, o2_l_min=1.0, dial_percent=3.0)], duration_min=30.0)
    s = summarise(cs.simulate(adult, circuit, plan))
    assert s.agent_leaked_ml > 0.0
    assert s.agent_scavenged_ml + s.agent_leaked_ml == pytest.approx(s.agent_vented_ml,
                                                                     rel=1e-9)


def test_canister_life_extrapolation_matches_a_longer_run(adult):
    """The life left at the end-of-plan rate must match the time a longer run at the same
    settings takes to reach the breakthrough point (CO2 output is steady by then); 1 %."""
    absorber = cs.Absorber(granule_mass_g=200.0)
    step = cs.Step(0, o2_l_min=0.3, air_l_min=0.2, dial_percent=3.0)
    short = cs.simulate(adult, cs.Circuit(), cs.Plan([step], duration_min=40.0),
                        absorber=absorber)
    life = summarise(short).canister
    assert life.remaining_min is not None and life.remaining_min > 0.0
    long = cs.simulate(adult, cs.Circuit(), cs.Plan([step], duration_min=40.0 + 2 *
                                                    life.remaining_min), absorber=absorber)
    reached = time_to_reach(long.time_min, long.absorbent_used_fraction,
                            absorber.breakthrough_start)
    assert reached == pytest.approx(40.0 + life.remaining_min, rel=0.01)
    assert life.fresh_canister_min > life.remaining_min


def test_no_co2_reaching_the_absorbent_gives_no_canister_life(adult):
    # At 10 L/min the pressure-limiting valve vents exhaled gas before it reaches the absorbent
    # (vent_exhaled_share 1): nothing is used up, so no life can be extrapolated.
    plan = cs.Plan([cs.Step(0, o2_l_min=5.0, air_l_min=5.0)], duration_min=20.0)
    s = summarise(cs.simulate(adult, cs.Circuit(), plan))
    assert s.canister.co2_to_absorbent_l_min == pytest.approx(0.0, abs=1e-9)
    assert s.canister.remaining_min is None and s.canister.fresh_canister_min is None
    assert s.absorbent_used_g == pytest.approx(0.0, abs=1e-6)


# ---- emissions and cost -------------------------------------------------------------------------
def test_gwp_horizons_and_missing_values():
    # Sources as in circlesim.properties: GWP20 Ryan & Nielsen 2010; GWP100 Sulbaek Andersen
    # 2012 (from memory: sevoflurane 130, isoflurane 510, desflurane 2540); N2O IPCC AR6 273.
    assert gwp("sevoflurane", 20).value == 349.0
    assert gwp("desflurane", 100).value == 2540.0
    assert gwp("nitrous_oxide", 100).value == 273.0
    assert "Ryan" in gwp("isoflurane", 20).source
    for name in ("halothane", "enflurane"):
        missing = gwp(name, 100)
        assert not missing.available and "not available" in str(missing)
        assert co2_equivalent_kg(10.0, missing) is None


def test_halothane_summary_reports_no_co2_equivalent(adult):
    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, dial_percent=1.0)], duration_min=10.0)
    s = summarise(cs.simulate(adult, cs.Circuit(), plan, vaporizer=cs.Vaporizer("halothane")))
    assert s.agent_co2e_kg is None and s.total_co2e_kg is None
    assert s.row()["CO2-eq agent (GWP20), kg"] is None


def test_cost_arithmetic():
    prices = Prices(agent_price_per_bottle=100.0, bottle_ml=250.0, n2o_price_per_1000_l=20.0,
                    absorbent_price_per_kg=5.0, currency="units")
    cost = cost_of(prices, agent_ml=25.0, n2o_l=500.0, absorbent_g=200.0)
    assert (cost.agent, cost.nitrous_oxide, cost.absorbent) == pytest.approx((10.0, 10.0, 1.0))
    assert cost.total == pytest.approx(21.0)
    assert cost_of(None, agent_ml=25.0).total is None
    assert cost_of(Prices(n2o_price_per_1000_l=1.0), agent_ml=25.0).agent is None


def test_summary_cost_uses_the_liquid_delivered(adult):
    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, dial_percent=2.0)], duration_min=30.0)
    result = cs.simulate(adult, cs.Circuit(), plan)
    s = summarise(result, prices=Prices(agent_price_per_bottle=100.0, bottle_ml=250.0))
    assert s.cost.agent == pytest.approx(100.0 * s.agent_delivered_ml / 250.0, rel=1e-12)
    assert summarise(result).cost is None


# ---- bad input ------------------------------------------------------------------------
@pytest.mark.parametrize("horizon", [50, 0, "ten", None, 20.5])
def test_unknown_gwp_horizon_is_refused(horizon):
    with pytest.raises(cs.InputError, match="gwp_horizon must be one of 20, 100"):
        check_horizon(horizon)


def test_unknown_gwp_horizon_in_summarise(adult):
    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, dial_percent=2.0)], duration_min=5.0)
    with pytest.raises(cs.InputError, match="gwp_horizon"):
        summarise(cs.simulate(adult, cs.Circuit(), plan), gwp_horizon=50)


@pytest.mark.parametrize(("kwargs", "field"), [
    ({"agent_price_per_bottle": -1.0, "bottle_ml": 250.0}, "agent_price_per_bottle"),
    ({"agent_price_per_bottle": 10.0, "bottle_ml": 0.0}, "bottle_ml"),
    ({"agent_price_per_bottle": 10.0}, "bottle_ml"),
    ({"bottle_ml": 250.0}, "agent_price_per_bottle"),
    ({"n2o_price_per_1000_l": -5.0}, "n2o_price_per_1000_l"),
    ({"absorbent_price_per_kg": float("nan")}, "absorbent_price_per_kg"),
    ({"currency": 5}, "currency"),
])
def test_bad_prices_are_refused(kwargs, field):
    with pytest.raises(cs.InputError, match=f"Prices.{field}"):
        Prices(**kwargs)


@pytest.mark.parametrize(("call", "field"), [
    (lambda: age_adjusted_mac("sevoflurane", 0.5), "age_years"),
    (lambda: age_adjusted_mac("xenon", 40), "agent"),
    (lambda: gwp("argon", 20), "gas"),
    (lambda: total_mac(1.0, 0.0), "agent_mac_percent"),
    (lambda: total_mac(1.0, 1.8, 50.0), "n2o_mac_percent"),
    (lambda: open_circuit_agent_grams(-1.0, 2.0, 60.0, 200.0), "concentration_percent"),
    (lambda: open_circuit_agent_grams(2.0, 2.0, 60.0, 200.0, 5.0), "molar_volume_l_mol"),
    (lambda: co2_equivalent_kg(-1.0, gwp("sevoflurane")), "grams"),
])
def test_bad_outcome_inputs_name_the_field(call, field):
    with pytest.raises(cs.InputError, match=field):
        call()


def test_bad_summarise_settings(adult):
    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, dial_percent=2.0)], duration_min=5.0)
    result = cs.simulate(adult, cs.Circuit(), plan)
    with pytest.raises(cs.InputError, match="target_basis"):
        summarise(result, target_basis="brain")
    with pytest.raises(cs.InputError, match="target_end_tidal_mac"):
        summarise(result, target_end_tidal_mac=0.0)
    with pytest.raises(cs.InputError, match="fio2_threshold"):
        summarise(result, fio2_threshold=0.1)


@pytest.mark.parametrize(("kwargs", "field"), [
    ({"co2_to_absorbent_l_min": -0.1}, "co2_to_absorbent_l_min"),
    ({"capacity_l": 0.0}, "capacity_l"),
    ({"breakthrough_start": 1.5}, "breakthrough_start"),
    ({"used_fraction": float("nan")}, "used_fraction"),
])
def test_bad_canister_inputs_name_the_field(kwargs, field):
    args = {"co2_to_absorbent_l_min": 0.15, "capacity_l": 121.0, "breakthrough_start": 0.8,
            "used_fraction": 0.2, **kwargs}
    with pytest.raises(cs.InputError, match=field):
        extrapolate_canister_life(**args)
