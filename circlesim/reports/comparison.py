"""The HTML report of a comparison (front-end layer; needs the ``app`` extra for plotly).

One self-contained file: what was compared and for whom, the outcome table, the curves of all
plans on shared axes, the warnings of each plan, how each outcome was computed with its
sources, the standing caution, and every input as TOML so the comparison can be run again.
"""

from __future__ import annotations

import os
from pathlib import Path

from circlesim.base.units import molar_volume_l
from circlesim.outcomes.comparison import Comparison
from circlesim.reports.html import Section, write_report

__all__ = ["comparison_sections", "write_comparison_report"]


def _value(v: object) -> object:
    if v is None:
        return None
    if isinstance(v, float):
        return float(f"{v:.4g}")
    return v


def _outcome_table(comparison: Comparison) -> tuple[list[str], list[list[object]]]:
    """Outcomes as rows and plans as columns (easier to read than a very wide table)."""
    rows = comparison.rows()
    keys = [k for k in rows[0] if k != "plan"]
    header = ["outcome", *comparison.labels]
    return header, [[k, *(_value(r.get(k)) for r in rows)] for k in keys]


def _plans_table(comparison: Comparison) -> tuple[list[str], list[list[object]]]:
    header = ["plan", "title", "agent", "vaporizer", "duration, min", "steps", "file"]
    rows = []
    for p in comparison.plans:
        s = p.scenario
        rows.append([p.label, s.title or s.plan.name, s.vaporizer.agent,
                     f"{s.vaporizer.placement} the circle", s.plan.duration_min,
                     len(s.plan.steps), None if p.path is None else p.path.name])
    return header, rows


def _questions(comparison: Comparison) -> list[str]:
    return [f"{p.label}: {p.scenario.question or p.scenario.plan.description}"
            for p in comparison.plans if p.scenario.question or p.scenario.plan.description]


def _setup_section(comparison: Comparison) -> Section:
    first = comparison.plans[0].result
    patient, circuit = first.patient, first.circuit
    physiology = [[k, _value(v)] for k, v in patient.describe().items()]
    physiology.insert(0, ["age_years", patient.age_years])
    physiology.insert(1, ["sex", patient.sex])
    physiology.insert(2, ["height_cm", patient.height_cm])
    circuit_rows = [[k, getattr(circuit, k)] for k in (
        "volume_l", "bag_l", "valve", "leak_ml_min", "sample_ml_min", "sample_returned",
        "gas_temperature_c", "ambient_pressure_kpa")]
    return Section("Patient and breathing system (shared by every plan)",
                   paragraphs=["Defaults derived from body size follow the published rules "
                               "listed in docs/model.md; every value can be overridden in the "
                               "scenario file."],
                   tables=[(["patient", "value"], physiology),
                           (["circuit", "value"], circuit_rows)])


def _method_section(comparison: Comparison) -> Section:
    h = comparison.gwp_horizon_years
    paras = [
        "End-tidal target, time within ±10 % of it, overshoot and MAC-hours use the "
        "age-adjusted MAC of Mapleson (Br J Anaesth 1996;76:179-85); MAC-hours with N2O add "
        "the N2O MAC fraction (age-adjusted with the same relation, MAC40 104 %).",
        "Liquid agent = vapour delivered (mol) × molar mass / liquid density. Emissions count "
        "all agent and N2O delivered as emitted (what the patient took up is breathed out "
        "after the case), as Ryan & Nielsen (Anesth Analg 2010;111:92-8) do; CO2-equivalent = "
        f"mass × GWP{h}.",
        "Canister life is extrapolated: the CO2 reaching the absorbent at the end of each plan "
        "is assumed to continue unchanged until the used fraction reaches the point at which "
        "inspired CO2 starts to appear. It is not a prediction for a different plan.",
        f"Gas volumes are counted in moles; the flowmeters' litres are at the circuit "
        f"temperature ({molar_volume_l(comparison.plans[0].result.circuit.gas_temperature_c):.2f}"
        " L/mol for this circuit).",
    ]
    seen = set()
    for p in comparison.plans:
        s = p.summary
        for g in (s.agent_gwp, s.n2o_gwp):
            if g is not None and g.gas not in seen:
                seen.add(g.gas)
                paras.append(str(g))
        if s.agent + ":density" not in seen:
            seen.add(s.agent + ":density")
            paras.append(f"Liquid density of {s.agent}: {s.liquid_density_g_ml:g} g/mL "
                         f"({s.liquid_density_source}).")
    warnings = []
    if any(p.summary.agent_co2e_kg is None for p in comparison.plans):
        warnings.append(f"CO2-equivalent not available for an agent without a published "
                        f"GWP{h} in circlesim (shown as —).")
    priced = [p for p in comparison.plans if p.prices is not None and p.prices.any]
    if priced:
        for p in priced:
            note = f" — {p.prices.note}" if p.prices.note else ""
            paras.append(f"Prices for {p.label}: user-set{note}.")
    else:
        paras.append("No prices were given, so no cost is shown (circlesim ships no prices).")
    return Section("How the outcomes are computed", paragraphs=paras, warnings=warnings)


def comparison_sections(comparison: Comparison) -> list[Section]:
    """The sections of the report, in order."""
    from circlesim.reports.timeline import timeline_figure

    report = comparison.report
    figure = timeline_figure(comparison.results, comparison.labels,
                             fio2_threshold=report.fio2_threshold)
    # One legend entry per trace, about 26 px each: make room so the legend does not run past
    # the panels when several plans are drawn.
    figure.update_layout(height=max(900, 26 * len(figure.data) + 12 * len(comparison.plans)
                                    + 120))
    sections = [
        Section("What was compared", paragraphs=[
            f"{len(comparison.plans)} plans for the same patient and breathing system. "
            f"Target: {report.target_end_tidal_mac:g} × age-adjusted MAC end-tidal, agent and "
            f"N2O MAC fractions added; FIO2 "
            f"threshold {report.fio2_threshold:g}; GWP horizon {comparison.gwp_horizon_years} "
            "years.", *_questions(comparison)], tables=[_plans_table(comparison)],
            warnings=list(comparison.notes)),
        Section("Outcomes", paragraphs=["One column per plan; — marks a value that does not "
                                        "apply (target never reached, no price, no GWP)."],
                tables=[_outcome_table(comparison)]),
        Section("Curves (all plans on shared axes; the first plan solid, the others dashed)",
                figures=[figure]),
    ]
    for p in comparison.plans:
        alerts = p.result.alerts
        sections.append(Section(
            f"Warnings: {p.label}",
            warnings=[str(a) for a in alerts],
            paragraphs=[] if alerts else ["No alert rule fired for this plan."]))
    sections.append(_setup_section(comparison))
    sections.append(_method_section(comparison))
    return sections


def write_comparison_report(comparison: Comparison, path: str | os.PathLike, *,
                            command: str = "", overwrite: bool = False) -> Path:
    """Write the comparison report as one self-contained HTML file, atomically.

    An existing file is kept (and :class:`~circlesim.base.files.FileExistsNotOverwrittenError`
    raised) unless ``overwrite``.
    """
    title = "Comparison: " + ", ".join(comparison.labels)
    return write_report(path, title, comparison_sections(comparison),
                        inputs_toml=comparison.inputs_toml(command), overwrite=overwrite)
