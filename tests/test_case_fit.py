"""Fitting the patient, forecasting the rest of a case, calibrating a cohort — on synthetic
cases made by the model itself with known factors, monitor noise, a sampling delay and
one-minute resolution.

Truths are drawn from the same population distributions the fit uses as priors
(circlesim.population.virtual_patients, each with its source), so that the forecast band's
coverage can be judged against its nominal rate. Monitor noise: circlesim.cases.priors.NOISE
(assumption: about half the accuracy limits of ISO 80601-2-55, from memory), i.e. about
±0.15 vol% sevoflurane at 1.4 vol% and ±2 vol% O2 at 50 %.
"""

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import circlesim as cs
from circlesim.cases.check import check_case
from circlesim.cases.cohort import calibrate, profile_from_fits
from circlesim.cases.fit import fit_case
from circlesim.cases.forecast import forecast_case
from circlesim.cases.performance import performance
from circlesim.cases.priors import LEAK_PRIOR, prior_for
from circlesim.cases.record import Monitor
from circlesim.cases.synthetic import synthetic_case
from circlesim.domain.physiology import FACTOR_NAMES, CohortProfile, Factors

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
DEMO = cs.load_scenario(SCENARIOS / "flow_reduction_sevoflurane.toml")
MONITOR = Monitor(sampling_delay_s=8.0)  # a side-stream delay of a few seconds (common practice)


def _draw_truth(rng: np.random.Generator) -> Factors:
    prior = prior_for()
    z = rng.normal(prior.mean_log, prior.sd_log)
    return Factors(**dict(zip((*FACTOR_NAMES, "leak_ml_min"), np.exp(z), strict=True)))


def test_fit_recovers_the_identifiable_parameters():
    # Tolerances (ours): O2 consumption and alveolar ventilation — identified by the O2 and
    # CO2 balance at 0.5 L/min — within 6 %; every estimate within 3.5 posterior SD of the
    # truth; the leak, which these data cannot separate from the prior, is reported as not
    # identified rather than as a number.
    rng = np.random.default_rng(11)
    worst_rel = {"vo2": 0.0, "alveolar_ventilation": 0.0}
    for seed in range(6):
        truth = _draw_truth(rng)
        record, _ = synthetic_case(DEMO, truth, interval_min=1.0, monitor=MONITOR, seed=seed)
        fit = fit_case(record)
        values = truth.to_dict()
        for i, name in enumerate(fit.prior.names):
            true_log = np.log(values[name])
            z = (true_log - fit.theta[i]) / np.sqrt(fit.covariance[i, i])
            assert abs(z) < 3.5, (seed, name, z)
        for name in worst_rel:
            est = next(e for e in fit.estimates if e.name == name)
            assert est.identified
            worst_rel[name] = max(worst_rel[name], abs(est.value / values[name] - 1.0))
        assert "leak_ml_min" in fit.not_identified
        assert "not identified by these data" in fit.summary()
    assert worst_rel["vo2"] < 0.06 and worst_rel["alveolar_ventilation"] < 0.06, worst_rel


def test_forecast_band_covers_the_held_out_truth():
    # Fit the first 30 min of a 2-hour case, forecast the rest with a 5-95 % band of the
    # model's curve. Over many seeds the band should hold the noise-free truth at about its
    # nominal 90 %. Measured (40 seeds, all five series): 84 %; per series 84-86 % for
    # sevoflurane, 82-83 % for O2, 83 % for CO2 (docs/case-records.md discusses the shortfall).
    # The test holds the average at 75 % or more so that a real regression fails.
    rng = np.random.default_rng(5)
    coverage = []
    for seed in range(16):
        truth = _draw_truth(rng)
        record, known = synthetic_case(DEMO, truth, interval_min=1.0, monitor=MONITOR,
                                       seed=seed)
        fc = forecast_case(record, 30.0, draws=200, seed=seed)
        later = record.time_min > 30.0
        idx = np.searchsorted(fc.time_min, record.time_min[later])
        for s in record.measured:
            clean = known.noise_free[s][later]
            inside = (clean >= fc.low[s][idx] - 1e-9) & (clean <= fc.high[s][idx] + 1e-9)
            coverage.append(inside.mean())
    mean = float(np.mean(coverage))
    print(f"\nforecast band (nominal 90 %) held the truth at {100 * mean:.0f} % of times")
    assert 0.75 <= mean <= 0.995


