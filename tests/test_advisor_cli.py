"""``circlesim advise`` and ``circlesim emerge`` on the demo scenarios.

The advised plan the command writes is a scenario that ``circlesim run`` accepts, and a fresh
run of it keeps end-tidal agent within 5 % of the target (the issue's criterion) from the
time allowed on; the emergence command reports the awakening fraction of Katoh et al.,
Anesth Analg 1993;77:1012-7 (0.34 × MAC) by default.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from circlesim.cli import main
from circlesim.scenario import load_scenario

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def test_advise_writes_a_plan_that_meets_the_target(tmp_path, capsys):
    code = main(["advise", str(SCENARIOS / "flow_reduction_sevoflurane.toml"), "--within",
                 "8", "--duration", "60", "--no-pareto", "--no-report", "--out",
                 str(tmp_path)])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "Against a plain 4 L/min plan" in out and "CAUTION" in out
    written = tmp_path / "flow_reduction_sevoflurane-advised.toml"
    scenario = load_scenario(written)
    result = scenario.simulate()
    target = scenario.report.target_end_tidal_mac * result.mac_percent
    late = result.time_min >= 8.0
    assert np.all(np.abs(result.end_tidal_percent("agent")[late] / target - 1) <= 0.05)
    assert main(["run", str(written), "--csv", str(tmp_path / "run.csv")]) == 0


def test_advise_says_when_it_cannot(tmp_path, capsys):
    code = main(["advise", str(SCENARIOS / "flow_reduction_sevoflurane.toml"),
                 "--target-percent", "9", "--within", "10", "--duration", "30", "--no-pareto",
                 "--no-report", "--out", str(tmp_path)])
    out = capsys.readouterr().out
    assert code == 1
    assert "Cannot be met" in out and "above what the 8 % dial can give" in out
    assert (tmp_path / "flow_reduction_sevoflurane-advised.toml").exists()


def test_advise_bad_input_is_an_error(tmp_path, capsys):
    code = main(["advise", str(SCENARIOS / "flow_reduction_sevoflurane.toml"),
                 "--dial-step", "0.05", "--out", str(tmp_path)])
    assert code == 2
    assert "Constraints.dial_step_percent must be a number from 0.1 to 0.5 vol%" in (
        capsys.readouterr().err)


def test_advise_report(tmp_path):
    pytest.importorskip("plotly")
    code = main(["advise", str(SCENARIOS / "flow_reduction_sevoflurane.toml"), "--within",
                 "8", "--duration", "45", "--out", str(tmp_path)])
    assert code == 0
    html = (tmp_path / "flow_reduction_sevoflurane-advice.html").read_text(encoding="utf-8")
    assert "Time to target against agent used" in html and "Caution" in html


def test_run_prints_the_targets(tmp_path, capsys):
    assert main(["run", str(SCENARIOS / "target_hold_sevoflurane.toml"), "--csv",
                 str(tmp_path / "t.csv")]) == 0
    out = capsys.readouterr().out
    assert "End-tidal targets" in out and "1.00 MAC" in out
    header = (tmp_path / "t.csv").read_text(encoding="utf-8").splitlines()[0]
    assert "dial_sevoflurane_pct" in header and "target_end_tidal_sevoflurane_pct" in header


def test_emerge(tmp_path, capsys):
    code = main(["emerge", str(SCENARIOS / "target_hold_sevoflurane.toml"), "--fgf", "6",
                 "--curves", "--case-lengths", "30,60", "--csv", str(tmp_path / "e.csv")])
    out = capsys.readouterr().out
    assert code == 0
    assert "falls below 0.34 MAC" in out and "Decrement times" in out
    assert (tmp_path / "e.csv").exists()


def test_emerge_bad_case_lengths(tmp_path, capsys):
    code = main(["emerge", str(SCENARIOS / "flow_reduction_sevoflurane.toml"), "--curves",
                 "--case-lengths", "30,x", "--csv", str(tmp_path / "e.csv")])
    assert code == 2
    assert "--case-lengths must be comma-separated minutes" in capsys.readouterr().err
