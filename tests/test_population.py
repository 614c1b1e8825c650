"""Virtual-patient populations: sampling, reproducibility, bands, probabilities, bad input."""

import math

import numpy as np
import pytest

import circlesim as cs
from circlesim.engine.simulate import output_times
from circlesim.outcomes.emissions import gwp
from circlesim.outcomes.summary import summarise
from circlesim.population.distributions import (
    Fixed,
    LogNormal,
    Normal,
    Uniform,
    distribution_from_dict,
)
from circlesim.population.result import (
    PopulationResult,
    outcomes_frame,
    probability_table,
    save_outcomes,
)
from circlesim.population.run import compare_populations, run_population
from circlesim.population.virtual_patients import (
    PopulationSpec,
    VirtualPatients,
    load_population_spec,
    sample_patients,
)

#: An invented wash-in strategy: 8 min at 6 L/min, then 0.5 L/min.
FLOW_REDUCTION = cs.Scenario(
    plan=cs.Plan([cs.Step(0, o2_l_min=2.0, air_l_min=4.0, dial_percent=5.0),
                  cs.Step(8, o2_l_min=0.35, air_l_min=0.15, dial_percent=3.5)],
                 duration_min=60.0, name="high flow, then 0.5 L/min"),
    vaporizer=cs.Vaporizer("sevoflurane"))
#: An invented alternative: a fixed 1 L/min with overpressure.
FIXED_FLOW = cs.Scenario(
    plan=cs.Plan([cs.Step(0, o2_l_min=0.5, air_l_min=0.5, dial_percent=8.0),
                  cs.Step(15, dial_percent=3.0)], duration_min=60.0, name="1 L/min"),
    vaporizer=cs.Vaporizer("sevoflurane"))


@pytest.fixture(scope="module")
def population() -> VirtualPatients:
    return sample_patients(150, seed=20240607)


@pytest.fixture(scope="module")
def runs(population) -> list[PopulationResult]:
    return compare_populations([FLOW_REDUCTION, FIXED_FLOW], population, workers=1,
                               chunk_size=60)


def test_same_seed_same_patients_other_seed_other_patients():
    a = sample_patients(50, seed=7)
    b = sample_patients(50, seed=7)
    c = sample_patients(50, seed=8)
    assert a.table().equals(b.table())
    assert not a.table().equals(c.table())
    assert a.seed == 7


def test_no_seed_records_a_seed_that_repeats_the_draw():
    a = sample_patients(20)
    assert isinstance(a.seed, int)
    assert a.table().equals(sample_patients(20, seed=a.seed).table())


def test_same_seed_gives_the_same_population_run(population, runs):
    again = run_population(FLOW_REDUCTION, sample_patients(150, seed=20240607), workers=1,
                           chunk_size=150)  # other chunking too
    assert again.outcomes.equals(runs[0].outcomes)
    for key, values in runs[0].curves.items():
        np.testing.assert_array_equal(again.curves[key], values)


def test_sample_follows_the_stated_distributions():
    # Moments of a large draw against the distributions' own parameters: tolerance 3 standard
    # errors (mean) and 10 % (SD); the female share within 3 binomial standard errors.
    spec = PopulationSpec(weight_kg=Normal(80.0, 12.0, 40.0, 140.0, "test"),
                          female_fraction=Fixed(0.3, "test"))
    people = sample_patients(4000, spec, seed=1).table()
    n = len(people)
    share = float(np.mean(people["sex"] == "female"))
    assert abs(share - 0.3) < 3 * math.sqrt(0.3 * 0.7 / n)
    assert abs(people["weight_kg"].mean() - 80.0) < 3 * 12.0 / math.sqrt(n)
    assert people["weight_kg"].std() == pytest.approx(12.0, rel=0.10)
    assert people["age_years"].between(18.0, 80.0).all()
    # log-normal factor: median of the solubility scale near 1 (3 standard errors of a
    # median, 1.25 sigma / sqrt(n))
    sigma = LogNormal(1.0, 0.08).sigma
    assert abs(np.log(people["solubility_scale"].median())) < 3 * 1.25 * sigma / math.sqrt(n)


def test_factors_change_the_physiology_the_model_uses():
    spec = PopulationSpec(cardiac_output_factor=Fixed(1.5, "test"), vo2_factor=Fixed(0.5, "test"),
                          frc_factor=Fixed(2.0, "test"))
    person = sample_patients(1, spec, seed=3)[0]
    base = cs.Patient(weight_kg=person.weight_kg, height_cm=person.height_cm,
                      age_years=person.age_years, sex=person.sex)
    assert person.cardiac_output == pytest.approx(1.5 * base.cardiac_output)
    assert person.vo2 == pytest.approx(0.5 * base.vo2)
    assert person.frc == pytest.approx(2.0 * base.frc)


