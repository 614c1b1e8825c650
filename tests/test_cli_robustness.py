"""Bad input on the command line gets a clear error, never a traceback or a silent default.

Three cases found by trying the CLI: a folder where a scenario file is expected, a scenario
without a [patient] section (refused: circlesim never runs a default adult in place of the
patient a file forgot), and report times outside the plan (refused, naming the value and the
plan's length).
"""

from pathlib import Path

import pytest

from circlesim.cli import main

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
PLAN = """
[plan]
duration_min = 30
[[plan.steps]]
time_min = 0
o2_l_min = 1.0
air_l_min = 1.0
dial_percent = 2.0
"""
PATIENT = """
[patient]
weight_kg = 70
height_cm = 175
age_years = 50
sex = "male"
"""


def _error(capsys) -> str:
    captured = capsys.readouterr()
    assert "Traceback" not in captured.err + captured.out
    return captured.err


@pytest.mark.parametrize("command", [["run"], ["emerge"], ["advise"]])
def test_folder_instead_of_scenario(command, tmp_path, capsys):
    assert main([*command, str(tmp_path)]) == 2
    err = _error(capsys)
    assert str(tmp_path) in err and "is a folder" in err


def test_scenario_without_patient_is_refused(tmp_path, capsys):
    path = tmp_path / "no_patient.toml"
    path.write_text(PLAN)
    assert main(["run", str(path), "--csv", str(tmp_path / "x.csv")]) == 2
    err = _error(capsys)
    assert "no_patient.toml" in err and "[patient] section is missing" in err
    assert not (tmp_path / "x.csv").exists()


def test_report_times_after_the_plan_in_the_file(tmp_path, capsys):
    path = tmp_path / "late.toml"
    path.write_text(PATIENT + PLAN + "[report]\nreport_times_min = [5, 45]\n")
    assert main(["run", str(path), "--csv", str(tmp_path / "x.csv")]) == 2
    err = _error(capsys)
    assert "report_times_min[1] = 45 min" in err and "30 min" in err


def test_report_times_after_the_plan_on_the_command_line(tmp_path, capsys):
    path = tmp_path / "ok.toml"
    path.write_text(PATIENT + PLAN)
    assert main(["run", str(path), "--times", "5,90", "--csv", str(tmp_path / "x.csv")]) == 2
    err = _error(capsys)
    assert "90 min" in err and "30 min" in err
    assert not (tmp_path / "x.csv").exists()


def test_default_report_times_fit_a_short_plan(tmp_path, capsys):
    # Without report times in the file, the defaults (5, 10, 30, 60 min) that lie within the
    # plan are used: nothing the user gave is dropped.
    path = tmp_path / "ok.toml"
    path.write_text(PATIENT + PLAN)
    assert main(["run", str(path), "--csv", str(tmp_path / "x.csv")]) == 0
    out = capsys.readouterr().out
    assert "    30.0" in out and "    60.0" not in out


def test_every_shipped_scenario_names_its_patient():
    for path in SCENARIOS.glob("*.toml"):
        assert "[patient]" in path.read_text(encoding="utf-8"), path.name
