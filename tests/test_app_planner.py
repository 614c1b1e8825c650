"""The planner app driven from Python: controls change the engine inputs and the figure; bad
entries show an inline error and keep the last prediction; comparison; warnings; caution."""

from __future__ import annotations

import html

import numpy as np
import pytest
from app_helpers import all_html, cell, curves

import circlesim as cs
from circlesim.app import PlannerApp
from circlesim.app.planner import demo_scenario
from circlesim.base.cautions import CAUTION


@pytest.fixture
def app() -> PlannerApp:
    return PlannerApp(output_folder="unused")


def _curve(app: PlannerApp, name: str) -> np.ndarray:
    trace = next(t for t in curves(app) if t.name == name)
    return np.array(trace.y, dtype=float)




def test_starts_with_the_demo_scenario(app):
    demo = demo_scenario()
    shown = app.runner.current.scenario
    assert shown.plan == demo.plan
    assert shown.patient == demo.patient
    assert app.runner.error is None
    assert len(curves(app)) == 14
    assert demo.title in app.title.value
    assert [r.cells["o2_l_min"].value for r in app.editor.rows] == ["2", "0.35", ""]


def test_caution_always_on_screen(app):
    assert html.escape(CAUTION) in all_html(app.widget)
    cell(app, 1, "o2_l_min").value = "-1"
    assert app.runner.error is not None
    assert html.escape(CAUTION) in all_html(app.widget)


def test_flow_change_changes_engine_inputs_and_figure_in_place(app):
    figure = app.figure
    before = _curve(app, "End-tidal sevoflurane")
    cell(app, 1, "o2_l_min").value = "1.5"
    step = app.runner.current.scenario.plan.steps[1]
    assert step.o2_l_min == 1.5 and step.air_l_min == 0.15
    assert app.figure is figure  # the same FigureWidget, updated in place
    after = _curve(app, "End-tidal sevoflurane")
    t = np.array(curves(app)[0].x)
    # More fresh gas at the same dial brings inspired agent closer to the dial, so end-tidal
    # agent after the reduction is higher (less rebreathing of gas depleted by uptake).
    # Source: textbook low-flow physiology, e.g. Baum & Aitkenhead, Anaesthesia 1995;50
    # Suppl:37-44 (from memory).
    late = t >= 30.0
    assert after[late].mean() > before[late].mean()
    fresh = _curve(app, "Fresh gas flow")
    assert fresh[(t > 10) & (t < 60)] == pytest.approx(1.65, rel=0.15)  # O2 1.5 + air 0.15 + vapour


def test_patient_change_reaches_the_engine(app):
    app.settings.field("weight_kg").input.value = 100.0
    assert app.runner.current.scenario.patient.weight_kg == 100.0
    assert app.runner.current.result.patient.weight_kg == 100.0


def test_age_moves_the_mac_lines(app):
    app.settings.field("age_years").input.value = 40.0
    shapes = {s.name: s.y0 for s in app.figure.layout.shapes}
    # Mapleson, Br J Anaesth 1996;76:179-85: sevoflurane MAC 1.80 % at 40 years.
    assert shapes["mac-1"] == pytest.approx(1.80, abs=0.005)
    app.settings.field("age_years").input.value = 80.0
    shapes = {s.name: s.y0 for s in app.figure.layout.shapes}
    # Mapleson 1996: MAC falls 6 % per decade, MAC_age = MAC40 × 10^(−0.00269 (age − 40)).
    assert shapes["mac-1"] == pytest.approx(1.80 * 10 ** (-0.00269 * 40), rel=0.01)
    assert shapes["mac-1.5"] == pytest.approx(1.5 * shapes["mac-1"])


def test_fio2_threshold_moves_its_line_and_the_alert(app):
    app.settings.field("fio2_threshold").input.value = 0.5
    shapes = {s.name: s.y0 for s in app.figure.layout.shapes}
    assert shapes["fio2-threshold"] == 0.5
    assert app.runner.current.scenario.report.fio2_threshold == 0.5
    fio2 = app.runner.current.result.inspired[:, 0]
    assert fio2.min() < 0.5  # the demo plan's FIO2 dips below 0.5 during wash-in
    assert any(a.key == "fio2_low" for a in app.runner.current.result.alerts)
    assert "Inspired O2 fraction falls below 0.50" in app.warnings.value


