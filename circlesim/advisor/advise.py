"""The plan advisor: flow and dial schedules that meet end-tidal targets at least cost (analysis).

Given a patient, a breathing system, a vaporizer, end-tidal targets
(:class:`~circlesim.advisor.inputs.Targets`: a level in vol% or × age-adjusted MAC, the time
allowed to reach it, later changes) and limits (:class:`~circlesim.advisor.inputs.Constraints`:
lowest FIO2, lowest and highest fresh gas flow, largest dial, at most N changes per hour, the
agent's labelling), :func:`advise` finds a piecewise-constant plan of flows and dial settings
that keeps end-tidal agent within the tolerance of the targets and uses the least liquid agent,
the least CO2-equivalent, or reaches the target soonest.

How it searches
---------------
The plan has a wash-in stretch at flow F1 until time t1, then flow F2; the dial may change at
t1 and every 60/N minutes after it. For each (F1, t1, F2) the dials come from a mixed-integer
programme on the linearised model (:func:`circlesim.advisor.schedule.solve_dials`, scipy's HiGHS
``milp``), checked against the exact model. F2 is the lowest flow the limits allow that still
fits; F1 is scanned upwards from F2; t1 is refined with :func:`scipy.optimize.minimize_scalar`
(:mod:`circlesim.advisor.search`). Every plan returned is re-run with
:func:`circlesim.simulate` and every limit checked on that run
(:attr:`~circlesim.advisor.answer.Advice.checks`, :mod:`circlesim.advisor.checks`).

When the targets cannot be met (a target above what the vaporizer can give, no time allowed,
limits that contradict each other) the advice says which limit cannot be met and gives the
closest plan that respects the others (:attr:`~circlesim.advisor.answer.Advice.feasible` is
False; :mod:`circlesim.advisor.explain`).

For a single agent with an O2/air carrier the CO2-equivalent is the agent's mass times its
GWP, so "agent" and "co2e" choose the same plan; both figures are reported.

This module holds the entry point :func:`advise`; the trade-off curve is in
:mod:`circlesim.advisor.pareto`.
"""

from __future__ import annotations

import time
from dataclasses import replace

import numpy as np

from circlesim.advisor.answer import Advice
from circlesim.advisor.checks import check_plan, reconcile
from circlesim.advisor.explain import diagnose, explain, too_soon
from circlesim.advisor.inputs import OBJECTIVES, Constraints, Targets
from circlesim.advisor.pareto import pareto_front
from circlesim.advisor.search import EPS as _EPS
from circlesim.advisor.search import Problem, fix_fio2, plan_of
from circlesim.base.units import atpd_to_stpd
from circlesim.base.validation import InputError, Interval, check_choice, check_number
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan, Step
from circlesim.engine.result import Result
from circlesim.engine.runner import Runner
from circlesim.outcomes.emissions import DEFAULT_GWP_HORIZON, co2_equivalent_kg, gwp
from circlesim.targets.predict import simulate, simulate_with_targets
from circlesim.targets.settings import ControllerSettings

__all__ = ["advise"]