def test_bands_contain_the_deterministic_typical_patient(population, runs):
    # The typical patient (median of every distribution) run alone with the engine lies inside
    # the population's 5-95 % band at every time. Tolerance 1e-6 relative, for times at which
    # the band collapses (inspired N2 at high flow is the same in every patient to 1e-8).
    typical = cs.simulate(PopulationSpec().typical_patient(), FLOW_REDUCTION.circuit,
                          FLOW_REDUCTION.plan, vaporizer=FLOW_REDUCTION.vaporizer,
                          output_interval_min=0.5)
    result = runs[0]
    np.testing.assert_array_equal(result.time_min, typical.time_min)
    mac = typical.mac_percent
    expected = {
        "end_tidal_agent_mac": typical.end_tidal_percent("agent") / mac,
        "brain_agent_mac": typical.brain_percent("agent") / mac,
        "fio2": typical.inspired[:, 0],
        "inspired_n2_percent": typical.inspired_percent("nitrogen"),
        "agent_delivered_ml": typical.agent_delivered_ml,
    }
    for key, values in expected.items():
        band = result.band(key)
        slack = 1e-6 * np.abs(values) + 1e-12
        assert np.all(values >= band["low"] - slack), key
        assert np.all(values <= band["high"] + slack), key
    # ... and the band is a real spread, not a single curve
    assert (result.band("end_tidal_agent_mac")["high"] - result.band("end_tidal_agent_mac")[
        "low"]).max() > 0.1


def test_probabilities_agree_with_the_curves(runs):
    r = runs[0]
    et_mac = r.curves[r.depth_key]
    for t in (1.0, 2.0, 5.0):
        # reached by t: some output time at or before t has end-tidal at or above target
        # (equality up to the linear interpolation between output times)
        upto = r.time_min <= t
        direct = np.mean(np.any(et_mac[:, upto] >= r.target_end_tidal_mac, axis=1))
        assert r.probability_target_by(t) == pytest.approx(direct, abs=2 / len(r))
    for threshold in (0.3, 0.45, 0.6):
        direct = np.mean(r.curves["fio2"].min(axis=1) < threshold)
        assert r.probability_fio2_below(threshold) == direct
    fraction = r.target_reached_fraction()
    assert fraction[0] == 0.0 and np.all(np.diff(fraction) >= 0.0)


def test_outcomes_use_published_gwp_and_the_delivered_agent(runs):
    r = runs[0]
    # Source: Ryan & Nielsen, Anesth Analg 2010;111:92-8: sevoflurane GWP20 = 349.
    assert gwp("sevoflurane", 20).value == 349.0
    expected = r.outcomes["agent_delivered_g"] * 349.0 / 1000.0
    np.testing.assert_allclose(r.outcomes["co2e_agent_kg"], expected, rtol=1e-12)
    # every patient's delivered agent equals the engine's for that patient
    one = cs.simulate(r.patients[5], FLOW_REDUCTION.circuit, FLOW_REDUCTION.plan,
                      vaporizer=FLOW_REDUCTION.vaporizer, output_interval_min=0.5)
    assert r.outcomes["agent_delivered_ml"][5] == pytest.approx(one.agent_delivered_ml[-1],
                                                                rel=1e-9)


def test_strategies_share_patients_and_tables(runs):
    assert runs[0].patients is runs[1].patients
    table = probability_table(runs, by_min=(2.0, 10.0, 90.0))
    assert list(table["plan"]) == ["high flow, then 0.5 L/min", "1 L/min"]
    assert table["P(target by 90 min)"].isna().all()  # past the 60-min plans
    assert table["P(target by 10 min)"].between(0.0, 1.0).all()
    summary = runs[0].outcome_summary()
    assert (summary["5 %"] <= summary["median"]).all()
    frame = outcomes_frame(runs)
    assert len(frame) == 2 * len(runs[0])


def test_save_outcomes_never_overwrites(tmp_path, runs):
    path = save_outcomes(runs, tmp_path / "outcomes.csv")
    assert path.read_text().startswith("plan,patient")
    with pytest.raises(FileExistsError):
        save_outcomes(runs, path)
    save_outcomes(runs, path, overwrite=True)


@pytest.mark.parametrize("count", [0, -5, 2.5, True, "ten", 1_000_001])
def test_bad_patient_count_is_refused(count):
    with pytest.raises(cs.InputError, match=r"patients must be a whole number from 1 to 1000000"):
        sample_patients(count)


def test_distribution_giving_negative_weight_is_refused():
    with pytest.raises(cs.InputError,
                       match=r"weight_kg .*Patient\.weight_kg must be a number from 2 to 250 kg"):
        PopulationSpec(weight_kg=Normal(70.0, 30.0, source="test"))


def test_distribution_giving_zero_bmi_or_factor_is_refused():
    with pytest.raises(cs.InputError, match=r"bmi_male .*zero or below"):
        PopulationSpec(bmi_male=Normal(25.0, 4.0, source="test"))
    with pytest.raises(cs.InputError, match=r"vo2_factor .*zero or below"):
        PopulationSpec(vo2_factor=Uniform(-0.5, 1.5, "test"))


