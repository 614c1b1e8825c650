"""The band over similar patients: it contains the typical patient, its width follows the spread
of the inputs, bad settings are named, and a fitted scenario draws from its fit.

The physiology spread is that of the population module's sourced distributions
(circlesim.population.virtual_patients: cardiac output, FRC, VO2 and solubility factors; see
their ``source`` strings), so no published value is checked here.
"""

from dataclasses import replace

import numpy as np
import pytest

import circlesim as cs
from circlesim.cases.synthetic import synthetic_case, write_case
from circlesim.domain.physiology import FitUncertainty
from circlesim.population.band import BAND_SERIES, BandSettings, run_band, similar_patients

PLAN = cs.Plan([cs.Step(0, o2_l_min=2.0, air_l_min=4.0, dial_percent=3.0),
                cs.Step(8, o2_l_min=0.35, air_l_min=0.15, dial_percent=3.5)], duration_min=60.0)
PATIENT = cs.Patient(weight_kg=78.0, height_cm=170.0, age_years=80.0, sex="female")
SCENARIO = cs.Scenario(plan=PLAN, patient=PATIENT, vaporizer=cs.Vaporizer("sevoflurane"))
SMALL = BandSettings(patients=60)


def _typical(scenario, band):
    r = scenario.simulate(output_interval_min=float(band.time_min[1] - band.time_min[0]))
    keep = np.isin(r.time_min, band.time_min)
    return {"end_tidal_agent_percent": r.end_tidal_percent("agent")[keep],
            "brain_agent_percent": r.brain_percent("agent")[keep],
            "fio2": r.inspired[:, 0][keep]}


def test_band_contains_the_typical_patient():
    band = run_band(SCENARIO, SMALL)
    typical = _typical(SCENARIO, band)
    assert band.n == 60 and set(band.low) == set(BAND_SERIES)
    for key, curve in typical.items():
        assert curve.shape == band.low[key].shape
        tol = 1e-9 * np.abs(curve).max()
        assert np.all(band.low[key] <= curve + tol), key
        assert np.all(curve <= band.high[key] + tol), key
        assert np.all(band.low[key] <= band.median[key])
        assert np.all(band.median[key] <= band.high[key])
    lo, hi = band.outcomes["lowest_fio2"]
    assert lo <= typical["fio2"].min() <= hi


def _width(band, key="end_tidal_agent_percent"):
    return float(np.max(band.high[key] - band.low[key]))


def test_width_grows_with_the_spread_and_is_zero_without_it():
    widths = [_width(run_band(SCENARIO, replace(SMALL, spread=s))) for s in (0.0, 0.5, 1.0, 2.0)]
    assert widths[0] == 0.0
    assert widths[1] > 0.0 and widths[1] < widths[2] < widths[3]
    zero = run_band(SCENARIO, replace(SMALL, spread=0.0))
    for key in BAND_SERIES:
        assert np.array_equal(zero.low[key], zero.high[key])
    # and a wider percentile range gives a wider band
    assert _width(run_band(SCENARIO, replace(SMALL, low_percentile=25, high_percentile=75))) \
        < widths[2]


def test_similar_patients_share_body_size_and_age():
    patients, circuits, basis = similar_patients(SCENARIO, SMALL)
    assert basis == "similar patients" and len(patients) == len(circuits) == 60
    for p in patients:
        assert (p.weight_kg, p.height_cm, p.age_years, p.sex) == (78.0, 170.0, 80.0, "female")
    co = np.array([p.cardiac_output for p in patients])
    assert co.std() > 0.05 * co.mean()


def test_kept_draws_are_the_draws_made_afresh():
    from circlesim.population import band as band_module

    first = similar_patients(SCENARIO, SMALL)
    band_module._draw.cache_clear()
    fresh = similar_patients(SCENARIO, SMALL)
    again = similar_patients(SCENARIO, SMALL)
    assert first[0] == fresh[0] == again[0] and first[1] == fresh[1] == again[1]
    assert band_module._draw.cache_info().hits >= 1
    # what the caller gets is its own list: changing it does not change the kept draws
    again[0].clear()
    assert similar_patients(SCENARIO, SMALL)[0] == fresh[0]
    # another seed or another patient draws again
    assert similar_patients(SCENARIO, replace(SMALL, seed=SMALL.seed + 1))[0] != fresh[0]
    heavier = replace(SCENARIO, patient=replace(SCENARIO.patient, weight_kg=90.0))
    assert {p.weight_kg for p in similar_patients(heavier, SMALL)[0]} == {90.0}


def test_threshold_share_is_reported():
    # Closed-ish minimal flow with little O2: many similar patients fall below FIO2 0.30.
    plan = cs.Plan([cs.Step(0, o2_l_min=4.0, air_l_min=2.0, dial_percent=3.0),
                    cs.Step(5, o2_l_min=0.25, air_l_min=0.25, dial_percent=4.0)],
                   duration_min=60.0)
    band = run_band(replace(SCENARIO, plan=plan), SMALL)
    assert 0.0 < band.share_below_fio2 <= 1.0
    assert any("of similar patients FIO2 falls below 0.30" in s for s in band.warnings())


