"""``circlesim run SCENARIO.toml``: summary on the terminal and the time series as CSV."""

from __future__ import annotations

import argparse
from pathlib import Path

from circlesim.cli.common import caution_banner, output_path
from circlesim.outcomes.summary import summarise
from circlesim.scenario import load_scenario


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("run", help="run one scenario: print a summary and write a CSV",
                       description="Run a scenario file, print its summary (time to target "
                                   "end-tidal, end-tidal agent and FIO2 at chosen times, agent "
                                   "used, warnings) and write the time series as CSV.")
    p.add_argument("scenario", type=Path, help="scenario TOML file")
    p.add_argument("--csv", type=Path, default=None,
                   help="CSV path (default out/<scenario>.csv; an existing file is never "
                        "replaced unless --overwrite is given, a free name is chosen instead)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing CSV file")
    p.add_argument("--interval", type=float, default=0.1, help="output interval, min")
    p.add_argument("--times", type=str, default=None,
                   help="comma-separated report times in min (default from the scenario)")
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    scenario = load_scenario(args.scenario)
    result = scenario.simulate(output_interval_min=args.interval)
    times = scenario.report.report_times_min
    if args.times:
        try:
            times = tuple(float(x) for x in args.times.split(","))
        except ValueError:
            from circlesim.base.validation import InputError

            raise InputError(f"--times must be comma-separated minutes; got {args.times!r}."
                             ) from None
    summary = summarise(result, target_end_tidal_mac=scenario.report.target_end_tidal_mac,
                        report_times_min=times, fio2_threshold=scenario.report.fio2_threshold)
    print(format_summary(scenario, result, summary))
    path = output_path(args.csv, Path("out") / f"{args.scenario.stem}.csv", args.overwrite)
    written = result.to_csv(path, overwrite=args.overwrite)
    print(f"\nTime series written to {written}")
    return 0


def format_summary(scenario, result, s) -> str:
    """Terminal text for one run."""
    p = result.patient
    lines = [f"== {scenario.title or scenario.plan.name} =="]
    if scenario.question:
        lines.append(f"Question: {scenario.question}")
    lines.append(f"Patient: {p.weight_kg:g} kg, {p.height_cm:g} cm, {p.age_years:g} y, {p.sex}; "
                 f"VO2 used {s.vo2_ml_min:.0f} mL/min, cardiac output {p.cardiac_output:.1f} "
                 f"L/min, FRC {p.frc:.2f} L")
    lines.append(f"Model: {scenario.model_description}")
    lines.append(f"Agent: {s.agent} ({result.vaporizer.placement} the circle); age-adjusted "
                 f"MAC {s.mac_percent:.2f} %")
    if s.time_to_target_min is None:
        lines.append(f"End-tidal target {s.target_end_tidal_percent:.2f} % "
                     "is not reached during the plan.")
    else:
        lines.append(f"End-tidal target {s.target_end_tidal_percent:.2f} % reached at "
                     f"{s.time_to_target_min:.1f} min.")
    lines.append("   time min   end-tidal agent %   FIO2")
    for t in s.end_tidal_at:
        lines.append(f"   {t:8.1f}   {s.end_tidal_at[t]:17.2f}   {s.fio2_at[t]:.3f}")
    lines.append(f"Lowest FIO2 {s.lowest_fio2:.3f} at {s.lowest_fio2_time_min:.1f} min; "
                 f"{s.minutes_below_fio2_threshold:.1f} min below "
                 f"{scenario.report.fio2_threshold:.2f}.")
    lines.append(f"Liquid {s.agent}: {s.agent_delivered_ml:.1f} mL delivered "
                 f"({s.agent_delivered_g:.1f} g), {s.agent_vented_ml:.1f} mL vented, "
                 f"{s.agent_uptake_ml:.1f} mL taken up.")
    lines.append(f"MAC-hours: {s.mac_hours:.2f} (agent), {s.total_mac_hours:.2f} "
                 "(agent + N2O).")
    h = s.gwp_horizon_years
    agent_co2e = ("not available (no published GWP)" if s.agent_co2e_kg is None
                  else f"{s.agent_co2e_kg:.1f} kg")
    lines.append(f"CO2-equivalent (GWP{h}): {s.agent} {agent_co2e}, N2O "
                 f"{(s.n2o_co2e_kg or 0.0):.1f} kg ({s.n2o_used_l:.0f} L N2O).")
    canister = ""
    if s.canister is not None and s.canister.fresh_canister_min is not None:
        canister = (f"; at the end-of-plan rate a fresh canister would last about "
                    f"{s.canister.fresh_canister_min / 60.0:.1f} h (extrapolated)")
    lines.append(f"Absorbent used: {s.absorbent_used_percent:.0f} % of the canister "
                 f"({s.absorbent_used_g:.0f} g){canister}.")
    if result.control is not None:  # target mode: what the controller did
        lines.append("End-tidal targets (dial set by the target controller; its plan is in "
                     "the CSV's dial column):")
        lines.extend(f" - {t.message}" for t in result.control.targets)
    if result.alerts:
        lines.append("Warnings:")
        lines.extend(f" - {a}" for a in result.alerts)
    else:
        lines.append("Warnings: none raised by the alert rules.")
    lines.append("")
    lines.append(caution_banner())
    return "\n".join(lines)
