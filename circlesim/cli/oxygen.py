"""``circlesim oxygen``: lowest safe fresh-gas O2 fraction table, and the flow × O2 map as HTML."""

from __future__ import annotations

import argparse
from dataclasses import replace
from pathlib import Path

import numpy as np
import tomli_w

from circlesim.base.validation import InputError
from circlesim.cli.common import caution_banner, output_path
from circlesim.oxygen.course import course_of_result
from circlesim.oxygen.flow_map import oxygen_map
from circlesim.oxygen.minimum import safe_fraction_table
from circlesim.oxygen.setup import Setup, check_threshold, minimum_fgf_l_min
from circlesim.reports.oxygen import describe_setup, setup_toml, write_oxygen_report
from circlesim.scenario import load_scenario

DEFAULT_FLOWS = "0.25,0.5,0.75,1,1.5,2,3,4"


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "oxygen", help="lowest safe fresh-gas O2 fraction against flow, and the flow x O2 map",
        description="For a patient (from --weight/--height/--age/--sex or a scenario file), "
                    "print the lowest O2 fraction of the fresh gas that keeps the inspired O2 "
                    "fraction at or above the threshold, for each total fresh gas flow, and "
                    "write an HTML report with the flow x O2 maps. With a scenario file its "
                    "plan is also run and its oxygen course and warnings shown.")
    p.add_argument("scenario", type=Path, nargs="?", default=None,
                   help="scenario TOML file (patient, circuit and plan); optional")
    p.add_argument("--weight", type=float, default=None, help="weight, kg (default 70)")
    p.add_argument("--height", type=float, default=None, help="height, cm (default 175)")
    p.add_argument("--age", type=float, default=None, help="age, years (default 40)")
    p.add_argument("--sex", choices=("female", "male"), default=None)
    p.add_argument("--vo2", type=float, default=None,
                   help="O2 consumption, mL/min STPD (default: Brody's rule x 0.85)")
    p.add_argument("--threshold", type=float, default=None,
                   help="lowest acceptable FIO2, 0.21-1 (default 0.30 or the scenario's)")
    p.add_argument("--flows", type=str, default=DEFAULT_FLOWS,
                   help=f"comma-separated total fresh gas flows, L/min (default {DEFAULT_FLOWS})")
    p.add_argument("--carrier", choices=("air", "n2o", "both"), default="both",
                   help="carrier gas mixed with O2 (default both)")
    p.add_argument("--leak", type=float, default=None, help="circuit leak, mL/min")
    p.add_argument("--sample-lost", type=float, default=None,
                   help="side-stream sample gas not returned to the circuit, mL/min")
    p.add_argument("--vent-exhaled-share", type=float, default=None,
                   help="share of vented gas taken from exhaled gas before the absorbent, 0-1 "
                        "(default 1)")
    p.add_argument("--duration", type=float, default=120.0,
                   help="length of the plan behind the 'during the plan' columns, min")
    p.add_argument("--initial-min", type=float, default=10.0,
                   help="initial high-flow period of that plan, min")
    p.add_argument("--initial-fgf", type=float, default=4.0,
                   help="flow of the initial period, L/min")
    p.add_argument("--steady-only", action="store_true",
                   help="skip the engine runs (plan columns and minutes-below maps)")
    p.add_argument("--html", type=Path, default=None,
                   help="report path (default out/oxygen_map.html; an existing file is never "
                        "replaced unless --overwrite is given, a free name is chosen instead)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing report")
    p.set_defaults(handler=run)


def _parse_flows(text: str) -> list[float]:
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise InputError(f"--flows must be comma-separated flows in L/min; got {text!r}."
                         ) from None


def build_setup(args: argparse.Namespace):
    """The set-up, threshold and (optional) scenario from the command-line arguments."""
    scenario = load_scenario(args.scenario) if args.scenario is not None else None
    setup = Setup.from_scenario(scenario) if scenario is not None else Setup()
    patient_changes = {k: v for k, v in (("weight_kg", args.weight), ("height_cm", args.height),
                                         ("age_years", args.age), ("sex", args.sex),
                                         ("vo2_ml_min", args.vo2)) if v is not None}
    if patient_changes:
        setup = replace(setup, patient=replace(setup.patient, **patient_changes))
    circuit_changes = {}
    if args.leak is not None:
        circuit_changes["leak_ml_min"] = args.leak
    if args.sample_lost is not None:
        circuit_changes.update(sample_ml_min=args.sample_lost,
                               sample_returned=args.sample_lost == 0.0)
    if args.vent_exhaled_share is not None:
        circuit_changes["vent_exhaled_share"] = args.vent_exhaled_share
    if circuit_changes:
        setup = replace(setup, circuit=replace(setup.circuit, **circuit_changes))
    threshold = args.threshold
    if threshold is None:
        threshold = scenario.report.fio2_threshold if scenario is not None else 0.30
    return setup, check_threshold(threshold, "--threshold"), scenario


