"""Speed of the department review, as ratios against one plain prediction in the same run.

Usage::

    .venv/bin/python benchmarks/department.py           # one invented 90-min case, 20 draws
    .venv/bin/python benchmarks/department.py --quick   # 45-min case, 2 draws

The reference is one :func:`circlesim.simulate` of the record's own dial plan (the cost of
predicting the case once). The review of a case costs one fit (:func:`fit_case`), the three
runs of the fitted patient and two target-controller runs per drawn patient; the table gives
each as a multiple of the reference, and the wall time per case. Goal: a review of 60 cases
with 20 draws in under 15 min on a 2-core machine (about 30 s of one core per case).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

import circlesim as cs
from circlesim.cases.fit import fit_case
from circlesim.cases.synthetic import synthetic_case
from circlesim.department.counterfactual import review_case
from circlesim.department.rule import rule_from_dict
from circlesim.domain.physiology import Factors
from circlesim.scenario import Scenario

RULE = {"name": "benchmark rule (invented)", "min_fresh_o2_fraction": 0.5,
        "steps": [{"o2_l_min": 2.0, "air_l_min": 2.0, "until_end_tidal_fraction": 0.8,
                   "at_most_min": 15}, {"o2_l_min": 0.3, "air_l_min": 0.2}]}


def _seconds(fn, repeats: int) -> float:
    fn()  # warm-up (compilation)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args(argv)
    duration, draws, repeats = (45.0, 2, 1) if args.quick else (90.0, 20, 3)
    scenario = Scenario(plan=cs.Plan([cs.Step(0, o2_l_min=1.5, air_l_min=1.5, target_mac=1.0)],
                                     duration_min=duration), patient=cs.Patient(),
                        vaporizer=cs.Vaporizer("sevoflurane"))
    record, _ = synthetic_case(scenario, Factors(cardiac_output=1.2), seed=1, name="bench")
    rule = rule_from_dict(RULE)
    sc = record.scenario
    reference = _seconds(lambda: cs.simulate(sc.patient, sc.circuit, sc.plan,
                                             vaporizer=sc.vaporizer), 5 * repeats)
    fit = _seconds(lambda: fit_case(record), repeats)
    one = _seconds(lambda: review_case(record, rule, draws=0), repeats)
    full = _seconds(lambda: review_case(record, rule, draws=draws), repeats)
    rows = [(f"reference: one simulate of the {duration:g}-min record", reference),
            ("fit of the patient", fit),
            ("review of the case, no draws", one),
            (f"review of the case, {draws} draws", full)]
    print(f"{'what':<50} {'seconds':>9} {'x reference':>12}")
    for label, seconds in rows:
        print(f"{label:<50} {seconds:>9.3f} {seconds / reference:>12.0f}")
    print(f"{'60 cases at this length on one core, min':<50} {60 * full / 60.0:>9.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
