"""The standing caution and the warnings of the current plan, as HTML.

The warnings are the engine's alerts (:attr:`circlesim.engine.result.Result.alerts`, the rules of
:mod:`circlesim.engine.alerts`), each with the time it starts, and, in target mode, the target
controller's verdict on each target (:attr:`circlesim.targets.settings.ControlReport.targets`);
nothing
is re-derived here.
"""

from __future__ import annotations

import html
from collections.abc import Sequence

from circlesim.base.cautions import CAUTION
from circlesim.engine.result import Alert
from circlesim.targets.settings import TargetReport

__all__ = ["alerts_html", "caution_html", "error_html", "targets_html"]

_SEVERITY_WORD = {"danger": "Danger", "warning": "Warning", "caution": "Caution"}


def caution_html() -> str:
    """The standing caution (always on screen)."""
    return f"<div class='cs-caution'><b>Caution.</b> {html.escape(CAUTION)}</div>"


def _span(alert: Alert) -> str:
    if alert.end_min is None:
        return f"from {alert.start_min:.1f} min to the end"
    return f"{alert.start_min:.1f}–{alert.end_min:.1f} min"


def targets_html(targets: Sequence[TargetReport]) -> str:
    """Each end-tidal target of a plan in target mode: met or not, and by how much."""
    parts = []
    for rep in targets:
        kind, word = ("cs-none", "Target met") if rep.met else ("cs-warning", "Target not met")
        span = f"{rep.start_min:.1f}–{rep.end_min:.1f} min"
        parts.append(f"<div class='cs-alert cs-target {kind}'><span class='cs-badge'>{word}"
                     f"</span> <b>{span}</b>: {html.escape(rep.message)}</div>")
    return "".join(parts)


def alerts_html(alerts: Sequence[Alert], *, stale: bool = False,
                targets: Sequence[TargetReport] = ()) -> str:
    """The warnings panel for ``alerts`` (in start order).

    Parameters
    ----------
    alerts : sequence of Alert
    stale : bool
        The inputs on screen could not be run; say that the warnings belong to the last
        prediction that ran.
    targets : sequence of TargetReport
        End-tidal targets of a plan in target mode, listed first with their verdicts (an
        unmet target's alert is then not repeated).
    """
    head = "Warnings for this plan"
    if stale:
        head += " <span class='cs-unit'>(last prediction that ran)</span>"
    parts = [f"<div class='cs-panel-title'>{head}</div>", targets_html(targets)]
    if targets:
        alerts = [a for a in alerts if a.key != "target_not_met"]
    if not alerts and all(t.met for t in targets):
        parts.append("<div class='cs-alert cs-none'>No alert rule fires for this plan. Monitor "
                     "gases all the same.</div>")
    for a in alerts:
        word = _SEVERITY_WORD.get(a.severity, a.severity)
        parts.append(
            f"<div class='cs-alert cs-{html.escape(a.severity)}' "
            f"title='{html.escape(a.source, quote=True)}'>"
            f"<span class='cs-badge'>{word}</span> <b>{_span(a)}</b>: "
            f"{html.escape(a.message)}</div>")
    return "<div class='cs-alerts'>" + "".join(parts) + "</div>"


def error_html(message: str | None) -> str:
    """The inline error for inputs that could not be run ("" when there is none)."""
    if not message:
        return ""
    return (f"<div class='cs-error' role='alert'><b>Not run:</b> {html.escape(message)} "
            "<span class='cs-unit'>The figure still shows the last prediction that ran.</span>"
            "</div>")
