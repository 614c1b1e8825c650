"""Figures and HTML reports for measured cases: measured points on the predicted curves.

One panel per gas (the agent, O2, N2O, CO2), inspired and end-tidal in each; measured values
are markers, predictions lines; a forecast adds its 5–95 % band and shades the minutes the fit
used. Plotly is imported here, never in the analyses.
"""

from __future__ import annotations

import os
from pathlib import Path

import plotly.graph_objects as go
from plotly.subplots import make_subplots

from circlesim.cases.check import CaseCheck, series_values
from circlesim.cases.cohort import Calibration
from circlesim.cases.columns import MeasuredSeries
from circlesim.cases.fit import CaseFit
from circlesim.cases.forecast import Forecast
from circlesim.properties import agent as agent_properties
from circlesim.reports.html import Section, write_report

__all__ = ["calibration_sections", "check_figure", "forecast_figure", "write_case_report"]

_SITE_DASH = {"inspired": "dot", "end_tidal": "solid"}
_SITE_SYMBOL = {"inspired": "circle-open", "end_tidal": "circle"}
_GAS_COLOUR = {"oxygen": "#1f77b4", "nitrous_oxide": "#4b4b9a", "carbon_dioxide": "#555555",
               "nitrogen": "#2ca02c"}


def _gases(series: list[MeasuredSeries]) -> list[str]:
    order = []
    for s in series:
        if s.gas not in order:
            order.append(s.gas)
    return order


def _colour(gas: str) -> str:
    if gas in _GAS_COLOUR:
        return _GAS_COLOUR[gas]
    try:
        return agent_properties(gas).colour
    except Exception:  # an agent without a colour code
        return "#8c564b"


def _frame(gases: list[str], title: str) -> go.Figure:
    fig = make_subplots(rows=len(gases), cols=1, shared_xaxes=True, vertical_spacing=0.06,
                        subplot_titles=[g.replace("_", " ") + " (vol%)" for g in gases])
    fig.update_layout(title=title, height=260 * len(gases) + 80, template="plotly_white",
                      legend={"orientation": "h", "y": -0.08})
    fig.update_xaxes(title_text="time (min)", row=len(gases), col=1)
    return fig


def check_figure(check: CaseCheck) -> go.Figure:
    """Measured points and the predicted curves of a checked case."""
    series = list(check.record.measured)
    gases = _gases(series)
    fig = _frame(gases, f"{check.record.name}: measured and predicted ({check.model})")
    result = check.result
    for s in series:
        row = gases.index(s.gas) + 1
        colour = _colour(s.gas)
        fig.add_trace(go.Scatter(x=check.record.time_min, y=check.record.measured[s],
                                 mode="markers", name=f"{s.label}, measured", opacity=0.55,
                                 marker={"color": colour, "size": 4,
                                         "symbol": _SITE_SYMBOL[s.site]}), row=row, col=1)
        fig.add_trace(go.Scatter(x=result.time_min, y=series_values(result, s), mode="lines",
                                 name=f"{s.label}, predicted",
                                 line={"color": "#222222" if s.site == "end_tidal" else colour,
                                       "width": 2.5, "dash": _SITE_DASH[s.site]}),
                      row=row, col=1)
    return fig


def forecast_figure(forecast: Forecast) -> go.Figure:
    """The fit's minutes shaded, measured points, the forecast and its band."""
    series = list(forecast.record.measured)
    gases = _gases(series)
    low_pct, high_pct = forecast.percentiles
    fig = _frame(gases, f"{forecast.record.name}: fitted on the first {forecast.until_min:g} "
                        f"min, forecast of the rest ({low_pct:g}–{high_pct:g} % band)")
    t = forecast.time_min
    for s in series:
        row = gases.index(s.gas) + 1
        colour = _colour(s.gas)
        for hi, lo, shade, what in ((forecast.measured_high, forecast.measured_low, 0.10,
                                     "where measurements fall"),
                                    (forecast.high, forecast.low, 0.25, "band of the curve")):
            fig.add_trace(go.Scatter(x=list(t) + list(t[::-1]),
                                     y=list(hi[s]) + list(lo[s][::-1]),
                                     fill="toself", line={"width": 0}, fillcolor=colour,
                                     opacity=shade, name=f"{s.label}, {what}",
                                     hoverinfo="skip"), row=row, col=1)
        fig.add_trace(go.Scatter(x=forecast.record.time_min, y=forecast.record.measured[s],
                                 mode="markers", name=f"{s.label}, measured", opacity=0.55,
                                 marker={"color": colour, "size": 4,
                                         "symbol": _SITE_SYMBOL[s.site]}), row=row, col=1)
        fig.add_trace(go.Scatter(x=t, y=forecast.mode[s], mode="lines",
                                 name=f"{s.label}, fitted patient",
                                 line={"color": "#222222" if s.site == "end_tidal" else colour,
                                       "width": 2.5, "dash": _SITE_DASH[s.site]}),
                      row=row, col=1)
    fig.add_vrect(x0=0, x1=forecast.until_min, fillcolor="#999", opacity=0.12, line_width=0,
                  annotation_text="fitted", annotation_position="top left")
    return fig


