"""Plotly figures for the oxygen analyses (front-end layer; needs the ``app`` extra).

* :func:`map_figure` — heatmaps of steady-state FIO2 and of minutes below the threshold over
  flow × fresh-gas O2 fraction, with the threshold contour and the lowest safe fraction;
* :func:`safe_fraction_figure` — the lowest safe fresh-gas O2 fraction against flow;
* :func:`course_figure` — inspired and end-tidal O2, N2 and N2O over a plan;
* :func:`nitrogen_figure` — nitrogen build-up after different denitrogenation periods;
* :func:`absorbent_figure` — CO2 reaching the absorbent and canister life against flow.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from circlesim.oxygen.course import OxygenCourse
from circlesim.oxygen.flow_map import OxygenMap
from circlesim.oxygen.nitrogen import DenitrogenationRun, tissue_nitrogen_l

__all__ = ["absorbent_figure", "course_figure", "map_figure", "nitrogen_figure",
           "safe_fraction_figure"]

_THRESHOLD_COLOUR = "#d62728"
_DASHES = ("solid", "dash", "dot", "dashdot", "longdash")
_O2 = "#2ca02c"
_N2 = "#7f7f7f"
_N2O = "#1f3f99"
_CARRIER_COLOURS = {"air": "#17becf", "n2o": _N2O}


def _threshold_contour(m: OxygenMap, z: np.ndarray, level: float, name: str,
                       show_legend: bool) -> go.Contour:
    return go.Contour(
        x=m.fgf_l_min, y=m.o2_fraction, z=z, showscale=False, name=name, hoverinfo="skip",
        contours={"start": level, "end": level, "size": 1.0, "coloring": "none",
                  "showlabels": True, "labelfont": {"color": _THRESHOLD_COLOUR}},
        line={"color": _THRESHOLD_COLOUR, "width": 2.5, "dash": "dash"},
        showlegend=show_legend)


def map_figure(m: OxygenMap, *, height: int = 520, widget: bool = False) -> go.Figure:
    """Heatmaps over total flow (x) × fresh-gas O2 fraction (y).

    Left: steady-state FIO2, with the threshold contour and the lowest safe fraction. Right
    (when the map holds a plan): minutes below the threshold during the plan, with the
    contour of zero minutes.
    """
    with_plan = m.minutes_below is not None
    titles = ["Steady-state inspired O2 fraction"]
    if with_plan:
        titles.append(f"Minutes with FIO2 below {m.fio2_threshold:.2f} during the plan")
    fig = make_subplots(rows=1, cols=len(titles), subplot_titles=titles,
                        horizontal_spacing=0.14)
    steady = np.where(m.sustainable, m.steady_fio2, np.nan)
    custom = np.where(m.sustainable, "", "fresh O2 below the O2 consumption")
    fig.add_trace(go.Heatmap(
        x=m.fgf_l_min, y=m.o2_fraction, z=steady, zmin=0.0, zmax=1.0, colorscale="Viridis",
        customdata=custom, name="steady FIO2",
        colorbar={"title": "FIO2", "x": 0.43 if with_plan else 1.02, "len": 0.9},
        hovertemplate="FGF %{x:.2f} L/min, fresh O2 %{y:.2f}: FIO2 %{z:.3f} "
                      "%{customdata}<extra></extra>"), row=1, col=1)
    fig.add_trace(_threshold_contour(m, np.where(m.sustainable, m.steady_fio2, 0.0),
                                     m.fio2_threshold, f"FIO2 = {m.fio2_threshold:.2f}", True),
                  row=1, col=1)
    fig.add_trace(go.Scatter(x=m.fgf_l_min, y=m.lowest_safe_fraction, mode="markers",
                             name="lowest safe fresh O2 (steady state)",
                             marker={"size": 7, "color": "white",
                                     "line": {"color": _THRESHOLD_COLOUR, "width": 1.5}},
                             hovertemplate="%{x:.2f} L/min: at least %{y:.3f} O2"
                                           "<extra></extra>"), row=1, col=1)
    if m.bag_empties.any():
        fig.add_trace(go.Scatter(
            x=m.fgf_l_min[m.bag_empties], y=np.full(int(m.bag_empties.sum()),
                                                    m.o2_fraction.min()),
            mode="markers", marker={"symbol": "x", "size": 10, "color": "#ff7f0e"},
            name="bag empties: flow below uptake and losses"), row=1, col=1)
    if with_plan:
        fig.add_trace(go.Heatmap(
            x=m.fgf_l_min, y=m.o2_fraction, z=m.minutes_below, colorscale="Reds", zmin=0.0,
            zmax=max(float(np.nanmax(m.minutes_below)), 1.0), name="minutes below",
            colorbar={"title": "min", "x": 1.02, "len": 0.9},
            hovertemplate="FGF %{x:.2f} L/min, fresh O2 %{y:.2f}: %{z:.1f} min below"
                          "<extra></extra>"), row=1, col=2)
        fig.add_trace(_threshold_contour(m, m.lowest_fio2, m.fio2_threshold,
                                         "FIO2 never below threshold (plan)", True), row=1,
                      col=2)
    for col in range(1, len(titles) + 1):
        fig.update_xaxes(title_text="total fresh gas flow (L/min)", row=1, col=col)
        fig.update_yaxes(title_text=f"O2 fraction of fresh gas (O2 in {_carrier(m.carrier)})",
                         row=1, col=col)
    fig.update_layout(height=height, margin={"l": 60, "r": 40, "t": 60, "b": 50},
                      legend={"orientation": "h", "y": -0.18},
                      title={"text": f"Plan: {m.plan_text}", "font": {"size": 12}, "y": 0.995})
    return go.FigureWidget(fig) if widget else fig


def _carrier(carrier: str) -> str:
    return "air" if carrier == "air" else "N2O"


def safe_fraction_figure(table, fio2_threshold: float, *, height: int = 420,
                         widget: bool = False) -> go.Figure:
    """Lowest safe fresh-gas O2 (%) against total flow, from
    :func:`circlesim.oxygen.minimum.safe_fraction_table`."""
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=table["fgf_l_min"], y=table["steady_o2_pct"],
                             mode="lines+markers", name="steady state (any carrier)",
                             line={"color": "#000000", "width": 2.5}))
    for carrier in ("air", "n2o"):
        column = f"{carrier}_plan_o2_pct"
        if column in table:
            fig.add_trace(go.Scatter(x=table["fgf_l_min"], y=table[column],
                                     mode="lines+markers", name=f"during the plan, O2 in "
                                                                f"{_carrier(carrier)}",
                                     line={"color": _CARRIER_COLOURS[carrier], "dash": "dash"}))
    fig.add_hline(y=100.0 * fio2_threshold, line={"color": _THRESHOLD_COLOUR, "dash": "dot"},
                  annotation_text=f"FIO2 threshold {fio2_threshold:.2f}")
    fig.update_layout(height=height, xaxis_title="total fresh gas flow (L/min)",
                      yaxis_title="lowest fresh-gas O2 (%)", hovermode="x unified",
                      margin={"l": 60, "r": 20, "t": 30, "b": 50})
    return go.FigureWidget(fig) if widget else fig


def course_figure(courses: Sequence[OxygenCourse], labels: Sequence[str] | None = None, *,
                  height: int = 620, widget: bool = False) -> go.Figure:
    """Inspired and end-tidal O2 (top), N2 and N2O (bottom) for one or more courses."""
    if not courses:
        raise ValueError("courses must hold at least one course; got none.")
    labels = list(labels) if labels is not None else [""] * len(courses)
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08,
                        subplot_titles=("Oxygen (fraction)", "N2 and N2O (vol%)"))
    for k, (course, label) in enumerate(zip(courses, labels, strict=True)):
        r = course.result
        dash = _DASHES[k % len(_DASHES)]
        tag = f" ({label})" if label else ""
        t = r.time_min
        lines = [
            (r.inspired[:, 0], f"Inspired O2{tag}", _O2, 1, 2.0),
            (r.end_tidal[:, 0], f"End-tidal O2{tag}", "#98df8a", 1, 2.0),
            (course.quasi_steady_fio2, f"Mass balance FIO2{tag}", "#000000", 1, 1.0),
            (100 * r.inspired[:, r.gas_index("nitrogen")], f"Inspired N2{tag}", _N2, 2, 2.0),
            (100 * r.inspired[:, r.gas_index("nitrous_oxide")], f"Inspired N2O{tag}", _N2O, 2,
             2.0),
        ]
        for y, name, colour, row, width in lines:
            fig.add_trace(go.Scatter(x=t, y=y, name=name, mode="lines",
                                     line={"color": colour, "dash": dash, "width": width}),
                          row=row, col=1)
    threshold = courses[0].fio2_threshold
    fig.add_hline(y=threshold, line={"color": _THRESHOLD_COLOUR, "dash": "dash", "width": 1},
                  annotation_text=f"FIO2 threshold {threshold:.2f}", row=1, col=1)
    fig.update_xaxes(title_text="time (min)", row=2, col=1)
    fig.update_layout(height=height, hovermode="x unified",
                      margin={"l": 60, "r": 20, "t": 40, "b": 40})
    return go.FigureWidget(fig) if widget else fig


def nitrogen_figure(runs: Sequence[DenitrogenationRun], *, height: int = 560,
                    widget: bool = False) -> go.Figure:
    """Inspired N2 (top) and nitrogen left in the body (bottom) after each denitrogenation."""
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08,
                        subplot_titles=("Inspired N2 (vol%)", "N2 dissolved in the body (L STPD)"))
    for k, run in enumerate(runs):
        r = run.result
        name = f"{run.high_flow_min:g} min high flow"
        dash = _DASHES[k % len(_DASHES)]
        fig.add_trace(go.Scatter(x=r.time_min, y=100 * r.inspired[:, r.gas_index("nitrogen")],
                                 name=name, legendgroup=name, mode="lines",
                                 line={"color": _N2, "dash": dash}), row=1, col=1)
        fig.add_trace(go.Scatter(x=r.time_min, y=tissue_nitrogen_l(r), name=name,
                                 legendgroup=name, showlegend=False, mode="lines",
                                 line={"color": "#8c564b", "dash": dash}), row=2, col=1)
    fig.update_xaxes(title_text="time (min)", row=2, col=1)
    fig.update_layout(height=height, hovermode="x unified",
                      margin={"l": 60, "r": 20, "t": 40, "b": 40})
    return go.FigureWidget(fig) if widget else fig


def absorbent_figure(table, *, height: int = 520, widget: bool = False) -> go.Figure:
    """CO2 reaching the absorbent (top) and canister life (bottom) against flow, from
    :func:`circlesim.oxygen.absorbent.absorbent_by_flow`."""
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.1,
                        subplot_titles=("CO2 reaching the absorbent (mL/min STPD)",
                                        "Canister life (h)"))
    x = table["fgf_l_min"]
    fig.add_trace(go.Scatter(x=x, y=table["co2_to_absorber_ml_min"], mode="lines+markers",
                             name="CO2 to absorbent"), row=1, col=1)
    fig.add_trace(go.Scatter(x=x, y=table["life_to_breakthrough_h"], mode="lines+markers",
                             name="to start of breakthrough (mass balance)"), row=2, col=1)
    if "inspired_co2_rise_h" in table:
        fig.add_trace(go.Scatter(x=x, y=table["inspired_co2_rise_h"], mode="lines+markers",
                                 name="until inspired CO2 rises (engine)",
                                 line={"dash": "dash"}), row=2, col=1)
    fig.update_xaxes(title_text="total fresh gas flow (L/min)", row=2, col=1)
    fig.update_layout(height=height, hovermode="x unified",
                      margin={"l": 60, "r": 20, "t": 40, "b": 40})
    return go.FigureWidget(fig) if widget else fig
