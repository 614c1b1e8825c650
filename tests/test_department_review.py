"""The counterfactual of recorded cases under a flow rule, against the outside world.

Records are made by the model (invented, with known physiology) so the checks do not depend on
data that are not ours; each check names the relation it is held to."""


import numpy as np
import pytest

import circlesim as cs
from circlesim.base.validation import InputError
from circlesim.cases.record import Monitor
from circlesim.cases.synthetic import synthetic_case, write_case
from circlesim.department.counterfactual import review_case
from circlesim.department.review import review_folder, review_records
from circlesim.department.rule import rule_from_dict
from circlesim.department.usage import DepartmentPrices
from circlesim.domain.physiology import Factors
from circlesim.outcomes.emissions import gwp
from circlesim.scenario import Scenario

ADULT = cs.Patient(weight_kg=70.0, height_cm=175.0, age_years=40.0, sex="male")


def _record(steps, *, agent="sevoflurane", duration=50.0, name="case", factors=None, seed=1,
            **options):
    scenario = Scenario(plan=cs.Plan(tuple(steps), duration_min=duration), patient=ADULT,
                        circuit=cs.Circuit(volume_l=3.0, bag_l=2.0), vaporizer=cs.Vaporizer(agent))
    record, _ = synthetic_case(scenario, factors or Factors(cardiac_output=1.1), name=name,
                               monitor=Monitor(sampling_delay_s=5.0), seed=seed, **options)
    return record


def _rule(*steps, **options):
    return rule_from_dict({"name": "test rule", "steps": list(steps), **options})


@pytest.fixture(scope="module")
def high_flow_record():
    """4 L/min O2/air throughout, end-tidal sevoflurane aimed at 1 MAC (invented case)."""
    return _record([cs.Step(0, o2_l_min=2.0, air_l_min=2.0, target_mac=1.0)], name="high")


def test_a_case_that_already_follows_the_rule_saves_nothing():
    """Recorded flows equal to the rule's: both held runs are the same plan, so the saving is
    zero to the solver's tolerance, for the fitted patient and every drawn one."""
    record = _record([cs.Step(0, o2_l_min=2.0, air_l_min=2.0, target_mac=1.0),
                      cs.Step(10, o2_l_min=0.3, air_l_min=0.2)], name="follows")
    rule = _rule({"o2_l_min": 2.0, "air_l_min": 2.0, "for_min": 10},
                 {"o2_l_min": 0.3, "air_l_min": 0.2})
    review = review_case(record, rule, draws=3)
    assert review.follows_rule
    assert review.held.agent_ml > 5.0
    tolerance = 1e-6 * review.held.agent_ml  # the integrator runs at rtol 1e-6
    assert abs(review.saving["agent_ml"]) <= tolerance
    assert abs(review.saving["co2e_gwp100_kg"]) <= 1e-6 * review.held.co2e_gwp100_kg
    assert np.all(np.abs(review.saving_draws["agent_ml"]) <= tolerance)
    # and a rule that differs is not mistaken for it
    other = _rule({"o2_l_min": 2.0, "air_l_min": 2.0, "for_min": 10},
                  {"o2_l_min": 0.5, "air_l_min": 0.5})
    assert not review_case(record, other, draws=0).follows_rule


def _rule_of_thumb_ml(result):
    """Common practice (rule of thumb): liquid agent used per hour ≈ 3 × FGF (L/min) × dial
    (vol%) mL — the vaporizer's output, whatever the flow; summed over the controller's plan."""
    segments = result.plan.segments(result.patient.default_tidal_volume_ml,
                                    result.patient.default_rate_per_min, result.circuit.valve)
    return sum(3.0 * s.fgf_l_min * s.dial_percent * (s.end_min - s.start_min) / 60.0
               for s in segments)


