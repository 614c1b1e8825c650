"""The band over similar patients on the timeline figure (front-end layer).

:func:`set_band` draws, behind the curves of :func:`circlesim.reports.timeline.timeline_figure`,
a shaded band between the low and high percentiles of end-tidal agent and brain partial
pressure (agent panel) and FIO2 (oxygen panel), and the measured points of a fitted case.
Band traces carry ``meta="band"`` so that :func:`~circlesim.reports.timeline.refresh_timeline`
leaves them alone; :func:`set_band` with ``band=None`` removes them.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
import plotly.graph_objects as go

from circlesim.population.band import Band

__all__ = ["BAND_META", "MEASURED_SLOTS", "MeasuredPoints", "add_band_slots", "band_traces",
           "set_band"]

BAND_META = "band"
#: Fill colours (end-tidal agent in grey like its black curve, brain pink, FIO2 green).
_FILL = {"end_tidal_agent_percent": "rgba(0,0,0,0.13)",
         "brain_agent_percent": "rgba(227,119,194,0.18)", "fio2": "rgba(44,160,44,0.18)"}
_ROW = {"end_tidal_agent_percent": 1, "brain_agent_percent": 1, "fio2": 2}


class MeasuredPoints(NamedTuple):
    """Measured values of a case to show as points.

    Attributes
    ----------
    name : str
        Legend name, e.g. "Measured end-tidal sevoflurane".
    time_min : ndarray, shape (N,), min
    values : ndarray, shape (N,)
        vol% for agent (row 1), fraction for O2 (row 2).
    row : int
        Figure panel (1: agent, 2: oxygen).
    """

    name: str
    time_min: np.ndarray
    values: np.ndarray
    row: int


def band_traces(band: Band, agent: str, measured: Sequence[MeasuredPoints] = ()) -> list[
        tuple[go.Scatter, int]]:
    """The band's traces as ``(trace, row)`` pairs: low edge, then high edge filled to it."""
    names = {"end_tidal_agent_percent": f"End-tidal {agent}",
             "brain_agent_percent": f"Brain (vessel-rich) {agent}", "fio2": "Inspired O2"}
    who = "fit draws" if band.basis.startswith("the fit") else "similar patients"
    out = []
    t = band.time_min
    for key, label in names.items():
        row = _ROW[key]
        legend = "legend" if row == 1 else f"legend{row}"
        name = f"{label}, {band.settings.label} of {who}"
        out.append((go.Scatter(x=t, y=band.low[key], name=f"{name} (low)", mode="lines",
                               line={"width": 0}, showlegend=False, hoverinfo="skip",
                               meta=BAND_META, legend=legend), row))
        out.append((go.Scatter(x=t, y=band.high[key], name=name, mode="lines",
                               line={"width": 0}, fill="tonexty", fillcolor=_FILL[key],
                               hoverinfo="skip", meta=BAND_META, legend=legend,
                               showlegend=False), row))
    for points in measured:
        out.append((go.Scatter(x=points.time_min, y=points.values, name=points.name,
                               mode="markers", marker={"size": 5, "color": "#333333",
                                                       "symbol": "circle-open"},
                               meta=BAND_META, legend="legend" if points.row == 1 else
                               f"legend{points.row}"), points.row))
    return out


#: Measured-point traces kept ready on the figure (a case record's agent and O2 series).
MEASURED_SLOTS = 4


def add_band_slots(fig: go.Figure) -> None:
    """Add the band's traces, empty and hidden, in front of the curves (call once, before the
    figure is shown: afterwards :func:`set_band` only gives them data, names and visibility).
    """
    if any(t.meta == BAND_META for t in fig.data):
        return
    rows = [r for key in _ROW for r in (_ROW[key], _ROW[key])] + [1] * MEASURED_SLOTS
    empty = []
    for k, row in enumerate(rows):
        legend = "legend" if row == 1 else f"legend{row}"
        if k < 2 * len(_ROW):
            key = list(_ROW)[k // 2]
            trace = go.Scatter(x=[], y=[], name="", mode="lines", line={"width": 0},
                               hoverinfo="skip", meta=BAND_META, legend=legend, visible=False,
                               showlegend=False,
                               fill="tonexty" if k % 2 else "none", fillcolor=_FILL[key])
        else:
            trace = go.Scatter(x=[], y=[], name="", mode="markers", meta=BAND_META,
                               marker={"size": 5, "color": "#333333",
                                       "symbol": "circle-open"},
                               legend=legend, visible=False)
        empty.append((trace, row))
    fig.add_traces([t for t, _ in empty], rows=[r for _, r in empty], cols=[1] * len(empty))
    count = len(empty)
    fig.data = tuple(fig.data[-count:]) + tuple(fig.data[:-count])


def set_band(fig: go.Figure, band: Band | None, agent: str = "",
             measured: Sequence[MeasuredPoints] = ()) -> None:
    """Show ``band`` (or nothing) behind the curves of a timeline figure, in place.

    The figure needs :func:`add_band_slots` first. Measured series beyond
    :data:`MEASURED_SLOTS` are not drawn; an O2 series goes to the oxygen panel.
    """
    slots = [t for t in fig.data if t.meta == BAND_META]
    if not slots:
        raise ValueError("the figure has no band traces; call add_band_slots(fig) first.")
    new = [] if band is None else band_traces(band, agent, measured)
    lines = [tr for tr, _ in new if tr.mode == "lines"]
    points = [(tr, row) for tr, row in new if tr.mode == "markers"][:MEASURED_SLOTS]
    n_lines = 2 * len(_ROW)
    with fig.batch_update():
        for k, slot in enumerate(slots[:n_lines]):
            if k < len(lines):
                slot.x, slot.y, slot.name, slot.visible = (lines[k].x, lines[k].y,
                                                           lines[k].name, True)
            elif slot.visible:
                slot.visible = False
        for k, slot in enumerate(slots[n_lines:]):
            if k < len(points):
                tr, row = points[k]
                slot.x, slot.y, slot.name, slot.visible = tr.x, tr.y, tr.name, True
                slot.xaxis, slot.yaxis = ("x", "y") if row == 1 else (f"x{row}", f"y{row}")
                slot.legend = "legend" if row == 1 else f"legend{row}"
            elif slot.visible:
                slot.visible = False
