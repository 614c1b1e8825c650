"""Loading plans into the planner (upload, examples) and saving from it (TOML, CSV, HTML)."""

from __future__ import annotations

import datetime as dt
import html
import tomllib

import pandas as pd
import pytest
from app_helpers import curves

import circlesim as cs
from circlesim.app import PlannerApp
from circlesim.app.export import export
from circlesim.base.cautions import CAUTION
from circlesim.scenario import plan_to_toml, scenario_from_toml

PLAN_ONLY = """
[plan]
name = "fixed 1 L/min"
duration_min = 90

[[plan.steps]]
time_min = 0
o2_l_min = 0.5
air_l_min = 0.5
dial_percent = 4
"""


@pytest.fixture
def app(tmp_path) -> PlannerApp:
    return PlannerApp(output_folder=tmp_path / "out")


def _upload(app: PlannerApp, name: str, data: bytes) -> None:
    app.loader.upload.value = ({"name": name, "type": "", "size": len(data),
                                "content": memoryview(data),
                                "last_modified": dt.datetime.now(dt.UTC)},)


def test_upload_plan_only_file_keeps_patient(app):
    patient = app.runner.current.scenario.patient
    _upload(app, "fixed.toml", PLAN_ONLY.encode())
    shown = app.runner.current.scenario
    assert app.runner.error is None
    assert shown.plan.name == "fixed 1 L/min" and shown.plan.duration_min == 90.0
    assert shown.patient == patient
    assert len(app.editor.rows) == 1 and app.editor.rows[0].cells["dial_percent"].value == "4"
    assert app.loader.upload.value == ()


def test_upload_scenario_replaces_everything(app, tmp_path):
    scenario = cs.Scenario(plan=cs.Plan((cs.Step(0, o2_l_min=1.0, dial_percent=1.0),),
                                        duration_min=30),
                           patient=cs.Patient(weight_kg=20, height_cm=115, age_years=6),
                           vaporizer=cs.Vaporizer("isoflurane"), title="child")
    import tomli_w

    _upload(app, "child.toml", tomli_w.dumps(scenario.to_dict()).encode())
    shown = app.runner.current.scenario
    assert shown.patient.weight_kg == 20 and shown.vaporizer.agent == "isoflurane"
    assert app.settings.field("weight_kg").value == 20.0
    assert app.settings.field("agent").value == "isoflurane"
    assert "child" in app.title.value


@pytest.mark.parametrize(("data", "wording"), [
    (b"[plan\nduration_min = 60", "is not valid TOML"),
    (b"[plan]\nduration_min = 60\n", "plan.steps must be a list of at least one step"),
    (b"[plan]\nduration_min = 60\n[[plan.steps]]\ntime_min = 0\no2_l_min = -2\n",
     "Step.o2_l_min must be a number from 0 to 15 L/min; got -2"),
    (b"[patient]\nweight_kg = 70\n", "the [plan] section is missing"),
    (b"\xff\xfe\x00bad", "is not UTF-8 text"),
])
def test_malformed_upload_shows_error_and_keeps_prediction(app, data, wording):
    good = app.runner.current
    curve = list(curves(app.figure)[2].y)
    _upload(app, "bad.toml", data)
    assert app.runner.current is good
    assert wording in app.error.value
    assert "bad.toml" in app.error.value
    assert "Traceback" not in app.error.value
    assert list(curves(app.figure)[2].y) == curve
    assert app.runner.current.scenario.plan == good.scenario.plan


def test_examples_list_loads_a_scenario(app):
    options = dict((label, path) for label, path in app.loader.examples.options if path)
    assert "closed circuit isoflurane injection" in options
    app.loader.examples.value = options["closed circuit isoflurane injection"]
    shown = app.runner.current.scenario
    assert shown.vaporizer.agent == "isoflurane"
    assert any(s.inject_ml > 0 for s in shown.plan.steps)
    assert app.loader.examples.value == ""


def test_save_plan_and_scenario_round_trip(app, tmp_path):
    app.editor.rows[1].cells["o2_l_min"].value = "0.4"
    plan_path = app.export.save("plan")
    assert plan_path.parent == tmp_path / "out"
    assert scenario_from_toml(plan_path.read_text()).plan == app.runner.current.scenario.plan
    assert tomllib.loads(plan_path.read_text()).keys() == {"plan"}
    scen_path = app.export.save("scenario")
    loaded = cs.load_scenario(scen_path)
    assert loaded.plan == app.runner.current.scenario.plan
    assert loaded.patient == app.runner.current.scenario.patient
    # A second save never replaces the first file.
    again = app.export.save("plan")
    assert again != plan_path and again.name.endswith("-1.toml")
    assert plan_path.read_text() == plan_to_toml(app.runner.current.scenario.plan)
    app.export.overwrite.value = True
    assert app.export.save("plan") == plan_path


def test_save_prediction_csv(app):
    path = app.export.save("csv")
    frame = pd.read_csv(path)
    result = app.runner.current.result
    assert frame["time_min"].iloc[-1] == pytest.approx(result.time_min[-1])
    assert frame["time_min"].iloc[1] == pytest.approx(0.1)
    et = frame["end_tidal_sevoflurane_pct"].to_numpy()
    shown = result.end_tidal_percent("agent")
    # The export is the same prediction sampled every 0.1 min.
    assert et[-1] == pytest.approx(shown[-1], rel=1e-5)
    assert "Saved Prediction (CSV)" in app.export.status.value


def test_save_html_snapshot_is_self_contained(app):
    app.keep_reference()
    app.editor.rows[1].cells["o2_l_min"].value = "0.5"
    path = app.export.save("html")
    text = path.read_text()
    assert html.escape(CAUTION) in text
    assert "reference plan" in text and "difference" in text
    assert "Sevoflurane at a fresh gas flow below 1 L/min" in text
    # plotly.js is embedded (about 4 MB), nothing is fetched from the network.
    assert len(text) > 1_000_000 and "Plotly.newPlot" in text
    assert "<script src=" not in text


def test_save_reports_unwritable_folder(app, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    app.export.folder.value = str(blocker / "sub")
    assert app.export.save("plan") is None
    assert "Not saved" in app.export.status.value


def test_export_function_names_the_file(app, tmp_path):
    path = export("plan", app.runner.current, None, tmp_path, "My plan: 0.5 L/min!")
    assert path.name == "my-plan-0-5-l-min.toml"
