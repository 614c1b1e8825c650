"""Plotly figures of results (front-end layer; needs the ``app`` extra).

One figure layout serves the planner app (as a ``FigureWidget`` updated in place), the HTML
reports and the notebooks: panels sharing the time axis for agent, oxygen, N2O and N2, flows and
bag volume, and cumulative liquid agent. Several results can be drawn side by side on the same
axes (a comparison); the first is drawn solid, the others dashed.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from .properties import NITROUS_OXIDE, agent
from .result import Result

__all__ = ["PANELS", "timeline_figure", "timeline_traces", "update_timeline"]

#: Panel titles, top to bottom.
PANELS = (
    "Agent (vol%)",
    "Oxygen (fraction)",
    "N2O and N2 (vol%)",
    "Flows (L/min) and bag (L)",
    "Liquid agent used (mL)",
)
_DASHES = ("solid", "dash", "dot", "dashdot", "longdash")
_O2_COLOUR = "#2ca02c"
_N2_COLOUR = "#7f7f7f"
_FLOW_COLOURS = {"fresh": "#17becf", "vented": "#9467bd", "uptake": "#8c564b",
                 "bag": "#bcbd22"}


def _line(x, y, name, colour, dash, row, unit, group, show_legend=True, width=2.0):
    return (go.Scatter(x=x, y=y, name=name, mode="lines", legendgroup=group,
                       showlegend=show_legend,
                       line={"color": colour, "dash": dash, "width": width},
                       hovertemplate=f"%{{y:.3g}} {unit} at %{{x:.1f}} min<extra>{name}</extra>"),
            row)


def timeline_traces(result: Result, label: str = "", dash: str = "solid") -> list[tuple]:
    """The traces of one result as ``(trace, row)`` pairs, in a fixed order.

    The order and count depend only on the agent, so a figure can be updated in place when
    the same kind of result changes.
    """
    t = result.time_min
    tag = f" ({label})" if label else ""
    colour = agent(result.agent).colour
    ia = result.gas_index("agent")
    out = [
        _line(t, 100.0 * result.fresh_gas_by_gas_stpd[:, ia] / np.maximum(
            result.fresh_gas_stpd, 1e-12), f"Fresh gas {result.agent}{tag}", colour, dash, 1,
              "%", label, width=1.0),
        _line(t, result.inspired_percent("agent"), f"Inspired {result.agent}{tag}", colour,
              dash, 1, "%", label),
        _line(t, result.end_tidal_percent("agent"), f"End-tidal {result.agent}{tag}", "#000000",
              dash, 1, "%", label),
        _line(t, result.brain_percent("agent"), f"Brain (vessel-rich) {result.agent}{tag}",
              "#e377c2", dash, 1, "%", label),
        _line(t, result.inspired[:, 0], f"Inspired O2{tag}", _O2_COLOUR, dash, 2, "", label),
        _line(t, result.end_tidal[:, 0], f"End-tidal O2{tag}", "#98df8a", dash, 2, "", label),
        _line(t, result.inspired_percent("nitrous_oxide"), f"Inspired N2O{tag}",
              NITROUS_OXIDE.colour, dash, 3, "%", label),
        _line(t, result.inspired_percent("nitrogen"), f"Inspired N2{tag}", _N2_COLOUR, dash, 3,
              "%", label),
        _line(t, result.fresh_gas_l_min, f"Fresh gas flow{tag}", _FLOW_COLOURS["fresh"], dash,
              4, "L/min", label),
        _line(t, result.vented_l_min, f"Vented{tag}", _FLOW_COLOURS["vented"], dash, 4,
              "L/min", label),
        _line(t, result.uptake_stpd.sum(axis=1),
              f"Net uptake by patient{tag}", _FLOW_COLOURS["uptake"], dash, 4, "L/min STPD",
              label),
        _line(t, result.bag_volume_l, f"Bag volume{tag}", _FLOW_COLOURS["bag"], dash, 4, "L",
              label),
        _line(t, result.agent_delivered_ml, f"Liquid {result.agent} delivered{tag}", colour,
              dash, 5, "mL", label),
        _line(t, result.agent_uptake_ml, f"Taken up by patient{tag}", "#000000", dash, 5, "mL",
              label),
    ]
    return out


def timeline_figure(results: Sequence[Result], labels: Sequence[str] | None = None, *,
                    fio2_threshold: float | None = 0.30, height: int = 900,
                    widget: bool = False) -> go.Figure:
    """A figure with the standard panels for one or more results on shared axes.

    Parameters
    ----------
    results : sequence of Result
        Drawn in order; the first solid, the others dashed.
    labels : sequence of str, optional
        Names of the results, shown in the legend.
    fio2_threshold : float or None
        Draws the FIO2 threshold line in the oxygen panel.
    height : int, px
    widget : bool
        Return a ``go.FigureWidget`` (for the app) instead of a ``go.Figure``.
    """
    if not results:
        raise ValueError("results must hold at least one result; got none.")
    labels = list(labels) if labels is not None else [""] * len(results)
    fig = make_subplots(rows=len(PANELS), cols=1, shared_xaxes=True, vertical_spacing=0.03,
                        subplot_titles=PANELS)
    for k, (result, label) in enumerate(zip(results, labels, strict=True)):
        for trace, row in timeline_traces(result, label, _DASHES[k % len(_DASHES)]):
            fig.add_trace(trace, row=row, col=1)
    first = results[0]
    mac = first.mac_percent
    for multiple in (0.5, 1.0, 1.5):
        fig.add_hline(y=multiple * mac, line={"color": "#bbbbbb", "dash": "dot", "width": 1},
                      annotation_text=f"{multiple:g} MAC ({multiple * mac:.2f} %)",
                      annotation_position="top left", row=1, col=1)
    if fio2_threshold is not None:
        fig.add_hline(y=fio2_threshold, line={"color": "#d62728", "dash": "dash", "width": 1},
                      annotation_text=f"FIO2 threshold {fio2_threshold:.2f}",
                      annotation_position="bottom left", row=2, col=1)
    fig.update_xaxes(title_text="time (min)", row=len(PANELS), col=1)
    fig.update_layout(height=height, hovermode="x unified", margin={"l": 60, "r": 20, "t": 40,
                                                                    "b": 40},
                      legend={"orientation": "v", "x": 1.02, "y": 1.0})
    return go.FigureWidget(fig) if widget else fig


def update_timeline(fig: go.Figure, results: Sequence[Result]) -> bool:
    """Update a figure made by :func:`timeline_figure` in place with new results.

    Returns False (and changes nothing) if the number or kind of traces differs, in which case
    the caller should rebuild the figure.
    """
    new = [trace for k, r in enumerate(results)
           for trace, _ in timeline_traces(r, "", _DASHES[k % len(_DASHES)])]
    if len(new) != len(fig.data):
        return False
    with fig.batch_update():
        for old, trace in zip(fig.data, new, strict=True):
            old.x = trace.x
            old.y = trace.y
    return True