def advise(patient: Patient, circuit: Circuit, vaporizer: Vaporizer, targets: Targets,
           constraints: Constraints | None = None, objective: str = "agent", *,
           absorber: Absorber | None = None, pareto: bool = True,
           reference_fgf_l_min: float = 4.0, gwp_horizon_years: int = DEFAULT_GWP_HORIZON
           ) -> Advice:
    """Recommend a flow and dial plan that meets ``targets`` within ``constraints``.

    Parameters
    ----------
    patient, circuit, vaporizer
        As for :func:`circlesim.simulate` (a vaporizer outside or inside the circle).
    targets : Targets
    constraints : Constraints, optional
    objective : {"agent", "co2e", "time"}
        Least liquid agent, least CO2-equivalent, or soonest at the target (then least agent).
    absorber : Absorber, optional
    pareto : bool
        Also compute the trade-off between time to target and agent used.
    reference_fgf_l_min : float, L/min, 1–20
        Flow of the plain high-flow plan the advice is compared with.
    gwp_horizon_years : {20, 100}
        Horizon of the global-warming potential for the CO2-equivalents.

    Returns
    -------
    Advice

    Raises
    ------
    InputError
        For invalid inputs (a bad number, a dial limit above the vaporizer's range).
    """
    start = time.perf_counter()
    absorber = Absorber() if absorber is None else absorber
    constraints = Constraints() if constraints is None else constraints
    for name, obj, kind in (("patient", patient, Patient), ("circuit", circuit, Circuit),
                            ("vaporizer", vaporizer, Vaporizer), ("targets", targets, Targets),
                            ("constraints", constraints, Constraints),
                            ("absorber", absorber, Absorber)):
        if not isinstance(obj, kind):
            raise InputError(f"{name} must be a {kind.__name__}; got {type(obj).__name__}.")
    objective = check_choice("advise", "objective", objective, OBJECTIVES)
    check_number("advise", "reference_fgf_l_min", reference_fgf_l_min,
                 Interval(1.0, 20.0, "L/min"))
    gwp_value = gwp(vaporizer.agent, gwp_horizon_years)
    if (constraints.max_dial_percent is not None
            and constraints.max_dial_percent > vaporizer.max_dial + _EPS):
        raise InputError(f"Constraints.max_dial_percent must be a number from 0.1 to "
                         f"{vaporizer.max_dial:g} vol% (the {vaporizer.agent} vaporizer's "
                         f"range); got {constraints.max_dial_percent:g}.")
    max_dial = (vaporizer.max_dial if constraints.max_dial_percent is None
                else constraints.max_dial_percent)
    mac = vaporizer.properties.mac_percent(patient.age_years)
    problems, min_fgf, max_fgf = reconcile(constraints, vaporizer, targets)
    reference_plan = Plan((Step(0.0, o2_l_min=1.0, air_l_min=1.0, dial_percent=0.0),),
                          duration_min=targets.duration_min)
    runner = Runner(patient, circuit, absorber, vaporizer, reference_plan)
    vo2 = patient.vo2 / 1000.0 / atpd_to_stpd(circuit.gas_temperature_c,
                                              circuit.ambient_pressure_kpa)
    prob = Problem(runner, targets, constraints, mac, max_dial, min_fgf, max_fgf,
                    targets.levels_percent(mac), vo2)
    deadline = targets.reach_within_min
    if deadline <= 0.0:
        best, when = prob.fastest(targets.duration_min / 4)
        problems.append(
            "A target time of 0 min cannot be met: end-tidal agent starts from zero and rises "
            "only as the lungs and circuit fill. "
            + (f"The soonest this equipment reaches the target is about {when:.1f} min (the "
               "plan given)." if best.fits else ""))
    elif objective == "time":
        best, when = prob.fastest(deadline)
        if best.fits:
            cheaper = prob.least_agent(when, refine=False)
            if cheaper.fits and cheaper.agent_ml < best.agent_ml:
                best = cheaper
            if when > deadline + _EPS:
                problems.append(too_soon(prob, deadline, when))
    else:
        best = prob.least_agent(deadline)
        if not best.fits:
            fast, when = prob.fastest(deadline)
            if fast.fits and when > deadline + _EPS:  # reachable, only later than allowed
                problems.append(too_soon(prob, deadline, when))
                later = prob.least_agent(when, refine=False)
                best = later if later.fits else fast
    best = fix_fio2(prob, best)
    result = simulate(patient, circuit, plan_of(prob, best, objective),
                      vaporizer=vaporizer, absorber=absorber,
                      fio2_threshold=constraints.min_fio2)
    checks = check_plan(result, targets, constraints, max_dial)
    if not constraints.follow_labelling:
        checks.pop("labelling")
    if not problems and (not best.fits or not all(checks.values())):
        problems.extend(diagnose(prob, best, checks, deadline))
    elif not checks.get("fio2", True):
        problems.extend(diagnose(prob, best, {"fio2": False}, deadline))
    agent_ml = float(result.agent_delivered_ml[-1])
    co2e = _co2e(result, gwp_value)
    reference = _reference(patient, circuit, absorber, vaporizer, targets,
                           reference_fgf_l_min)
    ref_ml = float(reference.agent_delivered_ml[-1])
    points = pareto_front(prob, deadline, best, gwp_value) if pareto else ()
    feasible = not problems
    reach = _time_to_target(result, targets, mac)
    advice = Advice(
        feasible=feasible, plan=result.plan, result=result, objective=objective,
        agent_ml=agent_ml, co2e_kg=co2e, time_to_target_min=reach, reference=reference,
        reference_fgf_l_min=float(reference_fgf_l_min), saved_ml=ref_ml - agent_ml,
        saved_percent=100.0 * (ref_ml - agent_ml) / ref_ml if ref_ml > 0 else 0.0,
        pareto=points, checks=checks, problems=tuple(problems), explanation="",
        gwp_horizon_years=int(gwp_horizon_years), elapsed_s=0.0,
        evaluations=runner.calls)
    return replace(advice, explanation=explain(advice, prob, best, reference),
                   elapsed_s=time.perf_counter() - start)


# ---- helpers of advise -------------------------------------------------------------------------
def _time_to_target(result: Result, targets: Targets, mac: float) -> float | None:
    level = targets.levels_percent(mac)[0][1]
    e = np.abs(result.end_tidal_percent("agent") / level - 1.0) <= targets.tolerance
    return float(result.time_min[np.argmax(e)]) if e.any() else None


def _co2e(result: Result, gwp_value) -> float | None:
    grams = float(result.grams(result.cumulative["delivered"][-1, result.gas_index("agent")]))
    return co2_equivalent_kg(grams, gwp_value)


def _reference(patient: Patient, circuit: Circuit, absorber: Absorber, vaporizer: Vaporizer,
               targets: Targets, flow: float) -> Result:
    """A plain high-flow plan: O2/air 1:1 at ``flow``, the controller holding the targets."""
    key = "target_mac" if targets.unit == "MAC" else "target_end_tidal_percent"
    first = (targets.end_tidal_mac if targets.unit == "MAC" else targets.end_tidal_percent)
    steps = [Step(0.0, o2_l_min=flow / 2, air_l_min=flow / 2, note=f"plain {flow:g} L/min",
                  **{key: first})]
    steps += [Step(t, **{key: v}) for t, v in targets.changes]
    plan = Plan(tuple(steps), duration_min=targets.duration_min,
                name=f"plain high flow ({flow:g} L/min)")
    return simulate_with_targets(patient, circuit, plan, vaporizer=vaporizer,
                                 absorber=absorber, settings=ControllerSettings())
