"""The advisor's words: why a target or limit cannot be met, and the advice explained (analysis).

:func:`too_soon` and :func:`diagnose` say which target or limit cannot be met and by how much,
with end-tidal agent (vol%) the equipment can give at most; :func:`explain` writes
:attr:`circlesim.advisor.answer.Advice.explanation`.
"""

from __future__ import annotations

import numpy as np

from circlesim.advisor.answer import Advice
from circlesim.advisor.search import Candidate, Problem
from circlesim.engine.result import Result
from circlesim.engine.runner import Knobs

__all__ = ["diagnose", "explain", "too_soon"]


def _full_dial_et(prob: Problem, time_min: float) -> float:
    """End-tidal agent (vol%) at ``time_min`` with the dial fully open at the highest flow
    allowed from the start: the most the equipment can give by then."""
    runner = prob.runner
    full = Knobs(*prob.flows(prob.max_fgf), n2o_l_min=0.0, dial_percent=prob.max_dial,
                 tidal_volume_ml=runner.patient.default_tidal_volume_ml,
                 rate_per_min=runner.patient.default_rate_per_min, valve=runner.circuit.valve)
    at = max(time_min, 0.1)
    states, _ = runner.run(runner.initial_state(full), [full], np.array([0.0, at]),
                           np.array([at]))
    return float(states[-1, runner.et_index]) * 100.0


def too_soon(prob: Problem, deadline: float, when: float) -> str:
    """Why the target cannot be reached in the time allowed, with the numbers.

    Parameters
    ----------
    prob : Problem
    deadline : float, min
        Time allowed to reach the first target.
    when : float, min
        Soonest time the limits allow.
    """
    et = _full_dial_et(prob, deadline)
    first = prob.levels[0][1]
    return (f"The target cannot be reached within {deadline:g} min: even at "
            f"{prob.max_fgf:g} L/min with the dial at {prob.max_dial:g} % end-tidal is only "
            f"{et:.2f} % then ({100 * (1 - et / first):.0f} % short of {first:.2f} %). The plan "
            f"given reaches it as soon as the limits allow, at about {when:.1f} min.")


def diagnose(prob: Problem, best: Candidate, checks: dict[str, bool], deadline: float
             ) -> list[str]:
    """Which target or limit the closest plan misses, and by how much.

    Parameters
    ----------
    prob : Problem
    best : Candidate
        The closest plan.
    checks : dict of str to bool
        Each limit checked on a run of it (:func:`circlesim.advisor.checks.check_plan`).
    deadline : float, min
        Time allowed to reach the first target.
    """
    out = []
    if not checks.get("end_tidal_target", True) or not best.fits:
        at_end = _full_dial_et(prob, prob.targets.duration_min)
        tol = prob.targets.tolerance
        top = max(level for _, level in prob.levels)
        if at_end < (1.0 - tol) * top:
            out.append(f"The target end-tidal {top:.2f} % is above what the {prob.max_dial:g} % "
                       f"dial can give at any allowed flow: even at {prob.max_fgf:g} L/min with "
                       f"the dial fully open end-tidal reaches only {at_end:.2f} % "
                       f"({100 * (1 - at_end / top):.0f} % short). The plan given comes "
                       "closest.")
        else:
            out.append(f"No plan within the limits keeps end-tidal within "
                       f"{100 * tol:g} % of the target (closest: "
                       f"{100 * best.solution.excursion:.1f} % beyond the band). Allow more "
                       "changes per hour, a finer dial step or a wider flow range.")
    if not checks.get("fio2", True):
        out.append(f"FIO2 cannot be kept above {prob.constraints.min_fio2:g} with these flows; "
                   "raise the lowest flow or the O2 share.")
    for key, words in (("flow_range", "the flow range"), ("dial_range", "the dial limit"),
                       ("changes_per_hour", "the number of changes per hour"),
                       ("labelling", "the agent's labelling")):
        if not checks.get(key, True):
            out.append(f"The closest plan does not keep to {words}.")
    return out