def test_holding_the_course_at_lower_flow_uses_less_agent(high_flow_record):
    """Same measured end-tidal course, 1 L/min instead of 4 L/min after a 5-minute wash-in: less
    agent; each held run uses what the 3 × FGF × dial rule of thumb says for the dials the
    controller chose (tolerance 15 %, as in test_outcomes_published), so the saving is the
    rule of thumb's difference between the two runs."""
    rule = _rule({"o2_l_min": 2.0, "air_l_min": 2.0, "for_min": 5},
                 {"o2_l_min": 0.5, "air_l_min": 0.5})
    review = review_case(high_flow_record, rule, draws=0, keep_results=True)
    held, under = review.arms.held_result, review.arms.rule_result
    assert review.saving["agent_ml"] > 0.25 * review.held.agent_ml
    for result, usage in ((held, review.held), (under, review.rule)):
        assert usage.agent_ml == pytest.approx(_rule_of_thumb_ml(result), rel=0.15)
    thumb = _rule_of_thumb_ml(held) - _rule_of_thumb_ml(under)
    assert review.saving["agent_ml"] == pytest.approx(thumb, rel=0.15)
    # the course was held in both runs (median deviation within the controller's 5 %)
    assert review.arms.held_quality.median_percent < 5.0
    assert review.arms.rule_quality.median_percent < 5.0
    # at the same flows the controller uses about what the recorded dials used (10 %)
    assert review.held.agent_ml == pytest.approx(review.recorded.agent_ml, rel=0.10)


def test_lower_rule_flows_use_ever_less_agent(high_flow_record):
    """Direction of the textbook rationale for low flow (as test_outcomes_published): holding
    the same course, agent used falls with the maintenance flow."""
    used = []
    for flow in (3.0, 2.0, 1.0, 0.5):
        rule = _rule({"o2_l_min": 2.0, "air_l_min": 2.0, "for_min": 5},
                     {"o2_l_min": flow / 2, "air_l_min": flow / 2})
        used.append(review_case(high_flow_record, rule, draws=0).rule.agent_ml)
    assert np.all(np.diff(used) < 0), used


def test_co2_equivalent_uses_the_sourced_gwp_values(high_flow_record):
    """GWP20 of sevoflurane 349 (Ryan SM, Nielsen CJ, Anesth Analg 2010;111:92-8) and GWP100
    130 (Sulbaek Andersen MP et al., Anesth Analg 2012;114:1081-5, from memory); no N2O here."""
    rule = _rule({"o2_l_min": 0.5, "air_l_min": 0.5})
    review = review_case(high_flow_record, rule, draws=0)
    assert gwp("sevoflurane", 20).value == 349.0
    for usage in (review.recorded, review.held, review.rule):
        assert usage.n2o_l == 0.0
        assert usage.co2e_gwp20_kg == pytest.approx(usage.agent_g * 349.0 / 1000.0, rel=1e-12)
        assert usage.co2e_gwp100_kg == pytest.approx(usage.agent_g * 130.0 / 1000.0, rel=1e-12)


def test_a_rule_that_lets_fio2_fall_is_flagged_for_that_case(high_flow_record):
    """0.5 L/min with 45 % O2 in the fresh gas: the O2 delivered (0.22 L/min) is less than a
    70 kg adult's consumption (Brody: 10 × 70^0.75 ≈ 240 mL/min), so by mass balance FIO2 must
    fall (docs/oxygen.md); the same flow with 80 % O2 keeps it above 0.30."""
    hypoxic = _rule({"o2_l_min": 0.15, "air_l_min": 0.35}, fio2_threshold=0.3)
    review = review_case(high_flow_record, hypoxic, draws=0)
    assert review.flagged and review.fio2_risk
    assert review.rule.lowest_fio2 < 0.3 and review.rule.minutes_below_fio2 > 0.0
    assert "FIO2" in review.risks()
    rich = _rule({"o2_l_min": 0.375, "air_l_min": 0.125}, min_fresh_o2_fraction=0.7)
    safe = review_case(high_flow_record, rich, draws=0)
    assert not safe.flagged and safe.rule.lowest_fio2 > 0.3


def test_a_warning_response_raises_the_flow(high_flow_record):
    """A rule that responds to a low FIO2 raises the flow one minute after the warning."""
    rule = _rule({"o2_l_min": 0.15, "air_l_min": 0.35},
                 respond={"on": ["fio2_low"], "raise_to_l_min": 2.0, "o2_fraction": 0.6})
    review = review_case(high_flow_record, rule, draws=0, keep_results=True)
    assert review.arms.responses and "raised to 2 L/min" in review.arms.responses[0]
    assert review.arms.rule_result.flowmeter_total_l_min.max() == pytest.approx(2.0)
    assert review.flagged  # the dip before the response still counts


def _folder(tmp_path, records):
    for record in records:
        write_case(record, tmp_path)
    return tmp_path


