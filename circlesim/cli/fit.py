"""``circlesim fit CASE.toml``: estimate the patient from a recorded case.

Prints each estimate with its 90 % interval (or "not identified by these data"), writes the
fitted patient as a scenario that ``run``, ``advise`` and the planner open, and an HTML report.
With ``--until N`` the fit uses the first N minutes only and the rest is forecast, with its
5–95 % band and the error measures on the held-out part beside those of the unfitted model.
"""

from __future__ import annotations

import argparse
import os
from dataclasses import replace
from pathlib import Path

import tomli_w

from circlesim.cases.check import check_case
from circlesim.cases.fit import fit_case
from circlesim.cases.forecast import forecast_case
from circlesim.cases.record import load_case
from circlesim.cli.cases_common import MEASURES_HEADER, format_rows
from circlesim.cli.common import caution_banner, output_path, report_module
from circlesim.scenario import save_scenario


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "fit", help="fit the patient to a recorded case; forecast the rest of it",
        description="Estimate cardiac output, alveolar ventilation, O2 consumption, FRC, "
                    "solubility and the circuit's leak from a case record (priors from the "
                    "population's distributions; MAP with Laplace intervals). Writes the fitted "
                    "patient as a scenario file. With --until, fit the first minutes and "
                    "forecast the rest with a band.")
    p.add_argument("case", type=Path, help="case record TOML file")
    p.add_argument("--until", type=float, default=None,
                   help="fit only the measurements up to this time (min) and forecast the rest")
    p.add_argument("--draws", type=int, default=200,
                   help="parameter draws for the forecast band (20-5000, default 200)")
    p.add_argument("--out", type=Path, default=None,
                   help="fitted scenario path (default out/<case>-fitted.toml; an existing file "
                        "is never replaced unless --overwrite is given)")
    p.add_argument("--report", type=Path, default=None,
                   help="HTML report path (default out/<case>-fit.html)")
    p.add_argument("--no-report", action="store_true", help="no HTML report")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    record = load_case(args.case)
    stem = Path(record.name).stem
    forecast = None
    if args.until is not None:
        forecast = forecast_case(record, args.until, draws=args.draws)
        fit = forecast.fit
    else:
        fit = fit_case(record)
    print(fit.summary())
    if fit.not_identified:
        print("Not identified by these data (the population's spread is kept): "
              + ", ".join(n.replace("_", " ") for n in fit.not_identified) + ".")
    if forecast is not None:
        print(f"\nForecast after {args.until:g} min ({forecast.percentiles[0]:g}–"
              f"{forecast.percentiles[1]:g} % band of the model's curve, "
              f"{forecast.effective_draws:.0f} effective draws):")
        print(format_rows(("series", "held-out", "MDPE % fitted", "MDAPE % fitted",
                           "MDPE % unfitted", "MDAPE % unfitted", "inside band %"),
                          forecast.table()))
    scenario = fit.scenario()
    path = output_path(args.out, Path("out") / f"{stem}-fitted.toml", args.overwrite)
    if record.path is not None:
        relative = os.path.relpath(record.path.resolve(), path.parent.resolve())
        scenario = replace(scenario, fit=replace(scenario.fit, record=relative))
    written = save_scenario(scenario, path, overwrite=args.overwrite)
    print(f"\nFitted patient written to {written} (open it with circlesim run, advise or "
          "the planner).")
    whole = check_case(record.with_scenario(scenario))
    print("Fitted patient on the whole record:")
    print(format_rows(MEASURES_HEADER, whole.table()))
    if not args.no_report:
        write_case_report = report_module("case").write_case_report
        report = output_path(args.report, Path("out") / f"{stem}-fit.html", args.overwrite)
        written = write_case_report(report, whole, forecast=forecast, fit=fit,
                                    inputs_toml=tomli_w.dumps(scenario.to_dict()),
                                    overwrite=args.overwrite)
        print(f"Report written to {written}")
    print()
    print(caution_banner())
    return 0
