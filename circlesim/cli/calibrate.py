"""``circlesim calibrate FOLDER --name NAME``: a cohort profile from many case records.

Fits every record in the folder (local processes or a Dask scheduler, with a progress bar),
calibrates the cohort's typical factors and their spread, writes them as a named profile
(TOML) that scenarios can choose with ``profile = "FILE"``, and reports the leave-one-case-out
errors beside the textbook default model's. The profile is opt-in: nothing changes for
scenarios that do not name it.
"""

from __future__ import annotations

import argparse
import re
from pathlib import Path

import tomli_w

from circlesim.base.files import write_text_atomic
from circlesim.cases.cohort import calibrate
from circlesim.cases.record import load_cases
from circlesim.cli.cases_common import format_rows
from circlesim.cli.common import caution_banner, output_path, report_module


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "calibrate", help="calibrate a cohort profile over a folder of case records",
        description="Fit every case record in a folder, calibrate the cohort's typical "
                    "physiology factors and spread, write them as a named profile (TOML) and "
                    "report leave-one-case-out errors against the textbook default model.")
    p.add_argument("folder", type=Path, help="folder of case records")
    p.add_argument("--name", required=True, help="the profile's name")
    p.add_argument("--description", default="", help="one line on the cohort")
    p.add_argument("--out", type=Path, default=None,
                   help="profile path (default out/<name>.toml; never replaced unless "
                        "--overwrite)")
    p.add_argument("--report", type=Path, default=None,
                   help="HTML report path (default out/<name>-calibration.html)")
    p.add_argument("--no-report", action="store_true", help="no HTML report")
    p.add_argument("--no-check", action="store_true",
                   help="skip the leave-one-case-out check")
    p.add_argument("--scheduler", default=None,
                   help="address of a Dask scheduler to fit on instead of local processes")
    p.add_argument("--workers", type=int, default=None,
                   help="local worker processes (default one per core)")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    records, problems = load_cases(args.folder)
    for path, error in problems:
        print(f"left out: {path.name}: {error}")
    from tqdm import tqdm

    with tqdm(total=len(records), desc="fitting cases", unit="case") as bar:
        result = calibrate(records, args.name, description=args.description,
                           leave_one_out=not args.no_check, scheduler=args.scheduler,
                           workers=args.workers, progress=bar.update)
    for name, error in result.problems:
        print(f"left out: {name}: {error}")
    profile = result.profile
    print(f"{profile.label()}; fits ran on {result.where}.")
    rows = [[k.replace("_", " "), v, profile.spread_log.get(k)]
            for k, v in profile.factors.to_dict().items()]
    print(format_rows(("factor", "median", "spread (SD of log)"), rows))
    if not args.no_check:
        print("\nLeave-one-case-out (median over cases):")
        print(format_rows(("series", "cases", "MDPE % default", "MDAPE % default",
                           "MDPE % profile", "MDAPE % profile"), result.pooled_table()))
    safe = re.sub(r"[^A-Za-z0-9_.-]+", "-", args.name).strip("-") or "profile"
    path = output_path(args.out, Path("out") / f"{safe}.toml", args.overwrite)
    written = write_text_atomic(path, tomli_w.dumps(profile.to_dict()), overwrite=args.overwrite)
    print(f"\nProfile written to {written}; a scenario uses it with profile = \"{written.name}\" "
          "(path relative to the scenario file).")
    if not args.no_report:
        calibration_sections = report_module("case").calibration_sections
        write_report = report_module("html").write_report
        report = output_path(args.report, Path("out") / f"{safe}-calibration.html",
                             args.overwrite)
        written = write_report(report, f"circlesim cohort calibration: {profile.name}",
                               calibration_sections(result),
                               inputs_toml=tomli_w.dumps(profile.to_dict()),
                               overwrite=args.overwrite)
        print(f"Report written to {written}")
    print()
    print(caution_banner())
    return 0
