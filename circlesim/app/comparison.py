"""The outcomes table: the current plan alone, or beside a reference plan with differences.

Values come from :func:`circlesim.outcomes.summary.summarise` (see :class:`~circlesim.app.runner.
Prediction`) and, for plans in target mode, from the controller's verdicts
(:attr:`circlesim.targets.settings.ControlReport.targets`); this module only lays them out.
"""

from __future__ import annotations

import html
from collections.abc import Callable
from dataclasses import dataclass

from circlesim.app.runner import Prediction
from circlesim.outcomes.summary import CaseSummary
from circlesim.targets.settings import TargetReport

__all__ = ["METRICS", "Metric", "outcome_table", "table_html", "target_status"]


@dataclass(frozen=True)
class Metric:
    """One row of the table.

    Parameters
    ----------
    label : str
    value : callable taking CaseSummary, returning float or None
        None means "does not happen" (e.g. the target is never reached).
    fmt : str
        Format of the value, e.g. "{:.1f} min".
    missing : str
        Shown for None.
    """

    label: str
    value: Callable[[CaseSummary], float | None]
    fmt: str
    missing: str = "—"

    def text(self, summary: CaseSummary) -> str:
        v = self.value(summary)
        return self.missing if v is None else self.fmt.format(v)

    def difference(self, current: CaseSummary, reference: CaseSummary) -> str:
        a, b = self.value(current), self.value(reference)
        if a is None or b is None:
            return "—"
        size = self.fmt.format(abs(a - b))
        if size == self.fmt.format(0.0):
            return size  # no sign on a difference that rounds to zero
        return ("+" if a > b else "-") + size


METRICS: tuple[Metric, ...] = (
    Metric("Time to end-tidal target", lambda s: s.time_to_target_min, "{:.1f} min",
           "not reached"),
    Metric("Liquid agent used", lambda s: s.agent_delivered_ml, "{:.1f} mL"),
    Metric("Agent vented to scavenging", lambda s: s.agent_vented_ml, "{:.1f} mL"),
    Metric("Lowest FIO2", lambda s: s.lowest_fio2, "{:.3f}"),
    Metric("Time below FIO2 threshold", lambda s: s.minutes_below_fio2_threshold, "{:.1f} min"),
    Metric("Absorbent used", lambda s: s.absorbent_used_percent, "{:.0f} %"),
)


def outcome_table(current: Prediction, reference: Prediction | None = None) -> tuple[
        list[str], list[list[str]]]:
    """Header and rows: one column for the current plan, or reference, current, difference.

    The target row names the target in vol% (it depends on the patient's age-adjusted MAC).
    """
    s = current.summary
    target = (f"Time to end-tidal target ({current.scenario.report.target_end_tidal_mac:g} MAC "
              f"= {s.target_end_tidal_percent:.2f} % {s.agent})")
    rows = []
    for m in METRICS:
        label = target if m.label == "Time to end-tidal target" else m.label
        if reference is None:
            rows.append([label, m.text(s)])
        else:
            r = reference.summary
            rows.append([label, m.text(r), m.text(s), m.difference(s, r)])
    rows += _target_rows(current, reference)
    if reference is None:
        return ["Outcome", "current plan"], rows
    return ["Outcome", "reference plan", "current plan", "difference"], rows


def target_status(rep: TargetReport, tolerance: float = 0.05) -> str:
    """A target's verdict in a few words: when it was reached, or by how much it missed.

    Parameters
    ----------
    rep : TargetReport
    tolerance : float, fraction
        The controller's tolerance (``ControlReport.settings.tolerance``).
    """
    if rep.met:
        return f"met: within {100 * tolerance:g} % from {rep.reached_min:.1f} min"
    if rep.reached_min is None:
        side, size = (("below", rep.largest_below_percent) if rep.largest_below_percent > 0
                      else ("above", rep.largest_above_percent))
        return f"NOT met: stays {size:.0f} % {side}"
    if rep.deadline_min is not None and rep.reached_min > rep.deadline_min + 1e-9:
        return (f"NOT met: reached at {rep.reached_min:.1f} min, "
                f"{rep.reached_min - rep.deadline_min:.1f} min late")
    return (f"NOT met: up to {rep.largest_below_percent:.0f} % below, "
            f"{rep.largest_above_percent:.0f} % above")


def _targets(prediction: Prediction | None) -> list[str]:
    """The verdict of each target of a plan in target mode (none otherwise)."""
    control = None if prediction is None else prediction.result.control
    if control is None:
        return []
    return [target_status(rep, control.settings.tolerance) for rep in control.targets]


def _target_rows(current: Prediction, reference: Prediction | None) -> list[list[str]]:
    """One row per end-tidal target (target mode) of either plan."""
    mine, theirs = _targets(current), _targets(reference)
    reports = [p.result.control.targets for p in (current, reference)
               if p is not None and p.result.control is not None]
    rows = []
    for i in range(max(len(mine), len(theirs))):
        rep = next(r[i] for r in reports if i < len(r))
        label = (f"Target {i + 1}: {rep.target_mac:.2f} MAC = {rep.target_percent:.2f} % "
                 f"from {rep.start_min:g} min"
                 + (f", by {rep.deadline_min:g} min" if rep.deadline_min is not None else ""))
        now = mine[i] if i < len(mine) else "no target"
        if reference is None:
            rows.append([label, now])
        else:
            rows.append([label, theirs[i] if i < len(theirs) else "no target", now, "—"])
    return rows


def table_html(header: list[str], rows: list[list[str]], title: str = "") -> str:
    """A small HTML table."""
    head = "".join(f"<th>{html.escape(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in row) + "</tr>"
                   for row in rows)
    caption = f"<div class='cs-panel-title'>{html.escape(title)}</div>" if title else ""
    return (f"{caption}<table class='cs-table'><thead><tr>{head}</tr></thead>"
            f"<tbody>{body}</tbody></table>")
