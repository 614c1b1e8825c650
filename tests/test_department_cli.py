"""``circlesim review``: the command on the shipped invented sample, its report, its tables, the
Dask path and its bad-input messages."""

import warnings
from pathlib import Path

import pytest

from circlesim.cli import main
from circlesim.department.review import review_folder
from circlesim.department.rule import load_rule

pytest.importorskip("plotly")

ROOT = Path(__file__).resolve().parents[1]
DEPT = ROOT / "scenarios" / "department"
CASES = str(DEPT / "cases_invented")
RULE = str(DEPT / "rules" / "minimal_flow_after_wash_in.toml")
PRICES = str(DEPT / "prices_invented.toml")


def test_review_command_prints_tables_and_writes_report_and_csv(tmp_path, capsys):
    report, csv = tmp_path / "review.html", tmp_path / "review.csv"
    rc = main(["review", CASES, "--rule", RULE, "--prices", PRICES, "--draws", "2",
               "--workers", "1", "--report", str(report), "--csv", str(csv)])
    out = capsys.readouterr()
    assert rc == 0, out.err
    for words in ("CAUTION", "not a medical device", "INVENTED DATA", "agent saving mL",
                  "CO2-eq GWP100 saving kg", "Totals", "invented_broken_01",
                  "is not a number", "Records not reviewed"):
        assert words in out.out, words
    assert "cases" in out.err  # the progress bar
    html = report.read_text()
    for words in ("Caution.", "not a medical device", "INVENTED DATA",
                  "Summary for the meeting", "risked low FIO2 or a dry bag",
                  "Distribution of savings", "Totals", "Every case", "Records not reviewed",
                  "Method", "min_fresh_o2_fraction", "plotly"):
        assert words in html, words
    # the flagged cases come first in the report's case table and the CSV
    lines = csv.read_text().splitlines()
    assert lines[0].startswith("case,agent")
    assert len(lines) == 1 + 6 + 1  # six reviewed, one broken record listed
    totals = (tmp_path / "review-totals.csv").read_text()
    assert "CO2-eq GWP20, kg: saving" in totals and "CO2-eq GWP100, kg: saving" in totals


def test_existing_report_is_kept(tmp_path, capsys):
    report = tmp_path / "review.html"
    report.write_text("mine")
    rc = main(["review", CASES, "--rule", RULE, "--draws", "0", "--workers", "1",
               "--report", str(report)])
    assert rc == 0
    assert report.read_text() == "mine"
    assert "review-1.html" in capsys.readouterr().out


@pytest.mark.parametrize(("args", "words"), [
    (["--rule", "nothing.toml"], "rule file nothing.toml does not exist"),
    (["--draws", "-1"], "--draws must be a whole number from 0 to 500; got -1"),
    (["--prices", "nothing.toml"], "prices file nothing.toml does not exist"),
    (["--scheduler", "localhost"], "scheduler must be a Dask scheduler address"),
])
def test_bad_input_is_a_clear_error(args, words, capsys):
    options = {"--rule": RULE, **dict(zip(args[::2], args[1::2], strict=True))}
    argv = ["review", CASES, "--no-report", "--workers", "1", "--draws", "0"]
    for key, value in options.items():
        argv += [key, value]
    rc = main(argv)
    err = capsys.readouterr().err
    assert rc == 2
    assert words in err
    assert "Traceback" not in err


def test_empty_folder_and_bad_rule_file(tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    assert main(["review", str(tmp_path / "empty"), "--rule", RULE, "--no-report"]) == 2
    assert "holds no case records" in capsys.readouterr().err
    bad = tmp_path / "bad.toml"
    bad.write_text('[[steps]]\no2_l_min = -1\n')
    assert main(["review", CASES, "--rule", str(bad), "--no-report"]) == 2
    err = capsys.readouterr().err
    assert "bad.toml" in err and "o2_l_min must be a number from 0 to 15 L/min; got -1" in err


def test_review_on_a_dask_cluster_gives_the_local_numbers(tmp_path):
    from distributed import LocalCluster

    rule = load_rule(RULE)
    local = review_folder(CASES, rule, draws=0, workers=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cluster = LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                               protocol="tcp://", host="127.0.0.1", dashboard_address=None)
    try:
        done = []
        remote = review_folder(CASES, rule, draws=0, scheduler=cluster.scheduler_address,
                               progress=done.append)
    finally:
        cluster.close()
    assert remote.where.startswith("Dask cluster at tcp://127.0.0.1:")
    assert len(done) == len(local.reviews)
    for a, b in zip(local.reviews, remote.reviews, strict=True):
        assert a.saving["agent_ml"] == b.saving["agent_ml"]
