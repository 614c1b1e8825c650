"""Plotly figures of results (front-end layer; needs the ``app`` extra).

One figure layout serves the planner app (as a ``FigureWidget`` updated in place), the HTML
reports and the notebooks: panels sharing the time axis for agent, oxygen, N2O and N2, flows and
bag volume, and cumulative liquid agent. Several results can be drawn side by side on the same
axes (a comparison); the first is drawn solid, the others dashed.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from circlesim.engine.result import Result
from circlesim.properties import NITROUS_OXIDE, agent

__all__ = ["ALL_PANELS", "PANELS", "refresh_timeline", "set_reference_lines", "timeline_figure",
           "timeline_traces", "update_timeline"]

#: Panel titles, top to bottom.
PANELS = (
    "Agent (vol%)",
    "Oxygen (fraction)",
    "N2O and N2 (vol%)",
    "Flows (L/min) and bag (L)",
    "Liquid agent used (mL)",
)
#: Every panel, by number (1 = agent … 5 = liquid agent).
ALL_PANELS = tuple(range(1, len(PANELS) + 1))
_DASHES = ("solid", "dash", "dot", "dashdot", "longdash")
_O2_COLOUR = "#2ca02c"
_N2_COLOUR = "#7f7f7f"
_TARGET_COLOUR = "#009e8f"
_DIAL_COLOUR = "#555555"
_FLOW_COLOURS = {"fresh": "#17becf", "vented": "#9467bd", "uptake": "#8c564b",
                 "bag": "#bcbd22"}


def _legend(row: int) -> str:
    """Each panel has its own legend beside it."""
    return "legend" if row == 1 else f"legend{row}"


class _Line(NamedTuple):
    """One curve before it becomes a plotly trace (cheap to build and compare)."""

    x: np.ndarray
    y: np.ndarray
    name: str
    colour: str
    dash: str
    row: int
    unit: str
    group: str
    width: float
    shape: str = "linear"

    def trace(self) -> go.Scatter:
        return go.Scatter(x=self.x, y=self.y, name=self.name, mode="lines",
                          legendgroup=self.group, legend=_legend(self.row),
                          line={"color": self.colour, "dash": self.dash, "width": self.width,
                                "shape": self.shape},
                          hovertemplate=f"%{{y:.3g}} {self.unit} at %{{x:.1f}} min"
                                        f"<extra>{self.name}</extra>")


def _line(x, y, name, colour, dash, row, unit, group, width=2.0, shape="linear") -> _Line:
    return _Line(x, y, name, colour, dash, row, unit, group, width, shape)


def timeline_traces(result: Result, label: str = "", dash: str = "solid") -> list[tuple]:
    """The traces of one result as ``(trace, row)`` pairs, in a fixed order.

    The order and count depend only on the agent and on target mode (a result with
    ``result.control`` adds the end-tidal target and the dial the controller set to the agent
    panel), so a figure can be updated in place when the same kind of result changes.
    """
    return [(line.trace(), line.row) for line in _all_lines(result, label, dash)]


def _lines(result: Result, label: str, dash: str,
           panels: Sequence[int] = ALL_PANELS) -> list[_Line]:
    """The curves of ``result`` in ``panels``, each placed in its row of a figure showing
    those panels."""
    position = {panel: row for row, panel in enumerate(panels, start=1)}
    return [line._replace(row=position[line.row]) for line in _all_lines(result, label, dash)
            if line.row in position]


def _all_lines(result: Result, label: str, dash: str) -> list[_Line]:
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
    control = result.control
    if control is not None:  # target mode: the target and the dial the controller chose
        out[3:3] = [
            _line(t, control.target_series(t), f"End-tidal target{tag}", _TARGET_COLOUR, dash,
                  1, "%", label, width=2.5),
            _line(t, control.dial_series(t), f"Dial set by the controller{tag}",
                  _DIAL_COLOUR, dash, 1, "%", label, width=1.5, shape="hv"),
        ]
    return out


def _panels_of(fig: go.Figure) -> tuple[int, ...]:
    """The panel numbers a figure made by :func:`timeline_figure` shows (kept in its meta)."""
    meta = fig.layout.meta if isinstance(fig.layout.meta, dict) else {}
    return tuple(meta.get("panels", ALL_PANELS))


def timeline_figure(results: Sequence[Result], labels: Sequence[str] | None = None, *,
                    fio2_threshold: float | None = 0.30, height: int = 900,
                    widget: bool = False, panels: Sequence[int] = ALL_PANELS) -> go.Figure:
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
    panels : sequence of int
        The panels to show, by number in :data:`PANELS` (1–5, top to bottom); default all.
        The app draws the agent and oxygen panels in one figure and the others in a second,
        so the panels it watches are redrawn first.
    """
    if not results:
        raise ValueError("results must hold at least one result; got none.")
    panels = tuple(int(k) for k in panels)
    if not panels or any(k not in ALL_PANELS for k in panels):
        raise ValueError(f"panels must be numbers from 1 to {len(PANELS)}; got {panels}.")
    labels = list(labels) if labels is not None else [""] * len(results)
    fig = make_subplots(rows=len(panels), cols=1, shared_xaxes=True,
                        vertical_spacing=0.03 * len(PANELS) / len(panels),
                        subplot_titles=[PANELS[k - 1] for k in panels])
    fig.layout.meta = {"panels": list(panels)}
    lines = [line for k, (result, label) in enumerate(zip(results, labels, strict=True))
             for line in _lines(result, label, _DASHES[k % len(_DASHES)], panels)]
    fig.add_traces([line.trace() for line in lines], rows=[line.row for line in lines],
                   cols=[1] * len(lines))
    set_reference_lines(fig, results[0].mac_percent, fio2_threshold)
    fig.update_xaxes(title_text="time (min)", row=len(panels), col=1)
    fig.update_layout(height=height, hovermode="x unified", margin={"l": 60, "r": 20, "t": 40,
                                                                    "b": 40})
    for row in range(1, len(panels) + 1):
        low, top = fig.layout["yaxis" if row == 1 else f"yaxis{row}"].domain
        # A legend longer than its panel (many results compared) scrolls instead of
        # running into the next panel's legend.
        fig.update_layout({_legend(row): {"x": 1.01, "xanchor": "left", "y": top,
                                          "yanchor": "top", "font": {"size": 11},
                                          "tracegroupgap": 2, "groupclick": "toggleitem",
                                          "maxheight": max(top - low, 0.05)}})
    return go.FigureWidget(fig) if widget else fig


