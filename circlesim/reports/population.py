"""Figures and the HTML report of a population comparison (front-end layer; needs plotly).

Built on :mod:`circlesim.reports.html`: every report carries the standing caution, the
population's distributions with their sources, the probabilities table, the median and
5–95 % band of the curves of every plan on shared axes, the share of patients at the end-tidal
target over time, the distributions of agent used and CO2-equivalent, and the inputs as TOML
so the run can be repeated.
"""

from __future__ import annotations

import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import plotly.graph_objects as go
import tomli_w
from plotly.subplots import make_subplots

from circlesim.population.result import OUTCOMES, SERIES, PopulationResult, probability_table
from circlesim.reports.html import Section, write_report
from circlesim.scenario import plan_to_toml

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["BAND_PANELS", "band_figure", "outcome_figure", "outcome_table",
           "population_sections", "target_figure", "write_population_report"]

#: Curves drawn by :func:`band_figure` unless asked otherwise.
BAND_PANELS = ("end_tidal_total_mac", "end_tidal_agent_mac", "brain_agent_mac", "fio2",
               "inspired_n2_percent", "agent_delivered_ml")
#: Outcomes drawn by :func:`outcome_figure` unless asked otherwise.
OUTCOME_PANELS = ("time_to_target_min", "agent_delivered_ml", "co2e_kg", "lowest_fio2")
_PALETTE = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#8c564b", "#e377c2",
            "#17becf")


def _rgba(hex_colour: str, alpha: float) -> str:
    r, g, b = (int(hex_colour[i:i + 2], 16) for i in (1, 3, 5))
    return f"rgba({r},{g},{b},{alpha})"


def band_figure(results: Sequence[PopulationResult], keys: Iterable[str] = BAND_PANELS, *,
                low: float = 5.0, high: float = 95.0, height_per_panel: int = 230) -> go.Figure:
    """Median (line) and ``low``–``high`` percentile band (shaded) of curves, one panel per
    curve, every plan on the same axes in its own colour."""
    keys = [k for k in keys if all(k in r.curves for r in results)]
    if not results or not keys:
        raise ValueError("band_figure needs at least one result and one curve they all keep.")
    titles = [f"{SERIES[k].label} ({SERIES[k].unit})" for k in keys]
    fig = make_subplots(rows=len(keys), cols=1, shared_xaxes=True, vertical_spacing=0.04,
                        subplot_titles=titles)
    for n, r in enumerate(results):
        colour = _PALETTE[n % len(_PALETTE)]
        for row, key in enumerate(keys, start=1):
            band = r.band(key, low, high)
            t = band["time_min"].to_numpy()
            fig.add_trace(go.Scatter(
                x=np.concatenate([t, t[::-1]]),
                y=np.concatenate([band["high"].to_numpy(), band["low"].to_numpy()[::-1]]),
                fill="toself", fillcolor=_rgba(colour, 0.18), line={"width": 0},
                hoverinfo="skip", legendgroup=r.label, showlegend=False,
                name=f"{r.label} {low:g}–{high:g} %"), row=row, col=1)
            fig.add_trace(go.Scatter(
                x=t, y=band["median"], mode="lines", line={"color": colour, "width": 2},
                name=r.label, legendgroup=r.label, showlegend=row == 1,
                hovertemplate=f"median %{{y:.3g}} at %{{x:.1f}} min<extra>{r.label}</extra>"),
                row=row, col=1)
    for row, key in enumerate(keys, start=1):
        if key == "fio2":
            fig.add_hline(y=results[0].fio2_threshold, row=row, col=1,
                          line={"color": "#d62728", "dash": "dash", "width": 1},
                          annotation_text=f"FIO2 threshold {results[0].fio2_threshold:.2f}",
                          annotation_position="bottom left")
        if key == results[0].depth_key:
            fig.add_hline(y=results[0].target_end_tidal_mac, row=row, col=1,
                          line={"color": "#888888", "dash": "dot", "width": 1},
                          annotation_text="end-tidal target",
                          annotation_position="top left")
    fig.update_xaxes(title_text="time (min)", row=len(keys), col=1)
    fig.update_layout(height=height_per_panel * len(keys) + 80, hovermode="x unified",
                      margin={"l": 60, "r": 20, "t": 40, "b": 40},
                      title=f"Median and {low:g}–{high:g} % band over the population")
    return fig


def target_figure(results: Sequence[PopulationResult]) -> go.Figure:
    """Share of patients whose end-tidal agent has reached the target, over time."""
    fig = go.Figure()
    for n, r in enumerate(results):
        fig.add_trace(go.Scatter(
            x=r.time_min, y=100.0 * r.target_reached_fraction(), mode="lines", name=r.label,
            line={"color": _PALETTE[n % len(_PALETTE)], "width": 2},
            hovertemplate="%{y:.1f} % by %{x:.1f} min<extra>" + r.label + "</extra>"))
    fig.update_layout(height=380, xaxis_title="time (min)",
                      yaxis_title="patients at the end-tidal target (%)",
                      yaxis={"range": [0, 102]}, margin={"l": 60, "r": 20, "t": 40, "b": 40},
                      title="Reaching the end-tidal target")
    return fig


