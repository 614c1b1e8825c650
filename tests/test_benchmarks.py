"""The benchmark script runs from a clean clone (small sizes; no timing is asserted here —
speed goals are reported by ``make bench``, not tested)."""

import importlib.util
from pathlib import Path

BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "run.py"


def test_benchmark_script_prints_its_table(capsys):
    spec = importlib.util.spec_from_file_location("circlesim_benchmarks", BENCH)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert module.four_hour_plan().steps[-1].time_min < 240.0
    assert len(module.four_hour_plan().steps) == 12
    assert module.main(["--quick", "--patients", "16"]) == 0
    out = capsys.readouterr().out
    for row in ("(a) simulate, 4 h / 12 steps", "(a) bare compiled integration",
                "(a) solve_ivp Radau rtol 1e-10 (reference)",
                "(a) max rel. difference ET & FIO2 vs reference",
                "(b) 16 patients x 4 h, this process", "(b) per patient, faster of the two",
                "(b) local processes give the same numbers"):
        assert row in out, row
    accuracy = [line for line in out.splitlines() if "max rel. difference" in line]
    assert all(line.rstrip().endswith("yes") for line in accuracy)  # within 1e-3 of Radau


def test_case_benchmark_script_runs(capsys):
    spec = importlib.util.spec_from_file_location(
        "circlesim_case_benchmarks", BENCH.parent / "cases.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert module.main(["--quick"]) == 0
    out = capsys.readouterr().out
    for row in ("(a) check, 1.5 h case", "(b) fit, 6 parameters", "(c) calibrate 3 cases"):
        assert row in out, row


def test_department_benchmark_prints_its_ratios(capsys):
    path = BENCH.parent / "department.py"
    spec = importlib.util.spec_from_file_location("circlesim_department_benchmark", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert module.main(["--quick"]) == 0
    out = capsys.readouterr().out
    for row in ("reference: one simulate", "fit of the patient", "review of the case, 2 draws",
                "60 cases at this length on one core"):
        assert row in out, row
