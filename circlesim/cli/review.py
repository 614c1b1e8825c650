"""``circlesim review FOLDER --rule RULE.toml``: what a local flow rule would have saved and risked
over a folder of case records.

Reviews every record in the folder under the rule (the patient fitted from each record, the
measured end-tidal course held by the target controller), on local processes or a Dask cluster
with ``--scheduler``, with a progress bar; prints the per-case and total tables and a plain
summary, and writes an HTML report and, with ``--csv``, the tables as CSV. A broken record is
listed with its error and the others still run.
"""

from __future__ import annotations

import argparse
import warnings
from pathlib import Path

import pandas as pd

from circlesim.base.validation import InputError, Interval, check_whole_number
from circlesim.cli.common import (
    add_parallel_options,
    add_report_options,
    caution_banner,
    output_path,
)
from circlesim.department.review import review_folder
from circlesim.department.rule import load_rule
from circlesim.department.usage import load_prices


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "review", help="department review: what a local flow rule would have saved and risked",
        description="Review a folder of case records under a local flow rule: for each case "
                    "the patient is fitted to its record and the measured end-tidal course "
                    "is held at the recorded flows and at the rule's flows; prints agent, cost "
                    "and CO2-equivalent (GWP20 and GWP100) as recorded and under the rule with "
                    "5-95 %% intervals, the cases where the rule would have risked low FIO2 or "
                    "a dry bag, and totals per agent. See docs/department-review.md.")
    p.add_argument("folder", type=Path, help="folder of case records (NAME.toml + NAME.csv)")
    p.add_argument("--rule", type=Path, required=True, help="the flow rule (TOML)")
    p.add_argument("--prices", type=Path, default=None,
                   help="department prices per agent (TOML; default: each record's "
                        "[prices], if any)")
    p.add_argument("--draws", type=int, default=20,
                   help="patients drawn from each fit's uncertainty for the intervals "
                        "(default 20; 0: no intervals)")
    p.add_argument("--seed", type=int, default=0, help="seed of the draws (default 0)")
    p.add_argument("--every", type=float, default=5.0,
                   help="minutes between the end-tidal targets that hold the course "
                        "(default 5)")
    add_parallel_options(p)
    add_report_options(p, "out/department-review.html",
                       "also write the per-case table as CSV to this path (and the totals "
                       "to STEM-totals.csv beside it)")
    p.set_defaults(handler=run)


def _cell(value: object) -> str:
    if value is None or (isinstance(value, float) and value != value):
        return "n/a"
    if isinstance(value, float):
        return f"{value:.3g}" if abs(value) < 100 else f"{value:.0f}"
    return str(value)


def _interval(row: pd.Series, name: str) -> str:
    mid, lo, hi = (row.get(f"{name}: saving{s}") for s in ("", " 5 %", " 95 %"))
    if mid is None or (isinstance(mid, float) and mid != mid):
        return "n/a"
    return f"{_cell(mid)} [{_cell(lo)} to {_cell(hi)}]"


def run(args: argparse.Namespace) -> int:
    check_whole_number("--draws", args.draws, Interval(0, 500))
    rule = load_rule(args.rule)
    prices = load_prices(args.prices) if args.prices is not None else None
    print(caution_banner())
    print()
    from tqdm import tqdm

    from circlesim.cases.record import load_cases

    count = len(load_cases(args.folder)[0])  # raises for an empty folder
    with tqdm(total=count, desc="cases", unit="case") as bar, \
            warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", RuntimeWarning)
        review = review_folder(args.folder, rule, prices=prices, draws=args.draws,
                               seed=args.seed, every_min=args.every,
                               scheduler=args.scheduler, workers=args.workers,
                               fallback_to_local=args.fallback_local, progress=bar.update)
    for w in caught:
        print(f"warning: {w.message}")
    if review.invented:
        print("INVENTED DATA: these records were made by the model for a demonstration.\n")
    print(f"Rule '{rule.name}' ({rule.path}):")
    for line in rule.describe():
        print(f"  {line}")
    print()
    cur = f" ({review.currency})" if review.currency else ""
    table = review.case_table()
    if len(table):
        shown = pd.DataFrame({
            "case": table["case"], "agent": table["agent"], "patient": table["patient"],
            "agent saving mL [5-95 %]": [_interval(r, "agent, mL") for _, r in table.iterrows()],
            f"cost saving{cur}": [_interval(r, f"cost{cur}") for _, r in table.iterrows()],
            "CO2-eq GWP100 saving kg": [_interval(r, "CO2-eq GWP100, kg")
                                        for _, r in table.iterrows()],
            "lowest FIO2": [_cell(v) for v in table["lowest FIO2 under the rule"]],
            "risk under the rule": table["risk under the rule"]})
        print(shown.to_string(index=False))
        print()
    totals = review.totals_table()
    print("Totals (saving = recorded flows with the course held, minus the rule):")
    print(totals.T.to_string(header=False, float_format=lambda v: f"{v:.4g}",
                             na_rep="n/a"))
    print()
    for paragraph in review.summary():
        print(paragraph)
    if review.problems:
        print("\nRecords not reviewed:")
        for problem in review.problems:
            print(f"  {problem.name}: {problem.message}")
    print(f"\n{len(review.reviews)} case(s) on {review.where} in {review.seconds:.1f} s.")
    if not args.no_report:
        try:
            from circlesim.reports.department import write_department_report
        except ImportError as exc:
            raise InputError(f"the HTML report needs plotly ({exc}); install the app extra "
                             "(pip install 'circlesim[app]') or use --no-report.") from None

        path = output_path(args.report, Path("out") / "department-review.html",
                           args.overwrite)
        written = write_department_report(path, review, overwrite=args.overwrite)
        print(f"Report written to {written}")
    if args.csv is not None:
        path = output_path(args.csv, args.csv, args.overwrite)
        cases, totals_path = review.write_csv(path, overwrite=args.overwrite)
        print(f"Tables written to {cases} and {totals_path}")
    print()
    print(caution_banner())
    return 0
