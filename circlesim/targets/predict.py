"""The one public entry point for a prediction: dial plans go to the engine, target plans to
the controller.

:func:`simulate` (exported as ``circlesim.simulate``) looks at the plan: a plan of dial and
flow settings runs straight through the engine (:func:`circlesim.engine.simulate.simulate_dials`);
a plan whose steps hold end-tidal targets runs through :func:`simulate_with_targets`, where the
controller (:mod:`circlesim.targets.controller`) plays the person at the machine, its knob
changes are written as an ordinary plan (:mod:`circlesim.targets.assessment`), that plan is
run by the engine, and the result carries a :class:`~circlesim.targets.settings.ControlReport`
as ``result.control``.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from circlesim.base.validation import InputError
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan
from circlesim.engine.alerts import AlertRule, default_rules, evaluate_alerts
from circlesim.engine.result import Result
from circlesim.engine.runner import Runner
from circlesim.engine.simulate import simulate_dials
from circlesim.targets.assessment import assess, followable_plan, target_alerts
from circlesim.targets.controller import run_controller
from circlesim.targets.settings import ControllerSettings, ControlReport, concrete_plan

__all__ = ["simulate", "simulate_with_targets"]


def simulate(patient: Patient, circuit: Circuit, plan: Plan, *,
             vaporizer: Vaporizer | None = None, absorber: Absorber | None = None,
             output_interval_min: float = 0.1, method: str = "dopri5", rtol: float = 1e-6,
             initial_state: np.ndarray | None = None, fio2_threshold: float = 0.30,
             alert_rules: Iterable[AlertRule] | None = None) -> Result:
    """Predict what ``plan`` does for ``patient`` in ``circuit``.

    Parameters
    ----------
    patient : Patient
    circuit : Circuit
    plan : Plan
        Steps with an end-tidal target (target mode) are handed to the feedback controller,
        :func:`simulate_with_targets`, with its default settings; other plans run straight
        through the engine.
    vaporizer : Vaporizer, optional
        Default: a sevoflurane plenum vaporizer outside the circle.
    absorber : Absorber, optional
        Default: 1 kg of soda lime.
    output_interval_min : float, min, 0.005–10
        Spacing of the output times (step times are always included).
    method : str
        "dopri5" (compiled, default) or a ``scipy.integrate.solve_ivp`` method.
    rtol : float, 1e-12–1e-2
        Relative tolerance of the integrator.
    initial_state : ndarray, optional
        Continue from ``Result.final_state`` of an earlier run for the same patient and agent
        (its cumulative amounts start again from zero).
    fio2_threshold : float, 0.21–1
        Lowest acceptable inspired O2 fraction for the alerts (ignored if ``alert_rules`` is
        given).
    alert_rules : iterable of AlertRule, optional
        Rules to evaluate instead of :func:`circlesim.engine.alerts.default_rules`.

    Returns
    -------
    Result

    Raises
    ------
    InputError
        For invalid inputs, naming the field, the value and the allowed range.
    SimulationError
        If the integrator fails.
    """
    options = dict(vaporizer=vaporizer, absorber=absorber,
                   output_interval_min=output_interval_min, method=method, rtol=rtol,
                   initial_state=initial_state, fio2_threshold=fio2_threshold,
                   alert_rules=alert_rules)
    if isinstance(plan, Plan) and plan.has_targets:
        return simulate_with_targets(patient, circuit, plan, **options)
    return simulate_dials(patient, circuit, plan, **options)


def simulate_with_targets(patient: Patient, circuit: Circuit, plan: Plan, *,
                          vaporizer: Vaporizer | None = None, absorber: Absorber | None = None,
                          settings: ControllerSettings | None = None,
                          output_interval_min: float = 0.1, method: str = "dopri5",
                          rtol: float = 1e-6, initial_state: np.ndarray | None = None,
                          fio2_threshold: float = 0.30,
                          alert_rules: Iterable[AlertRule] | None = None) -> Result:
    """Run a plan whose steps may hold end-tidal targets, with the controller choosing the dial.

    Parameters
    ----------
    patient, circuit, plan, vaporizer, absorber, output_interval_min, method, rtol,
    initial_state, fio2_threshold, alert_rules
        As for :func:`simulate`.
    settings : ControllerSettings, optional
        How the controller works (default: decisions every 10 s, dial steps of 0.1 %, at
        least 1 min between changes, 5 % tolerance, flows never raised).

    Returns
    -------
    Result
        A run of the controller's plan (``result.plan``, dial and flow settings only), with
        ``result.control`` (:class:`ControlReport`): the requested plan, each target and
        whether it was met (if not: why and by how much). Unmet targets also appear in
        ``result.alerts``.

    Raises
    ------
    InputError
        For invalid inputs, naming the field, the value and the allowed range.
    """
    vaporizer = Vaporizer() if vaporizer is None else vaporizer
    absorber = Absorber() if absorber is None else absorber
    settings = ControllerSettings() if settings is None else settings
    if not isinstance(settings, ControllerSettings):
        raise InputError("settings must be a ControllerSettings; got "
                         f"{type(settings).__name__}.")
    if not isinstance(plan, Plan):
        raise InputError(f"plan must be a Plan; got {type(plan).__name__}.")
    base = concrete_plan(plan)
    runner = Runner(patient, circuit, absorber, vaporizer, base, rtol=rtol)
    segments = plan.segments(patient.default_tidal_volume_ml, patient.default_rate_per_min,
                             circuit.valve)
    mac = vaporizer.properties.mac_percent(patient.age_years)
    y0 = runner.inputs.y0
    if initial_state is not None:
        y0 = np.array(initial_state, dtype=float)
        if y0.shape != runner.inputs.y0.shape or not np.all(np.isfinite(y0)):
            raise InputError("initial_state must be the final_state of a result for the same "
                             f"patient and agent (length {runner.inputs.y0.size}); got shape "
                             f"{y0.shape}.")
    trace, decisions = run_controller(runner, segments, y0, runner.inputs.jumps, settings,
                                       mac)
    followable = followable_plan(plan, segments, trace, mac)
    rules = default_rules(fio2_threshold) if alert_rules is None else tuple(alert_rules)
    result = simulate_dials(patient, circuit, followable, vaporizer=vaporizer, absorber=absorber,
                      output_interval_min=output_interval_min, method=method, rtol=rtol,
                      initial_state=initial_state, alert_rules=rules)
    reports = assess(result, segments, runner, settings)
    report = ControlReport(requested_plan=plan, plan=followable, targets=reports,
                           settings=settings, decisions=decisions)
    object.__setattr__(result, "control", report)
    object.__setattr__(result, "alerts", evaluate_alerts(result, rules)
                       + target_alerts(reports))
    return result

