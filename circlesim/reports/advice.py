"""Plotly figures for the advisor, target mode and emergence (front-end layer; ``app`` extra).

* :func:`pareto_figure` — time to target against liquid agent used, the chosen plan marked;
* :func:`target_figure` — end-tidal agent with the target band, and the dial the controller
  or the advisor set;
* :func:`decrement_figure` — decrement times and time to awakening against case length.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from circlesim.properties import agent

if TYPE_CHECKING:  # pragma: no cover
    from circlesim.advisor.answer import Advice
    from circlesim.advisor.emergence import DecrementCurves
    from circlesim.engine.result import Result

__all__ = ["decrement_figure", "pareto_figure", "target_figure"]


def pareto_figure(advice: Advice, height: int = 360) -> go.Figure:
    """Trade-off between time to target (min) and liquid agent used (mL)."""
    colour = agent(advice.result.agent).colour
    fig = go.Figure()
    points = advice.pareto
    if points:
        fig.add_trace(go.Scatter(
            x=[p.time_to_target_min for p in points], y=[p.agent_ml for p in points],
            mode="lines+markers", name="least agent for each time to target",
            line={"color": colour}, marker={"size": 9},
            text=[f"wash-in {p.washin_fgf_l_min:g} L/min for {p.washin_min:.1f} min, then "
                  f"{p.maintenance_fgf_l_min:g} L/min" for p in points],
            hovertemplate="%{y:.1f} mL, target at %{x:.1f} min<br>%{text}<extra></extra>"))
    if advice.time_to_target_min is not None:
        fig.add_trace(go.Scatter(
            x=[advice.time_to_target_min], y=[advice.agent_ml], mode="markers",
            name="recommended plan", marker={"size": 14, "symbol": "star", "color": "#000000"},
            hovertemplate="%{y:.1f} mL, target at %{x:.1f} min<extra>recommended</extra>"))
    ref = advice.reference
    reach = _first_within(ref)
    if reach is not None:
        fig.add_trace(go.Scatter(
            x=[reach], y=[float(ref.agent_delivered_ml[-1])], mode="markers",
            name=f"plain {advice.reference_fgf_l_min:g} L/min plan",
            marker={"size": 11, "symbol": "x", "color": "#7f7f7f"},
            hovertemplate="%{y:.1f} mL, target at %{x:.1f} min<extra>plain plan</extra>"))
    fig.update_layout(height=height, xaxis_title="time to target (min)",
                      yaxis_title=f"liquid {advice.result.agent} used (mL)",
                      margin={"l": 60, "r": 20, "t": 30, "b": 50},
                      legend={"orientation": "h", "y": -0.25})
    return fig


def _first_within(result: Result) -> float | None:
    control = result.control
    if control is None or not control.targets:
        return None
    return control.targets[0].reached_min


def target_figure(result: Result, target_percent: np.ndarray | None = None,
                  tolerance: float = 0.05, height: int = 480) -> go.Figure:
    """End-tidal agent against its target band (top) and the dial (bottom).

    Parameters
    ----------
    result : Result
    target_percent : ndarray, shape (T,), vol%, optional
        Target at each output time; default the result's own targets (target mode).
    tolerance : float, fraction
        Half-width of the band drawn around the target.
    """
    t = result.time_min
    if target_percent is None and result.control is not None:
        target_percent = result.control.target_series(t)
    colour = agent(result.agent).colour
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, row_heights=[0.65, 0.35],
                        vertical_spacing=0.06,
                        subplot_titles=(f"End-tidal {result.agent} (vol%)", "Dial (vol%)"))
    if target_percent is not None:
        target = np.asarray(target_percent, dtype=float)
        fig.add_trace(go.Scatter(x=t, y=target * (1 + tolerance), mode="lines",
                                 line={"width": 0}, showlegend=False, hoverinfo="skip"),
                      row=1, col=1)
        fig.add_trace(go.Scatter(x=t, y=target * (1 - tolerance), mode="lines",
                                 line={"width": 0}, fill="tonexty",
                                 fillcolor="rgba(120,120,120,0.2)",
                                 name=f"target ± {100 * tolerance:g} %", hoverinfo="skip"),
                      row=1, col=1)
        fig.add_trace(go.Scatter(x=t, y=target, mode="lines", name="target",
                                 line={"color": "#555555", "dash": "dash"}), row=1, col=1)
    fig.add_trace(go.Scatter(x=t, y=result.end_tidal_percent("agent"), mode="lines",
                             name="end-tidal", line={"color": "#000000", "width": 2}),
                  row=1, col=1)
    fig.add_trace(go.Scatter(x=t, y=result.inspired_percent("agent"), mode="lines",
                             name="inspired", line={"color": colour, "width": 1.5}),
                  row=1, col=1)
    segments = result.plan.segments(500.0, 12.0)  # dial and flows do not depend on these
    starts = [s.start_min for s in segments] + [result.plan.duration_min]
    dials = [s.dial_percent for s in segments]
    fig.add_trace(go.Scatter(x=starts, y=[*dials, dials[-1]], mode="lines", line_shape="hv",
                             name="dial", line={"color": colour, "width": 2}), row=2, col=1)
    fig.update_xaxes(title_text="time (min)", row=2, col=1)
    fig.update_layout(height=height, hovermode="x unified",
                      margin={"l": 60, "r": 20, "t": 40, "b": 40})
    return fig


def decrement_figure(curves: Sequence[DecrementCurves], where: str = "end_tidal",
                     height: int = 420) -> go.Figure:
    """Decrement times (min) against case length (min), one colour per agent.

    Parameters
    ----------
    curves : sequence of DecrementCurves
    where : {"end_tidal", "brain"}
    """
    fig = go.Figure()
    dashes = ("dot", "dash", "solid", "longdash", "dashdot")
    for c in curves:
        colour = agent(c.agent).colour
        times = c.end_tidal_min if where == "end_tidal" else c.brain_min
        for j, p in enumerate(c.percents):
            fig.add_trace(go.Scatter(x=c.case_lengths_min, y=times[:, j], mode="lines+markers",
                                     name=f"{c.agent} {p:g} %", legendgroup=c.agent,
                                     line={"color": colour, "dash": dashes[j % len(dashes)]}))
        awake = c.awakening_end_tidal_min if where == "end_tidal" else c.awakening_brain_min
        fig.add_trace(go.Scatter(x=c.case_lengths_min, y=awake, mode="lines+markers",
                                 name=f"{c.agent} to {c.awakening_fraction:g} MAC",
                                 legendgroup=c.agent,
                                 line={"color": colour, "width": 4}, marker={"symbol": "star"}))
    label = "end-tidal" if where == "end_tidal" else "brain"
    fig.update_layout(height=height, xaxis_title="case length (min)",
                      yaxis_title=f"time after the vaporizer is turned off (min), {label}",
                      margin={"l": 60, "r": 20, "t": 30, "b": 50})
    return fig