def test_derived_values_shown_and_overridable(app):
    vo2 = app.settings.field("vo2_ml_min")
    patient = app.runner.current.scenario.patient
    assert vo2.input.disabled and vo2.value is None
    assert vo2.input.value == pytest.approx(patient.vo2, abs=0.5)  # shown to 1 mL/min
    frc = app.settings.field("frc_l")
    assert frc.input.value == pytest.approx(patient.frc, abs=0.005)
    co = app.settings.field("cardiac_output_l_min")
    assert co.input.value == pytest.approx(patient.cardiac_output, abs=0.005)
    low_flow = app.runner.current.result.time_min > 60.0
    fio2_before = app.runner.current.result.inspired[low_flow, 0].mean()
    vo2.override.value = True
    vo2.input.value = 350.0
    assert app.runner.current.scenario.patient.vo2_ml_min == 350.0
    assert app.runner.current.summary.vo2_ml_min == 350.0
    # O2 mass balance at low flow: FIO2 ≈ (FGF × FO2,fresh − VO2) / (FGF − VO2 − other
    # uptake), so more O2 consumption means a lower inspired O2 fraction (docs/model.md).
    assert app.runner.current.result.inspired[low_flow, 0].mean() < fio2_before - 0.05
    vo2.override.value = False
    assert app.runner.current.scenario.patient.vo2_ml_min is None


def test_starting_ventilation_mirrors_the_first_step(app):
    tidal = app.settings.field("tidal_volume_ml")
    tidal.override.value = True
    tidal.input.value = 520.0
    assert cell(app, 0, "tidal_volume_ml").value == "520"
    assert app.runner.current.scenario.plan.steps[0].tidal_volume_ml == 520.0
    cell(app, 0, "tidal_volume_ml").value = "480"
    assert tidal.value == 480.0
    assert app.runner.current.scenario.plan.steps[0].tidal_volume_ml == 480.0
    cell(app, 0, "tidal_volume_ml").value = ""
    assert tidal.value is None
    assert app.runner.current.scenario.plan.steps[0].tidal_volume_ml is None


@pytest.mark.parametrize(("row", "key", "text", "wording"), [
    (1, "o2_l_min", "-1", "Step 2, O2 (L/min): must be a number from 0 to 15 L/min; got -1"),
    (1, "dial_percent", "9", "Step 2, Dial (vol%): must be a number from 0 to 8 vol%"),
    (1, "air_l_min", "lots", "Step 2, Air (L/min): must be a number; got 'lots'"),
    (2, "time_min", "5", "Step 3, Time (min): must be later than the previous step"),
])
def test_invalid_cell_shows_inline_error_and_keeps_last_prediction(app, row, key, text,
                                                                   wording):
    good = app.runner.current
    curve = _curve(app, "End-tidal sevoflurane")
    cell(app, row, key).value = text
    assert app.runner.current is good
    assert wording in app.runner.error
    assert html.escape(wording) in app.error.value
    assert "Traceback" not in app.error.value
    assert "cs-invalid" in cell(app, row, key)._dom_classes
    np.testing.assert_array_equal(_curve(app, "End-tidal sevoflurane"), curve)
    assert "last prediction that ran" in app.warnings.value
    # Correcting the entry clears the error and runs again.
    cell(app, row, key).value = {"o2_l_min": "0.4", "dial_percent": "4", "air_l_min": "0.2",
                                  "time_min": "30"}[key]
    assert app.runner.error is None and app.error.value == ""
    assert app.runner.current is not good
    assert "cs-invalid" not in cell(app, row, key)._dom_classes


def test_invalid_setting_shows_inline_error(app):
    good = app.runner.current
    app.settings.field("weight_kg").input.value = -5.0
    assert app.runner.current is good
    assert "Patient.weight_kg must be a number from 2 to 250 kg; got -5" in app.error.value


def test_too_little_fresh_gas_is_an_error(app):
    cell(app, 1, "o2_l_min").value = "0"
    cell(app, 1, "air_l_min").value = "0.05"
    assert "Step 2: total fresh gas flow (O2 + air + N2O) must be a number from 0.1" in (
        app.runner.error)


def test_add_and_remove_steps(app):
    app.editor.add_step()
    assert len(app.editor.rows) == 4
    assert cell(app, 3, "time_min").value == "70"
    cell(app, 3, "dial_percent").value = "2.5"
    plan = app.runner.current.scenario.plan
    assert plan.steps[3] == cs.Step(70.0, dial_percent=2.5)
    app.editor.remove_step(1)
    assert [s.time_min for s in app.runner.current.scenario.plan.steps] == [0.0, 60.0, 70.0]
    app.editor.remove_step(0)
    # The plan must start at 0 min: the error names the new first step.
    assert "Step 1, Time (min): must be 0" in app.runner.error
    while len(app.editor.rows) > 1:
        app.editor.remove_step(0)
    app.editor.remove_step(0)  # the last step stays
    assert len(app.editor.rows) == 1


