"""``circlesim population SCENARIOS... --patients 1000``: plans over a virtual population.

Draws the virtual patients once (``--seed`` repeats a draw), runs every scenario's plan over
the same patients — on local processes, or on a Dask cluster with ``--scheduler`` — with a
progress bar, prints the probabilities table and writes an HTML report with the median and
5–95 % bands of the curves, the probabilities and the outcome distributions.
"""

from __future__ import annotations

import argparse
import warnings
from pathlib import Path

from circlesim.base.validation import InputError
from circlesim.cli.common import (
    add_parallel_options,
    add_report_options,
    caution_banner,
    output_path,
)
from circlesim.outcomes.comparison import find_scenario_files
from circlesim.outcomes.emissions import DEFAULT_GWP_HORIZON
from circlesim.population.result import probability_table, save_outcomes
from circlesim.population.run import compare_populations
from circlesim.population.virtual_patients import (
    check_patient_count,
    load_population_spec,
    sample_patients,
)
from circlesim.scenario import load_scenario


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "population", help="run plans over a population of virtual patients",
        description="Draw virtual patients from stated distributions, run every scenario's "
                    "plan over the same patients and report the median and 5-95 %% bands of "
                    "the curves, the probability of reaching the end-tidal target and of FIO2 "
                    "falling below the threshold, and the agent used and CO2-equivalent. "
                    "Arguments may be files, folders (every *.toml inside) or quoted glob "
                    "patterns.")
    p.add_argument("scenarios", nargs="+", help="scenario TOML files, folders or patterns")
    p.add_argument("--patients", type=int, default=1000, help="number of virtual patients "
                                                              "(default 1000)")
    p.add_argument("--seed", type=int, default=None,
                   help="seed of the draw (default: a fresh one, printed so it can be repeated)")
    p.add_argument("--population", type=Path, default=None,
                   help="TOML file with the population's distributions (default: adults, see "
                        "docs/population.md)")
    add_parallel_options(p)
    add_report_options(p, "out/population.html",
                       "also write every patient's characteristics and outcomes as CSV")
    p.add_argument("--interval", type=float, default=0.5, help="output interval, min "
                                                               "(default 0.5)")
    p.add_argument("--by", default="5,10,20,30",
                   help="comma-separated times (min) for the probability of reaching the "
                        "end-tidal target (default 5,10,20,30)")
    p.add_argument("--target-basis", choices=("total", "agent"), default="total",
                   help="whether the end-tidal target counts N2O with the agent (total, the "
                        "default) or the agent alone")
    p.add_argument("--gwp-horizon", type=int, default=DEFAULT_GWP_HORIZON,
                   help=f"GWP time horizon in years, 20 or 100 (default {DEFAULT_GWP_HORIZON})")
    p.set_defaults(handler=run)


def _times(text: str) -> tuple[float, ...]:
    try:
        times = tuple(float(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise InputError(f"--by must be comma-separated minutes; got {text!r}.") from None
    if not times or any(t < 0 for t in times):
        raise InputError(f"--by must list one or more times of at least 0 min; got {text!r}.")
    return times


def run(args: argparse.Namespace) -> int:
    n = check_patient_count(args.patients, "--patients")
    by = _times(args.by)
    files = find_scenario_files(args.scenarios)
    scenarios = [load_scenario(f) for f in files]
    spec = load_population_spec(args.population) if args.population else None
    people = sample_patients(n, spec, args.seed)
    from tqdm import tqdm

    chunk = 250
    total = len(scenarios) * -(-n // chunk)
    with tqdm(total=total, desc="population", unit="chunk") as bar, \
            warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", RuntimeWarning)
        results = compare_populations(
            scenarios, people, labels=[f.stem for f in files],
            output_interval_min=args.interval, gwp_horizon=args.gwp_horizon,
            target_basis=args.target_basis,
            scheduler=args.scheduler, workers=args.workers,
            fallback_to_local=args.fallback_local, chunk_size=chunk, progress=bar.update)
    for w in caught:
        print(f"warning: {w.message}")
    table = probability_table(results, by)
    print(f"{n} virtual patients, seed {people.seed}; computed on {results[0].where}.")
    shown = ["plan", *[c for c in table.columns if c.startswith("P(")],
             "time to target, min: median"]
    print(table[shown].to_string(index=False, float_format=lambda v: f"{v:.3g}"))
    if not args.no_report:
        try:
            from circlesim.reports.population import write_population_report
        except ImportError as exc:
            raise InputError(f"the HTML report needs plotly ({exc}); install the app extra "
                             "(pip install 'circlesim[app]') or use --no-report.") from None

        path = output_path(args.report, Path("out") / "population.html", args.overwrite)
        written = write_population_report(path, results, by_min=by, overwrite=args.overwrite)
        print(f"\nReport written to {written}")
    if args.csv is not None:
        path = output_path(args.csv, args.csv, args.overwrite)
        written = save_outcomes(results, path, overwrite=args.overwrite)
        print(f"Outcomes per patient written to {written}")
    print()
    print(caution_banner())
    return 0
