"""Speed of the plan advisor and the target controller, with ratios to one plain run.

Usage::

    .venv/bin/python benchmarks/advisor.py           # the 2-hour cases (about a minute)
    .venv/bin/python benchmarks/advisor.py --quick   # one case, to check that it runs

For each case the advisor is asked for a 2-hour plan (1 MAC within 8 min, held within 5 %,
least liquid agent, the trade-off curve included) and timed; the time is printed beside the
time of one :func:`circlesim.simulate` run of a 2-hour plan in the same process (the
reference), with the ratio, the number of model runs, the agent the advice uses and what it
saves against a plain 4 L/min plan holding the same target. The target controller is timed
on the same 2-hour target.

Goal (issue 6): the advisor answers within 10 s for a 2-hour plan on the CI machine (2 cores).
"""

from __future__ import annotations

import argparse
import statistics
import time

import circlesim as cs
from circlesim.advisor.advise import advise
from circlesim.advisor.inputs import Constraints, Targets
from circlesim.targets.predict import simulate_with_targets

CASES = (
    ("sevoflurane", 40, False),
    ("sevoflurane", 80, True),
    ("isoflurane", 60, False),
    ("desflurane", 40, False),
)


def reference_time(repeats: int = 20) -> float:
    """Median time (s) of one plain 2-hour simulate() run."""
    plan = cs.Plan([cs.Step(0, o2_l_min=2, air_l_min=2, dial_percent=6),
                    cs.Step(8, o2_l_min=0.3, air_l_min=0.2, dial_percent=3)], duration_min=120)
    patient = cs.Patient()
    cs.simulate(patient, cs.Circuit(), plan)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        cs.simulate(patient, cs.Circuit(), plan)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one case only")
    args = parser.parse_args(argv)
    cases = CASES[:1] if args.quick else CASES
    ref = reference_time()
    # warm the compiled code and the imports once, outside the timings
    advise(cs.Patient(), cs.Circuit(), cs.Vaporizer(), Targets(duration_min=20.0),
           Constraints(follow_labelling=False), pareto=False)
    print(f"reference: one 2-hour simulate() run {1e3 * ref:.1f} ms")
    header = ("case", "advisor s", "ratio", "runs", "feasible", "agent mL", "plain 4 L/min mL",
              "saved", "controller s")
    print(" | ".join(header))
    worst = 0.0
    for agent, age, labelling in cases:
        patient = cs.Patient(age_years=age)
        vaporizer = cs.Vaporizer(agent)
        targets = Targets(end_tidal_mac=1.0, reach_within_min=8.0, duration_min=120.0)
        start = time.perf_counter()
        a = advise(patient, cs.Circuit(), vaporizer, targets,
                   Constraints(follow_labelling=labelling))
        elapsed = time.perf_counter() - start
        worst = max(worst, elapsed)
        plan = cs.Plan([cs.Step(0, o2_l_min=0.25, air_l_min=0.25, target_mac=1.0)],
                       duration_min=120.0)
        start = time.perf_counter()
        simulate_with_targets(patient, cs.Circuit(), plan, vaporizer=vaporizer)
        controller = time.perf_counter() - start
        ref_ml = float(a.reference.agent_delivered_ml[-1])
        name = f"{agent} {age} y" + (" labelling" if labelling else "")
        print(f"{name} | {elapsed:.2f} | {elapsed / ref:.0f} | {a.evaluations} | "
              f"{a.feasible} | {a.agent_ml:.1f} | {ref_ml:.1f} | "
              f"{a.saved_percent:.0f} % | {controller:.2f}")
    print(f"slowest advice {worst:.2f} s (goal: under 10 s for a 2-hour plan)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