_MAC_MULTIPLES = (0.5, 1.0, 1.5)
_LINE_NAMES = {*(f"mac-{m:g}" for m in _MAC_MULTIPLES), "fio2-threshold"}


def set_reference_lines(fig: go.Figure, mac_percent: float,
                        fio2_threshold: float | None) -> None:
    """Draw, or move in place, the age-adjusted MAC lines and the FIO2 threshold line.

    Parameters
    ----------
    fig : plotly Figure or FigureWidget made by :func:`timeline_figure`
    mac_percent : float, vol%
        Age-adjusted MAC of the (first) result's agent and patient.
    fio2_threshold : float or None, fraction 0.21–1
        None leaves the threshold line out (or hides an existing one).
    """
    panels = _panels_of(fig)
    wanted = {f"mac-{m:g}": (m * mac_percent, f"{m:g} MAC{' age-adjusted' if m == 1 else ''} "
                                              f"({m * mac_percent:.2f} %)")
              for m in _MAC_MULTIPLES} if 1 in panels else {}
    if fio2_threshold is not None and 2 in panels:
        wanted["fio2-threshold"] = (fio2_threshold, f"FIO2 threshold {fio2_threshold:.2f}")
    # The lines' settings are kept in layout.meta, so an unchanged figure costs one lookup.
    meta = fig.layout.meta if isinstance(fig.layout.meta, dict) else {}
    key = [float(mac_percent), None if fio2_threshold is None else float(fio2_threshold)]
    if meta.get("reference_lines") == key:
        return
    fig.layout.meta = {**meta, "reference_lines": key}
    shapes, notes = fig.layout.shapes, fig.layout.annotations
    present = {shape.name for shape in shapes}
    for shape in shapes:
        show = shape.name in wanted
        if show and shape.y0 != wanted[shape.name][0]:
            shape.y0 = shape.y1 = wanted[shape.name][0]
        if shape.name in _LINE_NAMES and shape.visible is not False and not show:
            shape.visible = False
        elif show and shape.visible is False:
            shape.visible = True
    for note in notes:
        show = note.name in wanted
        if show and note.y != wanted[note.name][0]:
            note.y, note.text = wanted[note.name]
        if note.name in _LINE_NAMES and note.visible is not False and not show:
            note.visible = False
        elif show and note.visible is False:
            note.visible = True
    for name, (y, text) in wanted.items():
        if name in present:
            continue
        if name == "fio2-threshold":
            fig.add_hline(y=y, name=name, line={"color": "#d62728", "dash": "dash", "width": 1},
                          annotation_text=text, annotation_name=name,
                          annotation_position="bottom left", row=panels.index(2) + 1,
                          col=1)
        else:
            fig.add_hline(y=y, name=name, line={"color": "#bbbbbb", "dash": "dot", "width": 1},
                          annotation_text=text, annotation_name=name,
                          annotation_font={"size": 10, "color": "#777777"},
                          annotation_position="top right", row=panels.index(1) + 1,
                          col=1)