def outcome_figure(results: Sequence[PopulationResult],
                   keys: Iterable[str] = OUTCOME_PANELS) -> go.Figure:
    """Box plots (5–95 % whiskers not drawn beyond the data) of outcomes per plan."""
    keys = list(keys)
    fig = make_subplots(rows=1, cols=len(keys), subplot_titles=[OUTCOMES[k] for k in keys])
    for n, r in enumerate(results):
        colour = _PALETTE[n % len(_PALETTE)]
        for col, key in enumerate(keys, start=1):
            values = r.outcomes[key].to_numpy(dtype=float)
            values = values[np.isfinite(values)]
            fig.add_trace(go.Box(y=values, name=r.label, marker_color=colour, boxpoints=False,
                                 legendgroup=r.label, showlegend=col == 1), row=1, col=col)
    fig.update_layout(height=420, margin={"l": 60, "r": 20, "t": 60, "b": 40},
                      title="Outcome distributions over the population")
    fig.update_xaxes(showticklabels=False)
    return fig


def _fmt(q: np.ndarray) -> str:
    return f"{q[1]:.3g} ({q[0]:.3g}–{q[2]:.3g})"


def outcome_table(results: Sequence[PopulationResult]) -> pd.DataFrame:
    """Outcomes per plan as "median (5–95 %)" text, one row per plan."""
    import pandas as pd

    rows = []
    for r in results:
        row = {"plan": r.label}
        for key, label in OUTCOMES.items():
            values = r.outcomes[key].to_numpy(dtype=float)
            ok = values[np.isfinite(values)]
            row[label] = _fmt(np.percentile(ok, [5, 50, 95])) if ok.size else "—"
        rows.append(row)
    return pd.DataFrame(rows)


def _characteristics(results: Sequence[PopulationResult]) -> tuple[list[str], list[list]]:
    table = results[0].patients.table()
    rows = []
    for column in table.columns:
        if column == "sex":
            women = float(np.mean(table[column] == "female"))
            rows.append(["women", f"{100 * women:.0f} %"])
            continue
        q = np.percentile(table[column].to_numpy(dtype=float), [5, 50, 95])
        rows.append([column, _fmt(q)])
    return ["characteristic", "median (5–95 %)"], rows


def _warnings(r: PopulationResult) -> list[str]:
    out = []
    below = r.probability_fio2_below()
    if below > 0.0:
        out.append(f"{r.label}: FIO2 falls below {r.fio2_threshold:.2f} in "
                   f"{100 * below:.1f} % of the virtual patients.")
    never = float(np.mean(~np.isfinite(r.outcomes["time_to_target_min"].to_numpy())))
    if never > 0.0:
        what = "agent + N2O" if r.target_basis == "total" else "agent"
        out.append(f"{r.label}: end-tidal {what} never reaches {r.target_end_tidal_mac:g} MAC "
                   f"in {100 * never:.1f} % of the virtual patients.")
    return out


def population_sections(results: Sequence[PopulationResult],
                        by_min: Iterable[float] = (5.0, 10.0, 20.0, 30.0)) -> list[Section]:
    """The report's sections (see the module docstring)."""
    first = results[0]
    people = first.patients
    seed = "given directly" if people.seed is None else f"seed {people.seed}"
    population = Section(
        "Virtual patients",
        paragraphs=[f"{len(people)} virtual patients ({seed}); every plan was run over the "
                    f"same patients, computed on {first.where}. The scenarios' own patients "
                    "are not used. Each distribution below names its source; 'assumption' "
                    "marks a spread that is circlesim's choice."])
    if people.spec is not None:
        population.tables.append(people.spec.table())
    population.tables.append(_characteristics(results))
    probabilities = Section(
        "Probabilities",
        paragraphs=["P(target by t): share of patients whose end-tidal depth reaches the "
                    "plan's target by time t — agent plus N2O, each as a multiple of the "
                    "patient's age-adjusted MAC, or the agent alone where the table says so. "
                    "P(FIO2 below threshold): share in whom the inspired O2 fraction falls "
                    "below the scenario's threshold at any output time."],
        tables=[probability_table(results, by_min)],
        warnings=[w for r in results for w in _warnings(r)])
    curves = Section("Curves over the population",
                     paragraphs=["Lines are medians, shaded bands the 5th to 95th percentiles "
                                 "of the virtual patients at each time."],
                     figures=[band_figure(results), target_figure(results)])
    horizon = first.gwp_horizon_years
    outcomes = Section(
        "Outcomes",
        paragraphs=[f"Median (5th–95th percentile) over the patients. CO2-equivalents use "
                    f"GWP{horizon} and count all agent and N2O delivered as emitted; '—' "
                    "where circlesim has no published GWP for the agent."],
        tables=[outcome_table(results)], figures=[outcome_figure(results)])
    plans = Section("Plans", paragraphs=[
        f"{r.label}: {r.agent}, {r.scenario.plan.duration_min:g} min, "
        f"{len(r.scenario.plan.steps)} steps; target {r.target_end_tidal_mac:g} MAC; "
        f"FIO2 threshold {r.fio2_threshold:.2f}." for r in results])
    return [population, probabilities, curves, outcomes, plans]


def _inputs_toml(results: Sequence[PopulationResult]) -> str:
    people = results[0].patients
    parts = []
    if people.spec is not None:
        parts.append(f"# population (seed {people.seed}, {len(people)} patients)\n"
                     + tomli_w.dumps({"population": people.spec.to_dict()}))
    for r in results:
        parts.append(f"# plan: {r.label}\n" + plan_to_toml(r.scenario.plan))
    return "\n".join(parts)


def write_population_report(path: str | os.PathLike, results: Sequence[PopulationResult], *,
                            by_min: Iterable[float] = (5.0, 10.0, 20.0, 30.0),
                            title: str = "Wash-in strategies over a virtual population",
                            overwrite: bool = False) -> Path:
    """Write the HTML report, atomically; an existing file is kept unless ``overwrite``."""
    if not results:
        raise ValueError("write_population_report needs at least one result.")
    return write_report(path, title, population_sections(results, by_min),
                        inputs_toml=_inputs_toml(results), overwrite=overwrite)
