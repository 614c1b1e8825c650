"""`circlesim check`, `fit` and `calibrate` on the invented example records: what they print
and write, and that bad input leaves nothing half-written."""

import os
import shutil
from pathlib import Path

import pandas as pd
import pytest

import circlesim as cs
from circlesim.cli import main
from circlesim.domain.physiology import load_profile

CASES = Path(__file__).resolve().parents[1] / "scenarios" / "cases"
EXAMPLE = CASES / "invented_isoflurane_nitrous_oxide.toml"


@pytest.fixture
def here(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    return tmp_path


def test_check_prints_measures_and_writes_csv_and_report(here, capsys):
    assert main(["check", str(EXAMPLE)]) == 0
    out = capsys.readouterr().out
    assert "MDPE %" in out and "end-tidal isoflurane" in out and "not a medical device" in out
    table = pd.read_csv(here / "out" / "invented_isoflurane_nitrous_oxide-check.csv")
    assert set(table.columns) == {"time_min", "series", "measured_pct", "predicted_pct",
                                  "performance_error_pct"}
    assert "end_tidal_nitrous_oxide_pct" in set(table["series"])
    html = (here / "out" / "invented_isoflurane_nitrous_oxide-check.html").read_text()
    assert "Varvel" in html and "not a medical device" in html


def test_fit_until_writes_a_scenario_the_planner_and_run_open(here, capsys):
    assert main(["fit", str(EXAMPLE), "--until", "20", "--draws", "60"]) == 0
    out = capsys.readouterr().out
    assert "Forecast after 20 min" in out and "90 % interval" in out
    fitted = here / "out" / "invented_isoflurane_nitrous_oxide-fitted.toml"
    scenario = cs.load_scenario(fitted)
    assert scenario.fit is not None and "first 20 min" in scenario.fit.source
    # the record is found again from the fitted scenario's folder
    assert (fitted.parent / scenario.fit.record).resolve() == EXAMPLE.resolve()
    assert main(["run", str(fitted), "--csv", str(here / "run.csv")]) == 0
    assert main(["advise", str(fitted), "--no-report", "--no-pareto",
                 "--out", str(here / "advised")]) in (0, 1)
    from circlesim.app import PlannerApp

    app = PlannerApp(cs.load_scenario(fitted), output_folder=here / "saved")
    assert app.runner.current.scenario.fit is not None


def test_calibrate_writes_a_profile_a_scenario_can_choose(here, capsys):
    assert main(["calibrate", str(CASES / "invented_cohort"), "--name", "invented cohort",
                 "--workers", "1", "--no-report"]) == 0
    out = capsys.readouterr().out
    assert "Leave-one-case-out" in out and "opt-in" in out
    profile = load_profile(here / "out" / "invented-cohort.toml")
    assert profile.name == "invented cohort" and len(profile.calibrated_on) == 6
    # a scenario chooses it by file name, relative to the scenario file
    scenario = here / "with_profile.toml"
    text = (Path(__file__).resolve().parents[1] / "scenarios" /
            "flow_reduction_sevoflurane.toml").read_text()
    scenario.write_text('profile = "out/invented-cohort.toml"\n' + text)
    assert main(["run", str(scenario), "--csv", str(here / "p.csv")]) == 0
    assert "invented cohort" in capsys.readouterr().out


def test_bad_record_writes_nothing(here, capsys):
    bad = here / "bad"
    bad.mkdir()
    shutil.copy(EXAMPLE, bad / EXAMPLE.name)
    csv = (CASES / EXAMPLE.name.replace(".toml", ".csv")).read_text().splitlines()
    csv[5] = csv[5].replace(",", ",x", 1)
    (bad / EXAMPLE.name.replace(".toml", ".csv")).write_text("\n".join(csv) + "\n")
    for command in (["check"], ["fit"]):
        assert main([*command, str(bad / EXAMPLE.name)]) == 2
        err = capsys.readouterr().err
        assert "row 6" in err and "is not a number" in err and "Traceback" not in err
    assert not (here / "out").exists()


def test_calibrate_on_a_folder_without_records(here, capsys):
    empty = here / "empty"
    empty.mkdir()
    assert main(["calibrate", str(empty), "--name", "x"]) == 2
    assert "holds no case records" in capsys.readouterr().err
    assert not (here / "out").exists()


def test_outputs_are_never_replaced_without_asking(here, capsys):
    assert main(["check", str(EXAMPLE), "--no-report"]) == 0
    first = here / "out" / "invented_isoflurane_nitrous_oxide-check.csv"
    first.write_text("precious\n")
    assert main(["check", str(EXAMPLE), "--no-report"]) == 0
    assert first.read_text() == "precious\n"
    assert (here / "out" / "invented_isoflurane_nitrous_oxide-check-1.csv").exists()
    assert os.listdir(here / "out")
