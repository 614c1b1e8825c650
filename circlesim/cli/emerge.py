"""``circlesim emerge SCENARIO.toml``: predicted emergence after the scenario's plan.

Runs the scenario, turns the vaporizer off with a chosen fresh gas flow of O2 or air, and
prints when end-tidal agent and the brain fall below the awakening fraction of the
age-adjusted MAC, and the 50/80/90 % decrement times. With ``--curves`` it also prints the
decrement times against case length for the scenario's patient and agent. Writes the washout
as CSV.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from circlesim.advisor.emergence import (
    AWAKENING_MAC_FRACTION,
    DECREMENTS,
    decrement_curves,
    emergence,
)
from circlesim.base.validation import InputError
from circlesim.cli.common import caution_banner, output_path
from circlesim.scenario import load_scenario


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "emerge", help="predict emergence after a scenario's plan",
        description="Run a scenario, turn the vaporizer off with a fresh gas flow of O2 or "
                    "air, and predict when end-tidal agent and the brain fall below the "
                    "awakening fraction of the age-adjusted MAC (default "
                    f"{float(AWAKENING_MAC_FRACTION):g}: {AWAKENING_MAC_FRACTION.source}).")
    p.add_argument("scenario", type=Path, help="scenario TOML file")
    p.add_argument("--fgf", type=float, default=6.0, help="washout flow, L/min (default 6)")
    p.add_argument("--carrier", choices=("oxygen", "air"), default="oxygen",
                   help="washout fresh gas (default oxygen)")
    p.add_argument("--awake-fraction", type=float, default=float(AWAKENING_MAC_FRACTION),
                   help="awakening threshold, × age-adjusted MAC")
    p.add_argument("--max-minutes", type=float, default=120.0,
                   help="how long to follow the washout, min")
    p.add_argument("--curves", action="store_true",
                   help="also decrement times against case length (cases held at "
                        "--held-mac by the target controller)")
    p.add_argument("--case-lengths", type=str, default="15,30,60,120,240",
                   help="comma-separated case lengths for --curves, min")
    p.add_argument("--held-mac", type=float, default=1.0,
                   help="end-tidal level held in the cases for --curves, × MAC")
    p.add_argument("--maintenance-fgf", type=float, default=2.0,
                   help="flow during the cases for --curves, L/min")
    p.add_argument("--csv", type=Path, default=None,
                   help="washout CSV path (default out/<scenario>-emergence.csv)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing CSV file")
    p.set_defaults(handler=run)


def _lengths(text: str) -> tuple[float, ...]:
    try:
        return tuple(float(x) for x in text.split(","))
    except ValueError:
        raise InputError(f"--case-lengths must be comma-separated minutes; got {text!r}."
                         ) from None


def run(args: argparse.Namespace) -> int:
    scenario = load_scenario(args.scenario)
    result = scenario.simulate()
    em = emergence(result, fgf_l_min=args.fgf, carrier=args.carrier,
                   awakening_fraction=args.awake_fraction, max_minutes=args.max_minutes)
    lines = [f"== Emergence after {scenario.title or scenario.plan.name} ==", em.summary(), "",
             "Decrement times after the vaporizer is turned off (min):",
             "   decrement   end-tidal   brain"]
    for p in DECREMENTS:
        et, brain = em.decrement_min(p, "end_tidal"), em.decrement_min(p, "brain")
        lines.append(f"   {p:8g} %   {_fmt(et):>9}   {_fmt(brain):>5}")
    if args.curves:
        curves = decrement_curves(
            scenario.model_patient, scenario.model_circuit, scenario.vaporizer,
            absorber=scenario.absorber,
            held_mac=args.held_mac, case_lengths_min=_lengths(args.case_lengths),
            maintenance_fgf_l_min=args.maintenance_fgf, washout_fgf_l_min=args.fgf,
            carrier=args.carrier, awakening_fraction=args.awake_fraction,
            max_minutes=args.max_minutes)
        lines += ["", f"Against case length ({args.held_mac:g} MAC held at "
                      f"{args.maintenance_fgf:g} L/min; washout {args.fgf:g} L/min "
                      f"{args.carrier}), minutes:",
                  _short(curves.frame()).round(1).to_string(index=False)]
    if result.alerts:
        lines.append("Warnings during the plan:")
        lines.extend(f" - {a}" for a in result.alerts)
    lines += ["", caution_banner()]
    print("\n".join(lines))
    path = output_path(args.csv, Path("out") / f"{args.scenario.stem}-emergence.csv",
                       args.overwrite)
    print(f"\nWashout time series written to "
          f"{em.washout.to_csv(path, overwrite=args.overwrite)}")
    return 0


def _fmt(value: float | None) -> str:
    return "—" if value is None else f"{value:.1f}"


def _short(frame):
    """The decrement table with column names short enough for a terminal."""
    names = {"case_length_min": "case min", "end_tidal_to_awakening_min": "ET awake",
             "brain_to_awakening_min": "brain awake"}
    for col in frame.columns:
        if col.endswith("pct_decrement_min"):
            where, percent = col.split("_")[0], col.split("_")[-3]
            names[col] = f"{'ET' if where == 'end' else 'brain'} {percent.replace('pct', '')}%"
    return frame.rename(columns=names)