def test_totals_are_sums_of_the_cases_mixed_agents_and_a_broken_record(tmp_path):
    records = [_record([cs.Step(0, o2_l_min=1.5, air_l_min=1.5, target_mac=1.0)], name="sevo",
                       duration=40.0),
               _record([cs.Step(0, o2_l_min=1.0, air_l_min=1.0, target_mac=1.0)], name="iso",
                       agent="isoflurane", duration=40.0),
               _record([cs.Step(0, o2_l_min=3.0, air_l_min=3.0, target_mac=1.0)],
                       name="des", agent="desflurane", duration=40.0)]
    folder = _folder(tmp_path / "cases", records)
    (folder / "broken.toml").write_text(
        (folder / "sevo.toml").read_text().replace("sevo.csv", "broken.csv"))
    (folder / "broken.csv").write_text("time_min,o2_l_min\n0,ten\n")
    rule = _rule({"o2_l_min": 2.0, "air_l_min": 2.0, "for_min": 5},
                 {"o2_l_min": 0.3, "air_l_min": 0.2})
    prices = DepartmentPrices(agents={"sevoflurane": (120.0, 250.0),
                                      "isoflurane": (30.0, 250.0),
                                      "desflurane": (100.0, 240.0)}, currency="EUR")
    ticks = []
    review = review_folder(folder, rule, prices=prices, draws=2, workers=1,
                           progress=ticks.append)
    assert sorted(r.name for r in review.reviews) == ["des", "iso", "sevo"]
    assert len(ticks) == 3
    assert [p.name for p in review.problems] == ["broken"]
    assert "'ten' is not a number" in review.problems[0].message
    totals = review.totals_table().set_index("agent")
    assert sorted(totals.index[:-1]) == ["desflurane", "isoflurane", "sevoflurane"]
    assert totals.index[-1] == "all agents"
    for key in ("cost", "co2e_gwp20_kg", "co2e_gwp100_kg"):
        expected = sum(r.saving[key] for r in review.reviews)
        assert review.total(key, "saving") == pytest.approx(expected, rel=1e-12)
        held = sum(getattr(r.held, key) for r in review.reviews)
        rule_total = sum(getattr(r.rule, key) for r in review.reviews)
        assert review.total(key, "saving") == pytest.approx(held - rule_total, rel=1e-9)
    for r in review.reviews:  # per agent: the agent's own case
        assert totals.loc[r.agent, "agent, mL: saving"] == pytest.approx(r.saving["agent_ml"])
    assert "agent, mL: saving" not in totals.columns or np.isnan(
        totals.loc["all agents"].get("agent, mL: saving", np.nan))
    low, high = review.total_interval("co2e_gwp100_kg")
    assert low <= review.total("co2e_gwp100_kg", "saving") <= high
    cases_csv, totals_csv = review.write_csv(tmp_path / "out.csv")
    assert "broken" in cases_csv.read_text() and "all agents" in totals_csv.read_text()
    with pytest.raises(FileExistsError):
        review.write_csv(tmp_path / "out.csv")


def test_thin_record_uses_the_prior_and_a_folder_without_records_is_refused(tmp_path,
                                                                            monkeypatch):
    # A fit needs only 2 values (circlesim.cases.fit.MIN_POINTS) and a review at least 3 of
    # end-tidal agent, so "too thin to fit" is simulated by a fit that refuses the record.
    import circlesim.department.counterfactual as counterfactual

    def refuse(record, **options):
        raise InputError(f"{record.name}: 1 measured value(s); a fit needs at least 2.")

    monkeypatch.setattr(counterfactual, "fit_case", refuse)
    thin = _record([cs.Step(0, o2_l_min=1.5, air_l_min=1.5, target_mac=1.0)], name="thin",
                   duration=45.0, series=(("end_tidal", "agent"),), interval_min=15.0)
    rule = _rule({"o2_l_min": 0.5, "air_l_min": 0.5})
    review = review_records([thin], rule, draws=2, workers=1)
    assert review.reviews[0].basis == "prior"
    assert "population prior" in review.reviews[0].basis_note
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="holds no case records"):
        review_folder(tmp_path / "empty", rule)


def test_a_record_without_end_tidal_agent_is_listed_not_lost():
    record = _record([cs.Step(0, o2_l_min=1.5, air_l_min=1.5, target_mac=1.0)], name="no_et",
                     duration=30.0, series=(("inspired", "oxygen"),))
    good = _record([cs.Step(0, o2_l_min=1.5, air_l_min=1.5, target_mac=1.0)], name="good",
                   duration=30.0)
    review = review_records([record, good], _rule({"o2_l_min": 0.5, "air_l_min": 0.5}),
                            draws=0, workers=1)
    assert [r.name for r in review.reviews] == ["good"]
    assert "no end_tidal_sevoflurane_pct column" in review.problems[0].message