def test_drawn_patient_outside_the_model_is_named():
    # cardiac output 5-6 times the allometric rule exceeds the 20 L/min a Patient allows
    spec = PopulationSpec(cardiac_output_factor=Uniform(5.0, 6.0, "test"))
    with pytest.raises(cs.InputError, match=r"virtual patient 0, .*cardiac_output_l_min must be "
                                            r"a number from 0.2 to 20 L/min"):
        sample_patients(3, spec, seed=1)


@pytest.mark.parametrize("data, words", [
    ({"kind": "gamma"}, "kind must be one of"),
    ({"kind": "normal", "mean": 1.0}, "needs mean, sd"),
    ({"kind": "normal", "mean": 1.0, "sd": -1.0}, "sd must be a number above 0"),
    ({"kind": "uniform", "low": 3.0, "high": 1.0}, "high must be larger than low"),
    ({"kind": "lognormal", "median_value": 1.0, "cv": 0.1, "spread": 2}, "unknown setting"),
    ({"kind": "fixed", "value": 1.0, "source": ""}, "source must name"),
])
def test_bad_distribution_data_is_named(data, words):
    with pytest.raises(cs.InputError, match=words):
        distribution_from_dict(data)


def test_population_file_round_trip_and_errors(tmp_path):
    path = tmp_path / "elderly.toml"
    path.write_text('female_fraction = 0.6\n[age_years]\nkind = "uniform"\nlow = 65\n'
                    'high = 95\nsource = "an elderly list (assumption)"\n')
    spec = load_population_spec(path)
    assert spec.age_years == Uniform(65.0, 95.0, "an elderly list (assumption)")
    assert spec.female_fraction.value == 0.6
    assert PopulationSpec.from_dict(spec.to_dict()) == spec
    path.write_text('[age]\nkind = "uniform"\nlow = 1\nhigh = 2\n')
    with pytest.raises(cs.InputError, match="unknown setting 'age'"):
        load_population_spec(path)
    with pytest.raises(cs.InputError, match="does not exist"):
        load_population_spec(tmp_path / "missing.toml")


def test_bad_run_settings_are_named(population):
    with pytest.raises(cs.InputError, match="unknown curve 'heart_rate'"):
        run_population(FLOW_REDUCTION, population, series=("heart_rate",))
    with pytest.raises(cs.InputError, match="chunk_size must be a whole number"):
        run_population(FLOW_REDUCTION, population, chunk_size=0)
    with pytest.raises(cs.InputError, match="gwp_horizon must be one of 20, 100"):
        run_population(FLOW_REDUCTION, population, gwp_horizon=50)
    with pytest.raises(cs.InputError, match="scenarios must hold at least one"):
        compare_populations([], population)
    with pytest.raises(cs.InputError, match="patients must be a VirtualPatients"):
        run_population(FLOW_REDUCTION, [])


def test_output_grid_is_the_engine_grid(runs):
    np.testing.assert_array_equal(runs[0].time_min,
                                  output_times(60.0, 0.5, FLOW_REDUCTION.plan.step_times))


def test_target_mode_plans_run_patient_by_patient():
    # A plan with an end-tidal target: the controller chooses each patient's dial, so each
    # patient is run through the engine (circlesim.engine.simulate) and put on the common grid.
    plan = cs.Plan([cs.Step(0, o2_l_min=1.0, air_l_min=1.0, target_mac=1.0)],
                   duration_min=10.0, name="target 1 MAC")
    scenario = cs.Scenario(plan=plan)
    people = sample_patients(2, seed=5)
    result = run_population(scenario, people, workers=1)
    for b, patient in enumerate(people):
        one = cs.simulate(patient, scenario.circuit, plan, vaporizer=scenario.vaporizer,
                          output_interval_min=0.5)
        expected = np.interp(result.time_min, one.time_min, one.end_tidal_percent("agent"))
        np.testing.assert_allclose(result.curves["end_tidal_agent_percent"][b], expected,
                                   rtol=1e-12)
        assert result.outcomes["agent_delivered_ml"][b] == pytest.approx(
            one.agent_delivered_ml[-1], rel=1e-12)


@pytest.mark.parametrize("basis", ["total", "agent"])
def test_time_to_target_matches_the_single_patient_summary(basis):
    # With 60 % N2O the end-tidal target counts N2O's MAC fraction with the agent's
    # ("total", as circlesim.outcomes.summary.summarise) or the agent alone.
    scenario = cs.Scenario(plan=cs.Plan([cs.Step(0, o2_l_min=1.6, n2o_l_min=2.4,
                                                 dial_percent=2.5)], duration_min=30.0,
                                        name="sevoflurane in N2O"))
    people = sample_patients(4, seed=9)
    result = run_population(scenario, people, workers=1, target_basis=basis)
    for b, patient in enumerate(people):
        one = cs.simulate(patient, scenario.circuit, scenario.plan, output_interval_min=0.5)
        summary = summarise(one, target_end_tidal_mac=1.0, target_basis=basis)
        assert result.outcomes["time_to_target_min"][b] == pytest.approx(
            summary.time_to_target_min, rel=1e-9)