def test_plan_length(app):
    app.editor.duration.value = 240.0
    result = app.runner.current.result
    assert result.time_min[-1] == 240.0
    assert max(curves(app)[0].x) == 240.0
    app.editor.duration.value = 50.0  # before the last step (60 min)
    assert "Step 3, Time (min): must be before the end of the plan (50 min)" in app.runner.error


def test_comparison_with_reference_plan(app):
    figure = app.figure
    app.keep_reference()
    reference = app.runner.reference
    cell(app, 1, "o2_l_min").value = "0.25"
    cell(app, 1, "air_l_min").value = "0.25"
    assert app.figure is figure
    assert len(curves(app)) == 28
    names = [t.name for t in curves(app)]
    assert "End-tidal O2 (reference plan)" in names and "End-tidal O2 (current plan)" in names
    current = next(t for t in figure.data if t.name == "Inspired O2 (current plan)")
    ref = next(t for t in figure.data if t.name == "Inspired O2 (reference plan)")
    assert current.line.dash == "dash" and ref.line.dash == "solid"
    # Same total flow with more air: the fresh gas holds less O2, so FIO2 is lower.
    assert np.mean(current.y) < np.mean(ref.y)
    table = app.outcomes.value
    for heading in ("reference plan", "current plan", "difference"):
        assert heading in table
    s_ref, s_cur = reference.summary, app.runner.current.summary
    assert f"{s_ref.lowest_fio2:.3f}" in table and f"{s_cur.lowest_fio2:.3f}" in table
    assert f"{s_cur.lowest_fio2 - s_ref.lowest_fio2:+.3f}" in table
    assert f"{s_cur.agent_delivered_ml:.1f} mL" in table
    assert "Time to end-tidal target" in table
    app.clear_reference()
    assert app.figure is figure and len(curves(app)) == 14
    assert "difference" not in app.outcomes.value


def test_agent_change_relabels_the_figure(app):
    app.settings.field("agent").input.value = "isoflurane"
    assert app.runner.error is None
    assert app.runner.current.result.agent == "isoflurane"
    assert "End-tidal isoflurane" in [t.name for t in app.figure.data]
    assert app.settings.field("max_dial_percent").input.value == 5.0
    cell(app, 0, "dial_percent").value = "6"
    assert "Step 1, Dial (vol%): must be a number from 0 to 5 vol% (the isoflurane " \
           "vaporizer's range); got 6" in app.runner.error
    shapes = {s.name: s.y0 for s in app.figure.layout.shapes}
    # Mapleson 1996: isoflurane MAC 1.17 % at 40 years.
    assert shapes["mac-1"] == pytest.approx(1.17 * 10 ** (-0.00269 * 40), rel=0.01)


def test_warnings_panel_lists_alerts_with_start_times(app):
    # Demo: sevoflurane at 0.5 L/min from 8 min (outside its US labelling).
    alerts = app.runner.current.result.alerts
    assert alerts and alerts[0].key == "sevoflurane_low_flow"
    assert "from 8.0 min to the end" in app.warnings.value
    assert "Sevoflurane at a fresh gas flow below 1 L/min" in app.warnings.value
    # Oxygen falls at minimal flow with air as carrier: FIO2 alert with its start time.
    cell(app, 1, "o2_l_min").value = "0.12"
    cell(app, 1, "air_l_min").value = "0.3"
    fio2 = [a for a in app.runner.current.result.alerts if a.key == "fio2_low"]
    assert fio2
    assert f"{fio2[0].start_min:.1f}" in app.warnings.value
    assert "Inspired O2 fraction falls below 0.30" in app.warnings.value
    # Listed in order of start time, as the engine gives them.
    assert app.warnings.value.index("from 8.0 min") < app.warnings.value.index(
        f"{fio2[0].start_min:.1f}")


def test_extension_points(app):
    from circlesim.app.plan_columns import Column

    clicked = []
    button = app.editor.add_action("Advise", lambda editor: clicked.append(editor.extras()))
    app.editor.add_column(Column("target", "Target", "× MAC", step_field=False),
                          after="dial_percent")
    keys = [c.key for c in app.editor.columns]
    assert keys.index("target") == keys.index("dial_percent") + 1
    cell(app, 1, "target").value = "1.0"
    assert app.runner.error is None  # extra columns are not step settings
    button.click()
    assert clicked == [[{"target": ""}, {"target": "1.0"}, {"target": ""}]]
    app.editor.set_cell(1, "dial_percent", 3.0)
    assert app.runner.current.scenario.plan.steps[1].dial_percent == 3.0