def run(args: argparse.Namespace) -> int:
    setup, threshold, scenario = build_setup(args)
    flows = _parse_flows(args.flows)
    carriers = ("air", "n2o") if args.carrier == "both" else (args.carrier,)
    plan_kwargs = {"duration_min": args.duration, "initial_min": args.initial_min,
                   "initial_fgf_l_min": args.initial_fgf}
    table = safe_fraction_table(setup, flows, fio2_threshold=threshold, carriers=carriers,
                                duration_min=None if args.steady_only else args.duration,
                                initial_min=args.initial_min,
                                initial_fgf_l_min=args.initial_fgf)
    print(format_table(setup, table, threshold, carriers, args))
    courses, labels = [], []
    if scenario is not None:
        result = scenario.simulate(output_interval_min=0.5, fio2_threshold=threshold)
        course = course_of_result(result, fio2_threshold=threshold)
        courses, labels = [course], [scenario.title or scenario.plan.name]
        print(format_course(course, labels[0]))
    grid = np.linspace(min(flows), max(flows), 16) if len(flows) > 1 else flows
    maps = [oxygen_map(setup, grid, fio2_threshold=threshold, carrier=c,
                       with_plan=not args.steady_only, **plan_kwargs) for c in carriers]
    path = output_path(args.html, Path("out") / "oxygen_map.html", args.overwrite)
    inputs = (tomli_w.dumps(scenario.to_dict()) if scenario is not None else setup_toml(setup))
    written = write_oxygen_report(path, setup, table, maps, fio2_threshold=threshold,
                                  courses=courses, course_labels=labels, inputs_toml=inputs,
                                  overwrite=args.overwrite)
    print(f"\nReport with the flow x O2 map written to {written}")
    print("\n" + caution_banner())
    return 0


def _cell(value: float, digits: int = 1) -> str:
    return "not reachable" if value != value else f"{value:.{digits}f}"


def format_table(setup: Setup, table, threshold: float, carriers, args) -> str:
    """Terminal text: set-up and the lowest safe fraction table."""
    lines = ["== Oxygen at minimal flow ==", *describe_setup(setup), "",
             f"Lowest fresh-gas O2 that keeps FIO2 >= {threshold:.2f}:"]
    header = ["FGF L/min", "steady O2 %"]
    for c in carriers:
        name = "air" if c == "air" else "N2O"
        header += [f"O2+{name} L/min"]
        if f"{c}_plan_o2_pct" in table:
            header += [f"plan O2 % ({name})"]
    lines.append("  ".join(f"{h:>16}" for h in header))
    for _, row in table.iterrows():
        cells = [f"{row['fgf_l_min']:.2f}", _cell(row["steady_o2_pct"])]
        for c in carriers:
            o2 = row[f"{c}_o2_l_min"]
            cells.append("-" if o2 != o2 else f"{o2:.2f}+{row[f'{c}_carrier_l_min']:.2f}")
            if f"{c}_plan_o2_pct" in table:
                cells.append(_cell(row[f"{c}_plan_o2_pct"]))
        lines.append("  ".join(f"{x:>16}" for x in cells))
    lines.append("")
    lines.append("steady O2 %: exact mass balance once the body's N2 and N2O stores are full "
                 "(the same for both carriers).")
    if f"{carriers[0]}_plan_o2_pct" in table:
        lines.append(f"plan O2 %: lowest fraction keeping FIO2 up for the whole of a "
                     f"{args.duration:g}-min plan ({args.initial_min:g} min at "
                     f"{args.initial_fgf:g} L/min first), from the engine.")
    lines.append(f"Below {minimum_fgf_l_min(setup):.3f} L/min the fresh gas does not replace the "
                 "O2 uptake, leak and lost sample gas, and the bag empties.")
    return "\n".join(lines)


def format_course(course, label: str) -> str:
    """Terminal text for the scenario's oxygen course and its warnings."""
    r = course.result
    lines = ["", f"== Plan: {label} ==",
             f"Lowest FIO2 {course.lowest_fio2:.3f}; {course.minutes_below:.1f} min below "
             f"{course.fio2_threshold:.2f}; steady state of the last make-up "
             f"{float(course.final_steady.inspired_o2):.3f}."]
    lines.append("   time min   FIO2    FETO2   FIN2 %   FIN2O %")
    for t in (5.0, 10.0, 30.0, 60.0, 120.0, 240.0):
        if t <= r.time_min[-1]:
            i = int(abs(r.time_min - t).argmin())
            lines.append(f"   {t:8.0f}   {r.inspired[i, 0]:.3f}   {r.end_tidal[i, 0]:.3f}   "
                         f"{100 * r.inspired[i, r.gas_index('nitrogen')]:6.1f}   "
                         f"{100 * r.inspired[i, r.gas_index('nitrous_oxide')]:6.1f}")
    if r.alerts:
        lines.append("Warnings:")
        lines.extend(f" - {a}" for a in r.alerts)
    else:
        lines.append("Warnings: none raised by the alert rules.")
    return "\n".join(lines)

