"""``circlesim check CASE.toml``: predictive performance of the model on a recorded case.

Runs the model on the record's settings, prints Varvel's measures (MDPE, MDAPE, divergence,
wobble) per measured series, and writes every sample as CSV and an HTML report with the
measured points on the predicted curves.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from circlesim.base.files import write_text_atomic
from circlesim.cases.check import check_case
from circlesim.cases.record import load_case
from circlesim.cli.cases_common import MEASURES_HEADER, MEASURES_LEGEND, format_rows
from circlesim.cli.common import (
    add_report_options,
    caution_banner,
    output_path,
    report_module,
)


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "check", help="check the model against a recorded case (predictive performance)",
        description="Run the model on a case record's settings and compare the prediction with "
                    "what the gas monitor measured: MDPE, MDAPE, divergence and wobble per "
                    "series (Varvel et al. 1992), a CSV of every sample and an HTML report. "
                    "See docs/case-records.md for the record format.")
    p.add_argument("case", type=Path, help="case record TOML file")
    add_report_options(p, "out/<case>-check.html",
                       "every sample as CSV: time, series, measured, predicted, error (default "
                       "out/<case>-check.csv)")
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    record = load_case(args.case)
    check = check_case(record)
    print(f"== {record.name}: {record.scenario.title or record.plan.name} ==")
    provenance = record.provenance or "provenance not stated"
    print(f"Source: {record.source or 'not stated'} ({provenance})")
    print(f"Model: {check.model}; {record.count()} measured values.")
    print(format_rows(MEASURES_HEADER, check.table()))
    print(MEASURES_LEGEND)
    if check.result.alerts:
        print("Warnings on the predicted course:")
        for alert in check.result.alerts:
            print(f" - {alert}")
    stem = Path(record.name).stem
    csv = output_path(args.csv, Path("out") / f"{stem}-check.csv", args.overwrite)
    written = write_text_atomic(csv, check.frame().to_csv(index=False, float_format="%.6g"),
                                overwrite=args.overwrite)
    print(f"\nSamples written to {written}")
    if not args.no_report:
        write_case_report = report_module("case").write_case_report
        path = output_path(args.report, Path("out") / f"{stem}-check.html", args.overwrite)
        print(f"Report written to {write_case_report(path, check, overwrite=args.overwrite)}")
    print()
    print(caution_banner())
    return 0
