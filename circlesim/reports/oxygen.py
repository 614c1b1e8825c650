"""HTML report of the oxygen analyses (front-end layer; uses :mod:`circlesim.reports.html`).

The report holds the set-up, the lowest safe fresh-gas O2 table and curve, the flow × O2 maps,
and, when a plan is given, its oxygen course with the plan's warnings (an unsafe plan is shown
with its warnings, never dropped).
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import fields
from pathlib import Path

import tomli_w

from circlesim.oxygen.course import OxygenCourse
from circlesim.oxygen.flow_map import OxygenMap
from circlesim.oxygen.setup import Setup, circuit_flows, minimum_fgf_l_min
from circlesim.reports.html import Section, write_report
from circlesim.reports.oxygen_figures import course_figure, map_figure, safe_fraction_figure

__all__ = ["describe_setup", "oxygen_report_sections", "setup_toml", "write_oxygen_report"]


def describe_setup(setup: Setup) -> list[str]:
    """Plain sentences describing the patient and breathing system the analyses used."""
    p, c = setup.patient, setup.circuit
    flows = circuit_flows(setup)
    sample = ("returned to the circuit" if c.sample_returned
              else f"{c.sample_ml_min:g} mL/min not returned")
    return [
        f"Patient: {p.weight_kg:g} kg, {p.height_cm:g} cm, {p.age_years:g} years, {p.sex}; "
        f"O2 consumption used {p.vo2:.0f} mL/min STPD, CO2 output {p.vco2:.0f} mL/min; "
        f"minute ventilation {flows.inspired_l_min / flows.k_circuit:.2f} L/min of dry gas at "
        f"circuit conditions.",
        f"Breathing system: {c.volume_l:g} L plus a {c.bag_l:g} L bag; leak {c.leak_ml_min:g} "
        f"mL/min; side-stream sample gas {sample}; the pressure-limiting valve vents "
        f"{100 * c.vent_exhaled_share:.0f} % exhaled gas (before the absorbent) and "
        f"{100 * (1 - c.vent_exhaled_share):.0f} % mixed circuit gas; flowmeters at "
        f"{c.gas_temperature_c:g} °C and {c.ambient_pressure_kpa:g} kPa.",
        "Steady state assumes the body's N2 and N2O stores are full and the absorbent fresh "
        "(see docs/oxygen.md); the plan columns and maps come from the engine.",
    ]


def setup_toml(setup: Setup) -> str:
    """The set-up as scenario-style TOML tables (defaults and unset values left out)."""
    out = {}
    for name in ("patient", "circuit", "absorber", "vaporizer"):
        obj = getattr(setup, name)
        out[name] = {f.name: getattr(obj, f.name) for f in fields(obj)
                     if getattr(obj, f.name) is not None}
    return tomli_w.dumps(out)


def oxygen_report_sections(setup: Setup, table, maps: Sequence[OxygenMap], *,
                           fio2_threshold: float, courses: Sequence[OxygenCourse] = (),
                           course_labels: Sequence[str] | None = None) -> list[Section]:
    """Report sections for a table (:func:`~circlesim.oxygen.minimum.safe_fraction_table`),
    maps and optional plan courses."""
    shown = table.copy()
    shown.columns = [_heading(c) for c in shown.columns]
    sections = [
        Section("Patient and breathing system", paragraphs=describe_setup(setup)),
        Section("Lowest safe fresh-gas O2 fraction",
                paragraphs=[f"The lowest O2 fraction of the fresh gas (O2 plus carrier at the "
                            f"flowmeters) that keeps the inspired O2 fraction at or above "
                            f"{fio2_threshold:.2f}. Steady state: exact mass balance, the same "
                            "for both carriers. 'During the plan': the engine's lowest FIO2 "
                            "over the plan, which depends on the carrier. Empty cells: not "
                            "reachable at that flow.",
                            f"Below {minimum_fgf_l_min(setup):.3f} L/min the fresh gas does not "
                            "replace the O2 uptake, leak and lost sample gas: the bag empties."],
                tables=[shown], figures=[safe_fraction_figure(table, fio2_threshold)]),
    ]
    for m in maps:
        sections.append(Section(
            f"Map: O2 in {'air' if m.carrier == 'air' else 'N2O'}",
            paragraphs=[f"Left: steady-state FIO2; dashed red line: FIO2 = "
                        f"{m.fio2_threshold:.2f}; white dots: the lowest safe fresh-gas O2 at "
                        "each flow. "
                        f"Right: minutes below the threshold during the plan ({m.plan_text}). "
                        "Blank cells: the fresh gas carries less O2 than the patient "
                        "consumes."],
            figures=[map_figure(m)]))
    if courses:
        warnings = [f"{label}: {a}" if label else str(a)
                    for course, label in zip(courses, course_labels or [""] * len(courses),
                                             strict=True)
                    for a in course.result.alerts]
        paragraphs = [f"{label or 'Plan'}: lowest FIO2 {c.lowest_fio2:.3f}, "
                      f"{c.minutes_below:.1f} min below {c.fio2_threshold:.2f}; steady state "
                      f"of the last make-up {float(c.final_steady.inspired_o2):.3f}."
                      for c, label in zip(courses, course_labels or [""] * len(courses),
                                          strict=True)]
        sections.append(Section("Oxygen course of the plan", paragraphs=paragraphs,
                                figures=[course_figure(courses, course_labels)],
                                warnings=warnings or ["No alert rule fires."]))
    return sections


def write_oxygen_report(path: str | os.PathLike, setup: Setup, table, maps: Sequence[OxygenMap],
                        *, fio2_threshold: float, courses: Sequence[OxygenCourse] = (),
                        course_labels: Sequence[str] | None = None,
                        inputs_toml: str | None = None, overwrite: bool = False) -> Path:
    """Write the report atomically; an existing file is kept unless ``overwrite``."""
    sections = oxygen_report_sections(setup, table, maps, fio2_threshold=fio2_threshold,
                                      courses=courses, course_labels=course_labels)
    return write_report(path, "Oxygen at minimal flow", sections,
                        inputs_toml=inputs_toml or setup_toml(setup), overwrite=overwrite)


_HEADINGS = {
    "fgf_l_min": "FGF (L/min)",
    "steady_o2_pct": "lowest O2 %, steady state",
    "air_o2_l_min": "O2 flow with air (L/min)",
    "air_carrier_l_min": "air flow (L/min)",
    "air_plan_o2_pct": "lowest O2 % during the plan, O2/air",
    "n2o_o2_l_min": "O2 flow with N2O (L/min)",
    "n2o_carrier_l_min": "N2O flow (L/min)",
    "n2o_plan_o2_pct": "lowest O2 % during the plan, O2/N2O",
}


def _heading(column: str) -> str:
    return _HEADINGS.get(column, column)
