"""The advisor's limits: conflicts among them, the agent's labelling, and a plan checked (analysis).

:func:`reconcile` finds limits that contradict each other (or the labelling) and gives the flow
range (L/min) actually searched; :func:`labelling_mac_hours` reads the labelling's MAC-hour
limit from circlesim's alert rules; :func:`check_plan` checks every target and limit on a run
of a plan (:attr:`circlesim.advisor.answer.Advice.checks`).
"""

from __future__ import annotations

import numpy as np

from circlesim.advisor.inputs import Constraints, Targets
from circlesim.domain.equipment import Vaporizer
from circlesim.engine.alerts import default_rules
from circlesim.engine.result import Result

__all__ = ["check_plan", "labelling_mac_hours", "reconcile"]


def reconcile(constraints: Constraints, vaporizer: Vaporizer, targets: Targets
              ) -> tuple[list[str], float, float]:
    """Problems with the limits themselves, and the flow range actually searched.

    Returns
    -------
    problems : list of str
        Limits that cannot hold together (or with the labelling), and what the plan does.
    min_fgf, max_fgf : float, L/min
        Fresh gas flow range to search.
    """
    problems: list[str] = []
    lo, hi = constraints.min_fgf_l_min, constraints.max_fgf_l_min
    if lo > hi:
        problems.append(f"The lowest fresh gas flow ({lo:g} L/min) is above the highest "
                        f"({hi:g} L/min): both cannot hold. The plan given keeps the flow at "
                        f"{lo:g} L/min and meets the other limits.")
        hi = lo
    label = _labelling_min_flow(vaporizer.agent) if constraints.follow_labelling else None
    if label is not None and label > lo:
        if label > hi:
            problems.append(f"The {vaporizer.agent} labelling asks for at least {label:g} L/min "
                            f"of fresh gas, above the highest flow allowed ({hi:g} L/min): both "
                            f"cannot hold. The plan given follows the labelling.")
            hi = label
        lo = label
    if constraints.max_changes_per_hour == 0 and targets.changes:
        problems.append("With no changes allowed (max_changes_per_hour = 0) the later "
                        "changes of the target cannot be followed; the plan given holds one "
                        "setting throughout.")
    return problems, lo, hi


def _labelling_min_flow(agent: str) -> float | None:
    """Lowest flow the agent's labelling allows, from circlesim's alert rules (or None)."""
    for rule in default_rules():
        if (rule.agents is not None and agent in rule.agents
                and rule.watches == "fresh_gas_while_agent_l_min"):
            return float(rule.threshold)
    return None


def labelling_mac_hours(agent: str) -> float | None:
    """Most MAC-hours the agent's labelling allows at 1 to < 2 L/min (alert rules), or None."""
    for rule in default_rules():
        if (rule.agents is not None and agent in rule.agents
                and rule.watches == "mac_hours_at_1_to_2_l_min"):
            return float(rule.threshold)
    return None


def check_plan(result: Result, targets: Targets, constraints: Constraints,
               max_dial: float) -> dict[str, bool]:
    """Each target and limit, checked on a run of a plan (``True``: met).

    Keys: "end_tidal_target", "fio2", "flow_range", "dial_range", "changes_per_hour",
    "labelling".
    """
    t = result.time_min
    et = result.end_tidal_percent("agent")
    mac = result.mac_percent
    levels = targets.levels_percent(mac)
    tol = targets.tolerance
    ok_target = True
    for i, (start, level) in enumerate(levels):
        last = i + 1 == len(levels)
        end = targets.duration_min if last else levels[i + 1][0]
        within = (t <= end + 1e-6) if last else (t < end - 1e-6)
        judged = (t >= start + targets.reach_within_min - 1e-6) & within
        if judged.any():
            ok_target &= bool(np.all(np.abs(et[judged] / level - 1.0) <= tol + 1e-9))
        before = (t >= start) & ~judged & within
        if before.any():  # on the way: never past the higher of the old and new level
            ceiling = max(level, levels[i - 1][1] if i else level)
            ok_target &= bool(np.all(et[before] <= (1.0 + tol) * ceiling + 1e-9))
    fio2 = result.inspired[:, result.gas_index("oxygen")]
    segments = result.plan.segments(result.patient.default_tidal_volume_ml,
                                    result.patient.default_rate_per_min, result.circuit.valve)
    flows = np.array([s.fgf_l_min for s in segments])
    dials = np.array([s.dial_percent for s in segments])
    changes = np.array(result.plan.step_times[1:])
    n = constraints.max_changes_per_hour
    per_hour = max((int(np.sum((changes >= c - 1e-9) & (changes < c + 60.0 - 1e-9)))
                    for c in changes), default=0)
    labelling = True
    if constraints.follow_labelling:
        keys = {r.key for r in default_rules(constraints.min_fio2)
                if r.agents is not None and result.agent in r.agents}
        labelling = not any(a.key in keys for a in result.alerts)
    return {
        "end_tidal_target": ok_target,
        "fio2": bool(np.all(fio2 >= constraints.min_fio2 - 1e-9)),
        "flow_range": bool(np.all(flows >= constraints.min_fgf_l_min - 1e-9)
                           and np.all(flows <= constraints.max_fgf_l_min + 1e-9)),
        "dial_range": bool(np.all(dials <= max_dial + 1e-9)),
        "changes_per_hour": per_hour <= n,
        "labelling": labelling,
    }