def _measures_table(check: CaseCheck) -> tuple[list[str], list[list[object]]]:
    header = ["series", "samples", "MDPE %", "MDAPE %", "divergence %/h", "wobble %"]
    return header, check.table()


def _fit_section(fit: CaseFit) -> Section:
    rows = [[e.name.replace("_", " "), e.value if e.identified else None,
             e.low if e.identified else None, e.high if e.identified else None,
             e.prior_value, "yes" if e.identified else "not identified by these data"]
            for e in fit.estimates]
    return Section(
        "Fitted patient",
        paragraphs=[f"Maximum a posteriori estimates with 90 % intervals (Laplace "
                    f"approximation); factors multiply the textbook default. Residuals are "
                    f"{fit.noise_scale:.2f} × the monitor noise assumed."],
        tables=[(["parameter", "estimate", "5 %", "95 %", "prior median", "identified"], rows)])


def write_case_report(path: str | os.PathLike, check: CaseCheck, *,
                      forecast: Forecast | None = None, fit: CaseFit | None = None,
                      inputs_toml: str | None = None, overwrite: bool = False) -> Path:
    """An HTML report of a checked case (and of its fit and forecast, when given)."""
    record = check.record
    about = [f"Source: {record.source or 'not stated'}.",
             f"Provenance: {record.provenance or 'not stated'}; {record.patients} "
             f"patient{'s' if record.patients != 1 else ''} per value.",
             f"Model: {check.model}. Monitor: sampling delay "
             f"{record.monitor.sampling_delay_s:g} s, rise time {record.monitor.rise_time_s:g} s.",
             "Performance error PE = (measured − predicted) / predicted; MDPE = median PE "
             "(bias), MDAPE = median |PE| (inaccuracy), divergence = slope of |PE| against "
             "time, wobble = median |PE − MDPE| (Varvel, Donoho & Shafer, J Pharmacokinet "
             "Biopharm 1992;20:63–94)."]
    if record.note:
        about.append(f"Note: {record.note}")
    sections = [Section("The case and the prediction", paragraphs=about,
                        tables=[_measures_table(check)], figures=[check_figure(check)],
                        warnings=[str(a) for a in check.result.alerts])]
    if fit is not None:
        sections.append(_fit_section(fit))
    if forecast is not None:
        header = ["series", "held-out samples", "MDPE % (fitted)", "MDAPE % (fitted)",
                  "MDPE % (unfitted)", "MDAPE % (unfitted)", "inside band %"]
        sections.append(Section(
            f"Forecast after {forecast.until_min:g} min",
            paragraphs=[f"Fitted on the measurements up to {forecast.until_min:g} min; the "
                        f"band is the {forecast.percentiles[0]:g}–{forecast.percentiles[1]:g} "
                        f"% range of the model's curve over {forecast.draws} draws of the "
                        f"fitted parameters ({forecast.effective_draws:.0f} effective); the "
                        "lighter band adds the monitor's noise: where a measurement is "
                        "expected to fall. 'inside band' counts the held-out measurements "
                        "within that lighter band."],
            tables=[(header, forecast.table())], figures=[forecast_figure(forecast)]))
    return write_report(path, f"circlesim case check: {record.name}", sections,
                        inputs_toml=inputs_toml, overwrite=overwrite)


def calibration_sections(calibration: Calibration) -> list[Section]:
    """Report sections of a cohort calibration: the profile and the leave-one-out check."""
    profile = calibration.profile
    rows = [[k.replace("_", " "), v, profile.spread_log.get(k)]
            for k, v in profile.factors.to_dict().items()]
    header = ["series", "cases", "MDPE % default", "MDAPE % default",
              "MDPE % profile (case left out)", "MDAPE % profile (case left out)"]
    return [Section(f"Cohort profile '{profile.name}'",
                    paragraphs=[profile.label(), f"Fits ran on {calibration.where}."],
                    tables=[(["factor", "median", "spread (SD of log)"], rows)],
                    warnings=[f"{name}: {error}" for name, error in calibration.problems]),
            Section("Leave-one-case-out check",
                    paragraphs=["Each case predicted by the profile calibrated on the other "
                                "cases (unfitted), beside the textbook default model; medians "
                                "over cases of Varvel's measures."],
                    tables=[(header, calibration.pooled_table())])]