def explain(advice: Advice, prob: Problem, best: Candidate, reference: Result) -> str:
    """The advice in words: the aim and limits, the plan (or why it cannot be met), the
    predicted time to target (min), agent (mL) and CO2-equivalent (kg), and the saving against
    the plain high-flow ``reference``.

    Parameters
    ----------
    advice : Advice
        The advice so far (its explanation still empty).
    prob : Problem
    best : Candidate
        The plan advised (or the closest one).
    reference : Result
        The run of the plain high-flow plan.
    """
    t = prob.targets
    c = prob.constraints
    agent = prob.runner.vaporizer.agent
    first = prob.levels[0][1]
    unit_text = (f"{t.end_tidal_mac:g} MAC ({first:.2f} %)" if t.unit == "MAC"
                 else f"{first:.2f} %")
    goal = {"agent": "the least liquid agent", "co2e": "the least CO2-equivalent",
            "time": "the soonest time to target"}[advice.objective]
    lines = [f"Aim: end-tidal {agent} {unit_text} within {t.reach_within_min:g} min, held "
             f"within ±{100 * t.tolerance:g} % to {t.duration_min:g} min, with {goal}; limits: "
             f"flow {prob.min_fgf:g}–{prob.max_fgf:g} L/min, FIO2 ≥ {c.min_fio2:g}, dial ≤ "
             f"{prob.max_dial:g} % in {c.dial_step_percent:g} % steps, at most "
             f"{c.max_changes_per_hour} changes per hour"
             + (", product labelling followed." if c.follow_labelling else ".")]
    if advice.feasible:
        lines.append("Plan: " + _describe_plan(best))
    else:
        lines.append("Cannot be met: " + " ".join(advice.problems))
        lines.append("Closest plan: " + _describe_plan(best))
    reach = advice.time_to_target_min
    lines.append(f"Predicted: target reached at {reach:.1f} min; " if reach is not None else
                 "Predicted: target not reached; ")
    co2 = "" if advice.co2e_kg is None else (
        f", {advice.co2e_kg:.1f} kg CO2-equivalent (GWP{advice.gwp_horizon_years})")
    lines[-1] += f"{advice.agent_ml:.1f} mL of liquid {agent}{co2}."
    ref_ml = float(reference.agent_delivered_ml[-1])
    missed = [r for r in reference.control.targets if not r.met]
    if not advice.reference_holds_target:  # no like-for-like yardstick: say so
        lines.append(f"Against a plain {advice.reference_fgf_l_min:g} L/min plan, which does "
                     f"NOT hold the same target ({missed[0].message.rstrip('.')}), "
                     f"{ref_ml:.1f} mL: {advice.saved_ml:.1f} mL saved "
                     f"({advice.saved_percent:.0f} %), not a like-for-like comparison.")
    else:
        lines.append(f"Against a plain {advice.reference_fgf_l_min:g} L/min plan holding the "
                     f"same target ({ref_ml:.1f} mL): {advice.saved_ml:.1f} mL saved "
                     f"({advice.saved_percent:.0f} %).")
    return "\n".join(lines)


def _describe_plan(cand: Candidate) -> str:
    sch = cand.solution.schedule
    first = sch.knobs[0]
    text = (f"start at {first.fgf_l_min:g} L/min (O2 {first.o2_l_min:g}, air "
            f"{first.air_l_min:g}) with the dial at {first.dial_percent:g} %")
    if cand.washin_fgf != cand.maintenance_fgf:
        text += f"; at {cand.t1:.1f} min reduce to {cand.maintenance_fgf:g} L/min"
    dials = [k.dial_percent for k in sch.knobs[1:]]
    if dials:
        text += f"; the dial then {min(dials):g}–{max(dials):g} % ({len(sch.changes())} changes)"
    return text + "."
