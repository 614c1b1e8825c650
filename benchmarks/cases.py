"""Speed of the measured-case tools, as ratios against reference runs in the same process.

Usage::

    .venv/bin/python benchmarks/cases.py           # full sizes (a few minutes)
    .venv/bin/python benchmarks/cases.py --quick   # small sizes, to check that it runs
    .venv/bin/python benchmarks/cases.py --dask    # also calibrate on a local Dask cluster

(a) Checking a 4-hour case recorded every 10 s (five measured series, 7,200 values): the
    wall time of :func:`circlesim.cases.check.check_case`, beside one run of the same plan by
    ``solve_ivp`` LSODA at rtol 1e-6 (the reference).
(b) Fitting that case (six parameters, MAP with Laplace intervals): the wall time, and the same
    as a multiple of one compiled single run of the plan.
(c) Calibrating a cohort profile over many 2-hour cases recorded every minute, on local
    processes (and on a Dask LocalCluster with ``--dask``): the wall time, and per case as a
    multiple of one compiled single run.

Goals (measured-cases issue): (a) under 1 s; (b) under 10 s on 2 cores; (c) 50 cases under
2 min. Nothing here is asserted: tests/test_benchmarks.py only checks that the script runs.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

import circlesim as cs
from circlesim.cases.check import check_case
from circlesim.cases.cohort import calibrate
from circlesim.cases.fit import fit_case
from circlesim.cases.record import Monitor
from circlesim.cases.synthetic import synthetic_case
from circlesim.domain.physiology import Factors

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def _scenario(duration_min: float) -> cs.Scenario:
    demo = cs.load_scenario(SCENARIOS / "flow_reduction_sevoflurane.toml")
    return replace(demo, plan=replace(demo.plan, duration_min=duration_min))


def _timed(fn) -> tuple[float, object]:
    start = time.perf_counter()
    out = fn()
    return time.perf_counter() - start, out


def bench_check_and_fit(duration_min: float, interval_min: float) -> list[tuple]:
    scenario = _scenario(duration_min)
    truth = Factors(cardiac_output=1.2, vo2=0.85, frc=0.9, leak_ml_min=30.0)
    record, _ = synthetic_case(scenario, truth, interval_min=interval_min,
                               monitor=Monitor(8.0), seed=1)
    check_case(record)  # compile and warm up
    t_check, _ = _timed(lambda: check_case(record))
    t_ref, _ = _timed(lambda: scenario.simulate(method="LSODA", rtol=1e-6))
    t_single, _ = _timed(lambda: scenario.simulate())
    t_fit, fit = _timed(lambda: fit_case(record))
    n = record.count()
    hours = duration_min / 60.0
    return [
        (f"(a) check, {hours:g} h case, {n} values", t_check, "s", t_ref / t_check,
         "× faster than one solve_ivp LSODA run"),
        ("(a) reference: one solve_ivp LSODA rtol 1e-6 run", t_ref, "s", 1.0, ""),
        (f"(b) fit, 6 parameters, {fit.evaluations} batch evaluations", t_fit, "s",
         t_fit / t_single, "× one compiled single run"),
    ]


def bench_calibrate(cases: int, scheduler=None) -> list[tuple]:
    scenario = _scenario(120.0)
    rng = np.random.default_rng(7)
    records = []
    for k in range(cases):
        patient = cs.Patient(weight_kg=float(rng.uniform(55, 100)),
                             height_cm=float(rng.uniform(155, 190)),
                             age_years=float(rng.uniform(25, 80)), sex=("female", "male")[k % 2])
        truth = Factors(cardiac_output=float(np.exp(rng.normal(0.1, 0.15))),
                        vo2=float(np.exp(rng.normal(-0.1, 0.1))))
        record, _ = synthetic_case(replace(scenario, patient=patient), truth, interval_min=1.0,
                                   seed=k, name=f"bench-{k}")
        records.append(record)
    t_single, _ = _timed(lambda: scenario.simulate())
    where = "Dask LocalCluster" if scheduler is not None else "local processes"
    t_cal, result = _timed(lambda: calibrate(records, "benchmark cohort", scheduler=scheduler))
    return [(f"(c) calibrate {cases} cases × 2 h on {result.where}", t_cal, "s",
             t_cal / cases / t_single, f"× one compiled single run per case ({where})")]


def format_table(rows: list[tuple]) -> str:
    lines = [f"{'what':<58} {'wall':>10}   {'ratio':>9}  ratio of"]
    for what, value, unit, ratio, of in rows:
        lines.append(f"{what:<58} {value:>8.3g} {unit:<2} {ratio:>9.3g}  {of}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes")
    parser.add_argument("--dask", action="store_true", help="also calibrate on Dask")
    args = parser.parse_args(argv)
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"circlesim measured-case benchmarks: {os.cpu_count()} cores, load average "
          f"{load:.1f} at start")
    rows = bench_check_and_fit(90.0 if args.quick else 240.0, 1.0 if args.quick else 1 / 6)
    rows += bench_calibrate(3 if args.quick else 50)
    if args.dask:
        from dask.distributed import Client, LocalCluster

        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True) as cluster, \
                Client(cluster) as client:
            rows += bench_calibrate(3 if args.quick else 50, scheduler=client)
    print(format_table(rows))
    if hasattr(os, "getloadavg"):
        print(f"load average at the end {os.getloadavg()[0]:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