@pytest.mark.parametrize("kwargs, words", [
    ({"patients": 19},
     "BandSettings.patients must be a whole number from 20 to 2000 patients; got 19"),
    ({"patients": 2001}, "BandSettings.patients must be a whole number from 20 to 2000"),
    ({"low_percentile": 0.5}, "BandSettings.low_percentile must be a number from 1 to 99 %"),
    ({"high_percentile": 99.5}, "BandSettings.high_percentile must be a number from 1 to 99"),
    ({"low_percentile": 60, "high_percentile": 40}, "high_percentile must be above"),
    ({"patients": 20.5}, "BandSettings.patients must be a whole number"),
])
def test_bad_band_settings_are_named(kwargs, words):
    with pytest.raises(cs.InputError, match=words.replace("(", r"\(").replace(")", r"\)")):
        BandSettings(**kwargs)


def test_fitted_scenario_draws_from_its_fit():
    fit = FitUncertainty(names=("cardiac_output", "vo2"), covariance_log=np.diag([0.04, 0.01]),
                         source="test fit")
    fitted = replace(SCENARIO, fit=fit)
    band = run_band(fitted, SMALL)
    assert band.basis == "the fit to the measured case"
    assert _width(band) > 0.0
    assert any("of draws from the fit" in s for s in run_band(
        replace(fitted, report=replace(fitted.report, fio2_threshold=0.9)), SMALL).warnings())
    none = replace(SCENARIO, fit=replace(fit, covariance_log=np.zeros((2, 2))))
    assert _width(run_band(none, SMALL)) == 0.0


def test_target_mode_needs_the_controllers_plan():
    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, air_l_min=4.0, target_mac=1.0)], duration_min=30)
    with pytest.raises(cs.InputError, match="target controller's plan"):
        run_band(replace(SCENARIO, plan=plan), SMALL)


def test_app_shows_band_and_measured_points(tmp_path):
    """The planner draws the band, and for a fitted scenario the case record's points."""
    from circlesim.app import PlannerApp

    record, _ = synthetic_case(SCENARIO, seed=3)
    path = write_case(record, tmp_path, name="case")
    fit = FitUncertainty(names=("cardiac_output",), covariance_log=np.diag([0.04]),
                         record=path.name)
    app = PlannerApp(replace(SCENARIO, fit=fit), output_folder=tmp_path,
                     scenario_folder=tmp_path)
    assert app.band is not None and app.band.basis.startswith("the fit")
    names = [t.name for t in app.figure.data if t.visible]
    assert any(n.startswith("End-tidal sevoflurane, 5–95 % of fit draws") for n in names)
    assert any(n.startswith("Measured end-tidal sevoflurane") for n in names)
    assert "Range over 200 fit draws" in app.band_outcomes.value
    # bad band settings: the field is named, the band stays
    before = app.band
    app.band_panel.boxes["patients"].value = "5"
    assert "Similar patients must be a whole number from 20 to 2000" in app.band_panel.error.value
    assert app.band is before
    app.band_panel.boxes["patients"].value = "200"
    assert app.band_panel.error.value == ""


def test_band_in_chunks_on_a_pool_equals_one_batch():
    from concurrent.futures import ThreadPoolExecutor

    whole = run_band(SCENARIO, SMALL, parallel=False)
    with ThreadPoolExecutor(3) as pool:
        split = run_band(SCENARIO, SMALL, pool=pool, chunks=3)
        with pytest.raises(cs.InputError, match="chunks"):
            run_band(SCENARIO, SMALL, pool=pool, chunks=0)
        with pytest.raises(cs.InputError, match="chunks"):
            run_band(SCENARIO, SMALL, pool=pool, chunks=1.5)
    assert split.n == whole.n
    for key in BAND_SERIES:
        for edge in ("low", "median", "high"):
            np.testing.assert_array_equal(getattr(split, edge)[key], getattr(whole, edge)[key])
    assert split.outcomes == whole.outcomes
    assert split.share_below_fio2 == whole.share_below_fio2


def test_band_tolerance_changes_the_edges_by_under_1e_4_of_their_peak():
    # The band integrates at BAND_RTOL (1e-5) instead of the engine's default 1e-6.
    loose = run_band(SCENARIO, SMALL, parallel=False)
    tight = run_band(SCENARIO, SMALL, parallel=False, rtol=1e-6)
    for key in BAND_SERIES:
        peak = np.max(tight.high[key])
        for edge in ("low", "median", "high"):
            difference = np.max(np.abs(getattr(loose, edge)[key] - getattr(tight, edge)[key]))
            assert difference < 1e-4 * peak, (key, edge, difference / peak)
