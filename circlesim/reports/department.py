"""The HTML report of a department review (front-end layer; needs plotly).

Built on :mod:`circlesim.reports.html`: the standing caution, a plain-language summary for a
meeting, the cases where the rule would have risked low FIO2 or a dry bag (listed first), the
distribution of savings with each case's 5–95 % interval, the totals per agent, every case,
the records that could not be reviewed with their errors, the method, and the rule as TOML.
"""

from __future__ import annotations

import os
from pathlib import Path

import plotly.graph_objects as go
import tomli_w
from plotly.subplots import make_subplots

from circlesim.department.review import DepartmentReview
from circlesim.reports.html import Section, write_report

__all__ = ["department_sections", "savings_figure", "write_department_report"]

#: ISO 5360 agent colours (sevoflurane yellow, desflurane blue, isoflurane purple, ...);
#: shades chosen to read on white.
AGENT_COLOURS = {"sevoflurane": "#c9a100", "desflurane": "#1f63b4", "isoflurane": "#7b3294",
                 "halothane": "#b22222", "enflurane": "#e66101"}

METHOD = [
    "For each record the patient is fitted to its own measurements (cardiac output, "
    "ventilation, O2 consumption, FRC, solubility and the circuit's leak, with the population "
    "as prior); where a record is too thin to fit, the population prior is used.",
    "The measured end-tidal agent is smoothed (a 5-minute running median) and held by the "
    "target controller twice: once at the flows that were recorded and once at the rule's "
    "flows. The saving is the difference between those two runs, so it measures the flows "
    "alone, not how the dial was handled. 'As recorded' is the record's own settings run for "
    "the fitted patient.",
    "Under the rule a warning the rule responds to (low FIO2, empty bag) raises the flow as "
    "the rule says, after the stated response time; the dip before the response still counts "
    "as a risk.",
    "Intervals: the same runs for patients drawn from the fit's uncertainty (Laplace "
    "approximation); 5 % and 95 % of the saving. Total intervals add up each draw over the "
    "cases. They cover the model's uncertainty about the patient, not the model's own "
    "structural error.",
    "CO2-equivalents count all agent and N2O delivered as emitted, with circlesim's sourced "
    "GWP values (GWP20 Ryan & Nielsen 2010; GWP100 Sulbaek Andersen et al. 2012; N2O IPCC "
    "AR6).",
]


def savings_figure(review: DepartmentReview) -> go.Figure:
    """Each case's liquid-agent saving (mL) with its 5–95 % interval, sorted, coloured by
    agent; beside it the saving as a share of the agent used at the recorded flows (%)."""
    fig = make_subplots(rows=1, cols=2, column_widths=[0.65, 0.35],
                        subplot_titles=("Saving per case, mL of liquid agent (5–95 %)",
                                        "Saving, % of agent at the recorded flows"))
    ordered = sorted(review.reviews, key=lambda r: r.saving["agent_ml"])
    for agent in review.agents:
        group = [(i, r) for i, r in enumerate(ordered) if r.agent == agent]
        colour = AGENT_COLOURS.get(agent, "#444444")
        fig.add_trace(go.Scatter(
            x=[i for i, _ in group], y=[r.saving["agent_ml"] for _, r in group],
            mode="markers", name=agent, marker={"color": colour, "size": 8,
                                                "symbol": ["x" if r.flagged else "circle"
                                                           for _, r in group]},
            error_y={"type": "data", "symmetric": False,
                     "array": [r.saving_high["agent_ml"] - r.saving["agent_ml"]
                               for _, r in group],
                     "arrayminus": [r.saving["agent_ml"] - r.saving_low["agent_ml"]
                                    for _, r in group]},
            text=[f"{r.name}{' (at risk)' if r.flagged else ''}" for _, r in group],
            hovertemplate="%{text}: %{y:.1f} mL<extra></extra>"), row=1, col=1)
        shares = [100.0 * r.saving["agent_ml"] / r.held.agent_ml for _, r in group
                  if r.held.agent_ml > 0]
        fig.add_trace(go.Histogram(x=shares, name=agent, marker={"color": colour},
                                   opacity=0.7, showlegend=False, nbinsx=15), row=1, col=2)
    fig.update_layout(barmode="group", height=420, margin={"t": 50, "b": 40},
                      legend={"title": "agent (x: at risk under the rule)"})
    fig.update_xaxes(title_text="cases, by saving", row=1, col=1)
    fig.update_yaxes(title_text="mL", row=1, col=1)
    fig.update_xaxes(title_text="%", row=1, col=2)
    fig.update_yaxes(title_text="cases", row=1, col=2)
    return fig


def department_sections(review: DepartmentReview) -> list[Section]:
    """The sections of the report."""
    invented = (["INVENTED DATA: these records were made by circlesim's model for a "
                 "demonstration; no patient was involved."] if review.invented else [])
    flagged = review.flagged
    risk_warnings = [f"{r.name} ({r.agent}): {r.risks()}." for r in flagged]
    sections = [Section("Summary for the meeting", paragraphs=review.summary(),
                        warnings=invented)]
    sections.append(Section("The rule", paragraphs=review.rule.describe()
                            + ([review.rule.note] if review.rule.note else [])))
    table = review.case_table()
    risky = table[table["case"].isin([r.name for r in flagged])]
    keep = ["case", "agent", "risk under the rule", "lowest FIO2 under the rule",
            f"min below FIO2 {review.rule.fio2_threshold:g} under the rule",
            "bag runs dry under the rule", "plausible patients at risk, %",
            "responses to warnings"]
    sections.append(Section(
        "Cases where the rule would have risked low FIO2 or a dry bag",
        paragraphs=[] if flagged else ["None: for every case the predicted FIO2 stayed above "
                                       "the threshold and the bag did not run dry."],
        tables=[risky[keep]] if flagged else [], warnings=risk_warnings))
    if review.reviews:
        sections.append(Section("Distribution of savings", figures=[savings_figure(review)]))
    sections.append(Section("Totals", tables=[review.totals_table()], paragraphs=[
        "Sums over the cases; liquid agent only per agent (mL of different agents do not "
        "add up). 'Recorded flows, course held' is the reference the saving is measured "
        "from."]))
    sections.append(Section("Every case (flagged first)", tables=[table]))
    if review.problems:
        sections.append(Section(
            "Records not reviewed", warnings=[f"{p.name}: {p.message}" for p in review.problems],
            paragraphs=["Each record below could not be read or reviewed; the others ran."]))
    sections.append(Section("Method", paragraphs=[
        *METHOD, f"{len(review.reviews)} case(s), {review.draws} drawn patients each, "
                 f"computed on {review.where} in {review.seconds:.0f} s."]))
    return sections


def write_department_report(path: str | os.PathLike, review: DepartmentReview, *,
                            overwrite: bool = False) -> Path:
    """Write the review's HTML report atomically (an existing file is kept unless
    ``overwrite``)."""
    title = f"Department review under the rule '{review.rule.name}'"
    if review.invented:
        title += " — INVENTED DATA"
    return write_report(path, title, department_sections(review),
                        inputs_toml=tomli_w.dumps(review.rule.to_dict()), overwrite=overwrite)
