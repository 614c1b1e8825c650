"""Published clinical low-flow studies as case records: the default model's errors per study,
and those of a cohort profile calibrated on the other studies.

The records live in ``scenarios/cases/published/`` (one TOML + CSV pair per study group, each
with its source and how its numbers were obtained). :func:`study_rows` checks the default
model against each record (Varvel's MDPE and MDAPE over all its measured values), the same with
the patient blood/gas coefficients of Esper et al. 2015 (a published alternative, not a fit),
and, leaving each *study* out in turn, a cohort profile calibrated on the records of the other
studies (:func:`circlesim.cases.cohort.profile_from_fits`). docs/validation.md shows the table.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, replace
from functools import cache
from pathlib import Path

import numpy as np

from circlesim.cases.check import check_case
from circlesim.cases.cohort import CaseFitSummary, fit_for_cohort, profile_from_fits
from circlesim.cases.columns import floor_percent
from circlesim.cases.performance import Performance, performance
from circlesim.cases.record import CaseRecord, load_cases

__all__ = ["NitrousOxideEffect", "StudyRow", "nitrous_oxide_table", "studies_table", "study_rows"]


@dataclass(frozen=True)
class StudyRow:
    """One study record and the model's errors on it (None where nothing could be scored)."""

    name: str
    study: str
    agent: str
    nitrous_oxide: bool
    values: int
    provenance: str
    default: Performance | None
    esper: Performance | None
    held_out: Performance | None


def _study(record: CaseRecord) -> str:
    """Records of one study share the study's file-name stem before the group suffix."""
    parts = record.name.split("_")
    return "_".join(parts[:2]) if len(parts) > 2 else record.name


def _pooled_errors(record: CaseRecord, scenario) -> Performance | None:
    check = check_case(record.with_scenario(scenario))
    times, measured, predicted = [], [], []
    for s, values in record.measured.items():
        pred = check.predicted[s]
        keep = np.isfinite(values) & (pred >= floor_percent(s.gas))
        times.append(record.time_min[keep])
        measured.append(values[keep])
        predicted.append(pred[keep])
    if not times:
        return None
    return performance(np.concatenate(times), np.concatenate(measured),
                       np.concatenate(predicted))


@cache
def _rows(folder: str) -> tuple[StudyRow, ...]:
    records, problems = load_cases(folder)
    if problems:
        raise RuntimeError(f"published study records that cannot be read: {problems}")
    fits: dict[str, CaseFitSummary] = {r.name: fit_for_cohort(r, False) for r in records}
    rows = []
    for record in sorted(records, key=lambda r: r.name):
        plain = replace(record.scenario, profile=None, fit=None)
        esper = replace(plain, patient=replace(plain.patient, blood_gas_source="esper2015"))
        study = _study(record)
        others = [f for r, f in ((r, fits[r.name]) for r in records)
                  if _study(r) != study and not f.error]
        held = None
        if len(others) >= 2:
            profile = profile_from_fits(others, f"published studies without {study}")
            held = _pooled_errors(record, replace(plain, profile=profile))
        has_n2o = any((s.n2o_l_min or 0.0) > 0.0 for s in record.plan.steps)
        rows.append(StudyRow(
            name=record.name, study=record.source.split(".")[0] if record.source else study,
            agent=record.agent, nitrous_oxide=has_n2o, values=record.count(),
            provenance=record.provenance, default=_pooled_errors(record, plain),
            esper=_pooled_errors(record, esper), held_out=held))
    return tuple(rows)


def study_rows(folder: str | os.PathLike) -> tuple[StudyRow, ...]:
    """The rows for the study records in ``folder`` (computed once per folder)."""
    return _rows(str(Path(folder).resolve()))


def _cell(p: Performance | None, which: str) -> str:
    if p is None:
        return "—"
    return f"{getattr(p, which):+.1f}" if which == "mdpe_percent" else f"{getattr(p, which):.1f}"


