"""``circlesim population``: the command, its report and its bad-input messages."""

import socket
from pathlib import Path

import pytest

from circlesim.cli import main

pytest.importorskip("plotly")

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
FLOW = str(SCENARIOS / "flow_reduction_sevoflurane.toml")
DRAW_OVER = str(SCENARIOS / "draw_over_inside_circle.toml")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_population_command_writes_report_and_table(tmp_path, capsys):
    report = tmp_path / "population.html"
    csv = tmp_path / "outcomes.csv"
    rc = main(["population", FLOW, DRAW_OVER, "--patients", "12", "--seed", "4",
               "--workers", "1", "--report", str(report), "--csv", str(csv), "--by", "5,10"])
    out = capsys.readouterr()
    assert rc == 0, out.err
    assert "12 virtual patients, seed 4" in out.out
    assert "P(target by 10 min)" in out.out
    assert "CAUTION" in out.out
    assert "population" in out.err  # the progress bar
    html = report.read_text()
    for words in ("Caution.", "Virtual patients", "Probabilities", "Curves over the population",
                  "Outcome distributions", "flow_reduction_sevoflurane",
                  "draw_over_inside_circle", "Esper et al., Anesth Analg 2015", "plotly"):
        assert words in html
    lines = csv.read_text().splitlines()
    assert len(lines) == 1 + 2 * 12


def test_existing_report_is_kept(tmp_path, capsys):
    report = tmp_path / "population.html"
    report.write_text("mine")
    rc = main(["population", FLOW, "--patients", "3", "--seed", "1", "--workers", "1",
               "--report", str(report)])
    assert rc == 0
    assert report.read_text() == "mine"
    assert (tmp_path / "population-1.html").exists()
    assert "population-1.html" in capsys.readouterr().out


@pytest.mark.parametrize("args, words", [
    (["--patients", "0"], "--patients must be a whole number from 1 to 1000000; got 0"),
    (["--patients", "-3"], "--patients must be a whole number from 1 to 1000000; got -3"),
    (["--scheduler", "localhost"], "scheduler must be a Dask scheduler address"),
    (["--by", "five"], "--by must be comma-separated minutes"),
])
def test_bad_input_is_a_clear_error(args, words, capsys):
    rc = main(["population", FLOW, "--no-report", "--workers", "1", *args])
    assert rc == 2
    assert words in capsys.readouterr().err


def test_unreachable_scheduler_stops_unless_fallback_asked(capsys):
    address = f"tcp://127.0.0.1:{_free_port()}"
    rc = main(["population", FLOW, "--patients", "3", "--no-report", "--scheduler", address])
    assert rc == 2
    assert f"the Dask scheduler at {address} could not be reached" in capsys.readouterr().err
    rc = main(["population", FLOW, "--patients", "3", "--seed", "2", "--no-report",
               "--scheduler", address, "--fallback-local", "--workers", "1"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "Running on local processes instead" in out
    assert "computed on this process" in out
