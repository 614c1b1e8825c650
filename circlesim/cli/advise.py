"""``circlesim advise SCENARIO.toml``: a flow and dial plan that meets an end-tidal target.

Takes the patient, breathing system and vaporizer from a scenario file, the target from the
options (default: the scenario's report target, within 10 min, for the plan's length), and
prints the recommended plan, its checks, what it saves against a plain high-flow plan and the
trade-off between time to target and agent used. Writes the advised plan as a scenario file
(run it with ``circlesim run``) and, unless ``--no-report``, an HTML report.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from circlesim.advisor.advise import advise
from circlesim.advisor.answer import Advice
from circlesim.advisor.inputs import OBJECTIVES, Constraints, Targets
from circlesim.cli.common import caution_banner, output_path
from circlesim.outcomes.emissions import DEFAULT_GWP_HORIZON
from circlesim.scenario import Scenario, load_scenario, save_scenario


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "advise", help="recommend a flow and dial plan for an end-tidal target",
        description="Find a piecewise-constant plan of fresh gas flow and vaporizer dial that "
                    "reaches an end-tidal target in the time allowed and holds it within 5 %%, "
                    "within your limits, with the least liquid agent (or CO2-equivalent, or "
                    "time to target). Patient, breathing system and vaporizer come from the "
                    "scenario file.")
    p.add_argument("scenario", type=Path, help="scenario TOML file")
    target = p.add_mutually_exclusive_group()
    target.add_argument("--target-mac", type=float, default=None,
                        help="end-tidal target, × age-adjusted MAC (default: the scenario's "
                             "report target)")
    target.add_argument("--target-percent", type=float, default=None,
                        help="end-tidal target, vol%%")
    p.add_argument("--within", type=float, default=10.0,
                   help="minutes allowed to reach the target (default 10)")
    p.add_argument("--duration", type=float, default=None,
                   help="plan length, min (default: the scenario plan's)")
    p.add_argument("--objective", choices=OBJECTIVES, default="agent",
                   help="least liquid agent (default), least CO2-equivalent, or soonest at "
                        "the target")
    p.add_argument("--min-fio2", type=float, default=None,
                   help="lowest inspired O2 fraction (default: the scenario's threshold)")
    p.add_argument("--min-fgf", type=float, default=0.5, help="lowest total flow, L/min")
    p.add_argument("--max-fgf", type=float, default=8.0, help="highest total flow, L/min")
    p.add_argument("--max-dial", type=float, default=None,
                   help="largest dial, vol%% (default: the vaporizer's)")
    p.add_argument("--changes-per-hour", type=int, default=6,
                   help="most changes of the knobs in any hour (default 6)")
    p.add_argument("--dial-step", type=float, default=0.1,
                   help="dial resolution, vol%% (0.1-0.5)")
    p.add_argument("--ignore-labelling", action="store_true",
                   help="do not keep to the agent's labelling (e.g. sevoflurane below 1 L/min)")
    p.add_argument("--reference-flow", type=float, default=4.0,
                   help="flow of the plain plan the advice is compared with, L/min")
    p.add_argument("--gwp-horizon", type=int, default=DEFAULT_GWP_HORIZON, choices=(20, 100),
                   help="GWP horizon for CO2-equivalents, years")
    p.add_argument("--no-pareto", action="store_true", help="skip the time/agent trade-off")
    p.add_argument("--out", type=Path, default=Path("out"),
                   help="folder for the advised scenario and the report (default out/)")
    p.add_argument("--no-report", action="store_true", help="do not write the HTML report")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    scenario = load_scenario(args.scenario)
    mac = args.target_mac
    if mac is None and args.target_percent is None:
        mac = scenario.report.target_end_tidal_mac
    targets = Targets(end_tidal_mac=mac, end_tidal_percent=args.target_percent,
                      reach_within_min=args.within,
                      duration_min=args.duration or scenario.plan.duration_min)
    constraints = Constraints(
        min_fio2=scenario.report.fio2_threshold if args.min_fio2 is None else args.min_fio2,
        min_fgf_l_min=args.min_fgf, max_fgf_l_min=args.max_fgf,
        max_dial_percent=args.max_dial, max_changes_per_hour=args.changes_per_hour,
        dial_step_percent=args.dial_step, follow_labelling=not args.ignore_labelling)
    advice = advise(scenario.model_patient, scenario.model_circuit, scenario.vaporizer, targets,
                    constraints, args.objective, absorber=scenario.absorber,
                    pareto=not args.no_pareto, reference_fgf_l_min=args.reference_flow,
                    gwp_horizon_years=args.gwp_horizon)
    print(format_advice(advice))
    advised = Scenario(plan=advice.plan, patient=scenario.patient, circuit=scenario.circuit,
                       absorber=scenario.absorber, vaporizer=scenario.vaporizer,
                       report=scenario.report.within(advice.plan.duration_min),
                       title=f"{scenario.title or args.scenario.stem} (advised plan)",
                       question=advice.explanation.splitlines()[0])
    toml_path = output_path(None, args.out / f"{args.scenario.stem}-advised.toml",
                            args.overwrite)
    print(f"\nAdvised plan written to {save_scenario(advised, toml_path, overwrite=args.overwrite)}"
          " (run it with: circlesim run FILE)")
    if not args.no_report:
        report = output_path(None, args.out / f"{args.scenario.stem}-advice.html",
                             args.overwrite)
        print(f"Report written to {write_advice_report(advice, report, args.overwrite)}")
    return 0 if advice.feasible else 1


def format_advice(advice: Advice) -> str:
    """Terminal text for an advice."""
    lines = ["== Plan advice ==", advice.explanation, "", "Plan:"]
    lines.append(advice.table().drop(columns=["time_min"]).to_string(index=False))
    lines.append("")
    lines.append("Checks on a re-run of the plan: " + ", ".join(
        f"{k.replace('_', ' ')} {'ok' if v else 'NOT MET'}" for k, v in advice.checks.items()))
    if advice.pareto:
        lines.append("")
        lines.append("Time to target against agent used (least agent for each):")
        lines.append("   to target min   agent mL   wash-in L/min   for min   then L/min")
        for p in advice.pareto:
            lines.append(f"   {p.time_to_target_min:13.1f}   {p.agent_ml:8.1f}   "
                         f"{p.washin_fgf_l_min:13g}   {p.washin_min:7.1f}   "
                         f"{p.maintenance_fgf_l_min:10g}")
    if advice.result.alerts:
        lines.append("Warnings:")
        lines.extend(f" - {a}" for a in advice.result.alerts)
    lines.append(f"(advice computed in {advice.elapsed_s:.1f} s, {advice.evaluations} model "
                 "runs)")
    lines.append("")
    lines.append(caution_banner())
    return "\n".join(lines)


def write_advice_report(advice: Advice, path: Path, overwrite: bool) -> Path:
    """HTML report: the advised plan beside the plain plan, the trade-off and the checks."""
    from circlesim.reports.advice import pareto_figure, target_figure
    from circlesim.reports.html import Section, write_report
    from circlesim.reports.timeline import timeline_figure
    from circlesim.scenario import plan_to_toml

    ref_label = f"plain {advice.reference_fgf_l_min:g} L/min"
    sections = [
        Section("Advice", paragraphs=advice.explanation.splitlines(),
                warnings=list(advice.problems), tables=[advice.table()]),
        Section("Checks on a re-run of the plan",
                tables=[(["check", "met"], [[k.replace("_", " "), "yes" if v else "NO"]
                                             for k, v in advice.checks.items()])],
                warnings=[str(a) for a in advice.result.alerts]),
        Section("End-tidal agent and dial", figures=[target_figure(
            advice.result, advice.reference.control.target_series(advice.result.time_min))]),
        Section(f"Advised plan and the {ref_label} plan",
                figures=[timeline_figure([advice.result, advice.reference],
                                         ["advised", ref_label])]),
    ]
    if advice.pareto:
        sections.append(Section("Time to target against agent used",
                                figures=[pareto_figure(advice)]))
    return write_report(path, "circlesim plan advice", sections,
                        inputs_toml=plan_to_toml(advice.plan), overwrite=overwrite)