def studies_table(folder: str | os.PathLike) -> str:
    """The studies as a markdown table (MDPE and MDAPE in %)."""
    lines = ["| record | agent | N2O | values | provenance | default MDPE % | default MDAPE % "
             "| Esper 2015 blood/gas MDPE % | profile from the other studies MDPE % | "
             "MDAPE % |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for r in study_rows(folder):
        lines.append(f"| {r.name} | {r.agent} | {'yes' if r.nitrous_oxide else 'no'} | "
                     f"{r.values} | {r.provenance} | {_cell(r.default, 'mdpe_percent')} | "
                     f"{_cell(r.default, 'mdape_percent')} | "
                     f"{_cell(r.esper, 'mdpe_percent')} | "
                     f"{_cell(r.held_out, 'mdpe_percent')} | "
                     f"{_cell(r.held_out, 'mdape_percent')} |")
    rows = study_rows(folder)
    default = [r.default.mdape_percent for r in rows if r.default is not None]
    held = [r.held_out.mdape_percent for r in rows if r.held_out is not None]
    lines.append(f"| **median over records** | | | | | | {np.median(default):.1f} | | | "
                 f"{np.median(held):.1f} |")
    return "\n".join(lines)


@dataclass(frozen=True)
class NitrousOxideEffect:
    """How much the model's N2O raises its end-tidal agent prediction in one N2O record.

    Attributes
    ----------
    name : str
    with_n2o_percent, without_n2o_percent : float, vol%
        Predicted end-tidal agent at the record's last measurement, with the plan as recorded
        and with every N2O flow given as O2 instead.
    uptake_ml_min : float, mL/min STPD
        The model's N2O uptake at 30 min.
    severinghaus_ml_min : float, mL/min
        Severinghaus's uptake law at 30 min, 1000 × t^−½ mL/min at 75 % alveolar N2O, scaled
        to the model's end-tidal N2O (Severinghaus JW, J Clin Invest 1954;33:1183–9; from
        memory).
    """

    name: str
    with_n2o_percent: float
    without_n2o_percent: float
    uptake_ml_min: float
    severinghaus_ml_min: float


@cache
def _n2o_effects(folder: str) -> tuple[NitrousOxideEffect, ...]:
    records, _ = load_cases(folder)
    out = []
    for record in sorted(records, key=lambda r: r.name):
        steps = record.plan.steps
        if not any((s.n2o_l_min or 0.0) > 0.0 for s in steps):
            continue
        as_o2 = [replace(s, o2_l_min=(s.o2_l_min or 0.0) + (s.n2o_l_min or 0.0),
                         n2o_l_min=0.0) if s.n2o_l_min is not None else s for s in steps]
        plain = replace(record.scenario, profile=None, fit=None)
        with_n2o = plain.simulate()
        without = replace(plain, plan=plain.plan.with_steps(as_o2)).simulate()
        t_last = float(record.time_min[-1])
        agent_with = float(np.interp(t_last, with_n2o.time_min,
                                     with_n2o.end_tidal_percent("agent")))
        agent_without = float(np.interp(t_last, without.time_min,
                                        without.end_tidal_percent("agent")))
        at = min(30.0, float(with_n2o.time_min[-1]))
        frame = with_n2o.frame()
        uptake = float(np.interp(at, frame["time_min"], frame["uptake_nitrous_oxide_ml_min_stpd"]))
        et_n2o = float(np.interp(at, frame["time_min"], frame["end_tidal_nitrous_oxide_pct"]))
        out.append(NitrousOxideEffect(record.name, agent_with, agent_without, uptake,
                                      1000.0 * (et_n2o / 75.0) / np.sqrt(at)))
    return tuple(out)


def nitrous_oxide_table(folder: str | os.PathLike) -> str:
    """The N2O investigation as a markdown table."""
    lines = ["| record | end-tidal agent with N2O, % | N2O given as O2, % | change | model N2O "
             "uptake at 30 min, mL/min | Severinghaus law, mL/min |", "|---|---|---|---|---|---|"]
    for e in _n2o_effects(str(Path(folder).resolve())):
        change = (e.without_n2o_percent / e.with_n2o_percent - 1.0) * 100.0
        lines.append(f"| {e.name} | {e.with_n2o_percent:.2f} | {e.without_n2o_percent:.2f} | "
                     f"{change:+.0f} % | {e.uptake_ml_min:.0f} | {e.severinghaus_ml_min:.0f} |")
    return "\n".join(lines)
