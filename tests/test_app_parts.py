"""The planner's parts on their own: plan table, error wording, runner, warnings, outcomes."""

from __future__ import annotations

import pytest

import circlesim as cs
from circlesim.app.comparison import outcome_table
from circlesim.app.plan_columns import locate_error
from circlesim.app.plan_editor import PlanEditor
from circlesim.app.runner import Runner, output_interval_for
from circlesim.app.warnings_panel import alerts_html, error_html
from circlesim.scenario import Scenario

PLAN = cs.Plan((cs.Step(0, o2_l_min=2, air_l_min=4, dial_percent=5, note="wash-in"),
                cs.Step(8, o2_l_min=0.35, air_l_min=0.15, dial_percent=3.5, valve="closed"),
                cs.Step(40, inject_ml=1.5)), duration_min=90, name="test plan")


def test_editor_shows_and_reads_back_a_plan():
    editor = PlanEditor()
    editor.show(PLAN)
    assert editor.read() == PLAN
    assert editor.rows[1].cells["valve"].value == "closed"
    assert editor.rows[2].cells["inject_ml"].value == "1.5"
    assert editor.rows[0].cells["inject_ml"].value == ""  # blank: no injection


def test_editor_keeps_step_settings_without_a_column():
    step = cs.Step(0, o2_l_min=1, dial_percent=2, tidal_volume_ml=450)
    columns = tuple(c for c in PlanEditor().columns if c.key != "tidal_volume_ml")
    editor = PlanEditor(columns)
    editor.show(cs.Plan((step,), duration_min=30))
    assert editor.read().steps[0].tidal_volume_ml == 450


def test_editor_notifies_and_placeholders():
    editor = PlanEditor()
    editor.show(PLAN)
    calls = []
    editor.observe(lambda: calls.append(1))
    editor.rows[1].cells["dial_percent"].value = "3"
    assert calls == [1]
    editor.set_cell(1, "dial_percent", 2.5, notify=False)
    assert calls == [1]
    editor.set_placeholders({"tidal_volume_ml": "494"})
    assert editor.rows[0].cells["tidal_volume_ml"].placeholder == "494"
    assert editor.rows[0].cells["n2o_l_min"].placeholder == "0"
    assert editor.rows[1].cells["n2o_l_min"].placeholder == "keep"


@pytest.mark.parametrize(("message", "text", "row", "key"), [
    ("Plan.steps[1].dial_percent must be a number from 0 to 8 vol%; got 9.",
     "Step 2, Dial (vol%): must be a number from 0 to 8 vol%; got 9.", 1, "dial_percent"),
    ("Plan.steps[0] total fresh gas flow (O2 + air + N2O) must be a number from 0.1 to 20 "
     "L/min; got 0.", "Step 1: total fresh gas flow", 0, None),
    ("Patient.weight_kg must be a number from 2 to 250 kg; got -5.",
     "Patient.weight_kg must be", None, None),
])
def test_locate_error(message, text, row, key):
    got_text, got_row, got_key = locate_error(message)
    assert got_text.startswith(text)
    assert (got_row, got_key) == (row, key)


def test_output_interval_keeps_the_figure_light():
    assert output_interval_for(60) == 0.1
    assert output_interval_for(120) == 0.2
    assert output_interval_for(240) == 0.5
    assert output_interval_for(1440) == 2.5
    for minutes in (30, 120, 240, 600, 1440):
        assert minutes / output_interval_for(minutes) <= 600


def test_runner_keeps_last_good_prediction():
    runner = Runner()
    assert runner.run(Scenario(plan=PLAN))
    good = runner.current
    bad_plan = PLAN.with_steps([PLAN.steps[0], cs.Step(8, dial_percent=12.0)])
    assert not runner.run(Scenario(plan=bad_plan))
    assert runner.current is good
    assert "dial_percent must be a number from 0 to 8" in runner.error
    runner.keep_reference()
    assert runner.shown()[1] == ["reference plan", "current plan"]
    runner.clear_reference()
    assert runner.shown()[1] == [""]


def test_alerts_html_escapes_and_orders():
    result = Scenario(plan=PLAN).simulate()
    html = alerts_html(result.alerts)
    for alert in result.alerts:
        assert f"{alert.start_min:.1f}" in html
    assert "No alert rule fires" in alerts_html(())
    assert "&lt;b&gt;" in error_html("<b>bad</b>")
    assert error_html(None) == ""


def test_outcome_table_single_plan():
    runner = Runner()
    runner.run(Scenario(plan=PLAN))
    header, rows = outcome_table(runner.current)
    assert header == ["Outcome", "current plan"]
    labels = [r[0] for r in rows]
    assert labels[0].startswith("Time to end-tidal target (1 MAC =")
    assert "Lowest FIO2" in labels and "Liquid agent used" in labels


def test_figures_are_drawn_with_the_published_plotly_build(monkeypatch):
    import json
    from pathlib import Path

    import plotly.graph_objects as go
    import pytest

    from circlesim.app import plotly_bundle

    # Outside circlesim's server (JupyterLab, plain Voilà): plotly's own FigureWidget.
    monkeypatch.delenv(plotly_bundle.BUNDLE_ADDRESS_ENV, raising=False)
    assert plotly_bundle.figure_widget_class() is go.FigureWidget
    # The published file is the cartesian plotly.js build of the stated version, unpacked
    # from the compressed copy in the package.
    packed = Path(plotly_bundle.__file__).parent / "static" / "plotly-cartesian.min.js.gz"
    assert packed.stat().st_size < 600_000
    address = plotly_bundle.bundle_address()
    name = address.removeprefix("voila/static/").split("?")[0]
    build = plotly_bundle.bundle_directory() / name
    assert 1_000_000 < build.stat().st_size < 2_000_000
    header = build.read_text(encoding="utf-8")[:200]
    assert f"plotly.js (cartesian - minified) v{plotly_bundle.PLOTLY_JS_VERSION}" in header
    # Under the server: a FigureWidget whose front end runs the build from that address.
    monkeypatch.setenv(plotly_bundle.BUNDLE_ADDRESS_ENV, address)
    widget = plotly_bundle.figure_widget_class()(go.Figure(go.Scatter(x=[0, 1], y=[1, 2])))
    assert isinstance(widget, go.FigureWidget)
    assert json.dumps(address) in widget._esm and "__PLOTLY_ADDRESS__" not in widget._esm
    assert widget.data[0].y == (1, 2)
    # A trace the build cannot draw is refused by name, made with the figure or added later.
    with pytest.raises(ValueError, match="'scattergl'"):
        plotly_bundle.figure_widget_class()(go.Figure(go.Scattergl(x=[0, 1], y=[1, 2])))
    with pytest.raises(ValueError, match="'scatterpolar'"):
        widget.add_trace(go.Scatterpolar(r=[1, 2], theta=[0, 90]))
    widget.add_trace(go.Heatmap(z=[[1, 2], [3, 4]]))
    assert [t.type for t in widget.data] == ["scatter", "heatmap"]


def test_build_serves_plotly_of_the_same_major_version():
    from circlesim.app.plotly_bundle import PLOTLY_JS_VERSION, build_fits_plotly

    major = int(PLOTLY_JS_VERSION.split(".")[0])
    assert build_fits_plotly(PLOTLY_JS_VERSION)
    assert build_fits_plotly(f"{major}.99.0")
    assert not build_fits_plotly(f"{major - 1}.9.0")
    assert not build_fits_plotly(f"{major + 1}.0.0")