def update_timeline(fig: go.Figure, results: Sequence[Result]) -> bool:
    """Update a figure made by :func:`timeline_figure` in place with new results.

    Returns False (and changes nothing) if the number or kind of traces differs, in which case
    the caller should rebuild the figure.
    """
    panels = _panels_of(fig)
    new = [line for k, r in enumerate(results)
           for line in _lines(r, "", _DASHES[k % len(_DASHES)], panels)]
    if len(new) != len(fig.data):
        return False
    with fig.batch_update():
        for old, trace in zip(fig.data, new, strict=True):
            old.x = trace.x
            old.y = trace.y
    return True


def refresh_timeline(fig: go.Figure, results: Sequence[Result],
                     labels: Sequence[str] | None = None, *,
                     fio2_threshold: float | None = 0.30) -> None:
    """Bring a figure made by :func:`timeline_figure` up to date in place.

    Curves of the same kind are given new data; when the set of curves changes (another agent,
    a comparison added or removed) the curves are replaced within the same figure object, so a
    ``FigureWidget`` on screen stays the same widget. The MAC and FIO2 lines follow.

    Parameters
    ----------
    fig : plotly Figure or FigureWidget
    results : sequence of Result
        Drawn in order; the first solid, the others dashed.
    labels : sequence of str, optional
    fio2_threshold : float or None, fraction
    """
    if not results:
        raise ValueError("results must hold at least one result; got none.")
    labels = list(labels) if labels is not None else [""] * len(results)
    panels = _panels_of(fig)
    lines = [line for k, (result, label) in enumerate(zip(results, labels, strict=True))
             for line in _lines(result, label, _DASHES[k % len(_DASHES)], panels)]
    # traces with meta "band" (circlesim.reports.band) stay as they are, in front
    kept = tuple(t for t in fig.data if t.meta == "band")
    main = [t for t in fig.data if t.meta != "band"]
    same = len(lines) == len(main) and all(
        old.name == new.name for old, new in zip(main, lines, strict=True))
    if same:
        with fig.batch_update():
            for old, new in zip(main, lines, strict=True):
                if len(old.x) != len(new.x) or not np.array_equal(old.x, new.x):
                    old.x = new.x
                old.y = new.y
            set_reference_lines(fig, results[0].mac_percent, fio2_threshold)
        return
    fig.data = kept
    fig.add_traces([line.trace() for line in lines], rows=[line.row for line in lines],
                   cols=[1] * len(lines))
    with fig.batch_update():
        set_reference_lines(fig, results[0].mac_percent, fio2_threshold)