def test_forecast_with_the_wrong_structure_still_beats_the_prior():
    # Data made with intertissue diffusion (muscle to adjacent fat), fitted without it: the
    # fitted forecast of end-tidal sevoflurane after 30 min is still closer than the unfitted
    # prior model (MDAPE, Varvel et al. 1992).
    truth = Factors(cardiac_output=1.3, vo2=0.85, frc=0.8, solubility=1.1)
    record, _ = synthetic_case(DEMO, truth, interval_min=1.0, monitor=MONITOR, seed=4)
    wrong = record.with_scenario(replace(record.scenario, patient=replace(
        record.scenario.patient, intertissue_diffusion=False)))
    fc = forecast_case(wrong, 30.0, draws=100)
    series = next(s for s in record.measured if s.site == "end_tidal" and s.gas == "sevoflurane")
    fitted, prior = fc.held_out[series], fc.prior_held_out[series]
    print(f"\nwrong structure: held-out MDAPE fitted {fitted.mdape_percent:.1f} %, unfitted "
          f"{prior.mdape_percent:.1f} %")
    assert fitted.mdape_percent < 0.8 * prior.mdape_percent


def test_fitted_patient_saves_as_a_scenario_that_runs(tmp_path):
    record, _ = synthetic_case(DEMO, Factors(vo2=0.8), interval_min=2.0, seed=1)
    fit = fit_case(record)
    scenario = fit.scenario()
    path = cs.scenario.save_scenario(scenario, tmp_path / "fitted.toml")
    again = cs.load_scenario(path)
    assert again.fit is not None and again.fit.names == fit.prior.names
    np.testing.assert_allclose(again.fit.covariance_log, fit.covariance, rtol=1e-9)
    assert again.patient.vo2_ml_min == pytest.approx(DEMO.patient.vo2 * fit.factors.vo2)
    result = again.simulate()
    assert result.time_min[-1] == pytest.approx(record.plan.duration_min)


def test_cohort_calibration_finds_a_systematic_offset():
    # Eight invented patients of one cohort whose cardiac output runs 30 % above and O2
    # consumption 15 % below the textbook rules, each with its own scatter (SD 0.08 of log).
    rng = np.random.default_rng(3)
    records = []
    for k in range(8):
        patient = cs.Patient(weight_kg=float(rng.uniform(55, 100)),
                             height_cm=float(rng.uniform(155, 190)),
                             age_years=float(rng.uniform(25, 80)),
                             sex=("female", "male")[k % 2])
        scenario = replace(DEMO, patient=patient)
        truth = Factors(cardiac_output=float(1.3 * np.exp(rng.normal(0, 0.08))),
                        vo2=float(0.85 * np.exp(rng.normal(0, 0.08))),
                        leak_ml_min=float(np.exp(rng.normal(*LEAK_PRIOR[:2]))))
        record, _ = synthetic_case(scenario, truth, interval_min=1.0, monitor=MONITOR,
                                   seed=k, name=f"cohort-{k}")
        records.append(record)
    result = calibrate(records, "invented cohort", workers=1)
    profile = result.profile
    assert profile.factors.vo2 == pytest.approx(0.85, rel=0.05)
    assert profile.factors.cardiac_output == pytest.approx(1.3, rel=0.15)
    assert len(profile.calibrated_on) == 8 and not result.problems
    # Left out in turn, each case is predicted better by the profile than by the default.
    rows = {r[0]: r for r in result.pooled_table()}
    o2 = rows["end-tidal oxygen"]
    assert o2[5] < o2[3]
    # A profile needs at least two fitted cases.
    with pytest.raises(cs.InputError, match="at least 2"):
        profile_from_fits(result.fits[:1], "one")


def test_profile_is_opt_in_and_shown(tmp_path):
    # Without a profile the textbook model runs unchanged; with one, every factor applies and
    # the check says which model made the prediction.
    record, _ = synthetic_case(DEMO, interval_min=5.0, seed=0)
    default = check_case(record)
    assert default.model == "textbook default model"
    profile = CohortProfile(name="test cohort", factors=Factors(cardiac_output=1.5))
    chosen = check_case(record.with_scenario(replace(record.scenario, profile=profile)))
    assert "test cohort" in chosen.model and "opt-in" in chosen.model
    series = next(iter(record.measured))
    assert not np.allclose(default.predicted[series], chosen.predicted[series])
    assert performance(record.time_min, record.measured[series], default.predicted[series],
                       0.1) is not None
