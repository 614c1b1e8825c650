"""The engine: integrate a plan segment by segment and return a
:class:`~circlesim.engine.result.Result`.

Two integrators solve the same equations (:mod:`circlesim.engine.model`):

* ``method="dopri5"`` (default): the compiled Dormand–Prince 5(4) integrator of
  :mod:`circlesim.engine.solver`, about a millisecond for a four-hour plan;
* any ``scipy.integrate.solve_ivp`` method ("LSODA", "BDF", "Radau", "RK45", …), restarted at
  every step of the plan; used as the reference in the tests and benchmarks.

A failed integration raises :class:`SimulationError` with the solver's message; it never hands
back NaNs quietly.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import replace

import numpy as np
from scipy.integrate import solve_ivp

from circlesim.base.validation import InputError, Interval, check_number
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan
from circlesim.engine import layout
from circlesim.engine import model as m
from circlesim.engine.alerts import AlertRule, default_rules, evaluate_alerts
from circlesim.engine.assembly import ModelInputs, assemble
from circlesim.engine.result import Result, SolverReport
from circlesim.engine.solver import STATUS_MESSAGES, integrate

__all__ = ["SimulationError", "build_result", "simulate_dials", "solve_states"]

SCIPY_METHODS = ("LSODA", "BDF", "Radau", "RK45", "RK23", "DOP853")
MAX_STEPS = 2_000_000


class SimulationError(RuntimeError):
    """The integrator could not finish the plan."""


def output_times(duration_min: float, interval_min: float, extra: Iterable[float] = ()) -> (
        np.ndarray):
    """Regular output times from 0 to ``duration_min`` plus any ``extra`` times, sorted, each
    once (min)."""
    n = int(np.floor(duration_min / interval_min + 1e-9))
    times = np.concatenate([np.arange(n + 1) * interval_min, [duration_min], list(extra)])
    # a stable sort (a merge sort) is about five times faster than the default on this
    # almost-sorted array; then drop repeats, as ``np.unique`` would
    times = np.sort(np.round(times, 10), kind="stable")
    return times[np.concatenate(([True], times[1:] != times[:-1]))]


def solve_states(inputs: ModelInputs, t_out: np.ndarray, *, method: str = "dopri5",
                 rtol: float = 1e-6, y0: np.ndarray | None = None) -> tuple[
        np.ndarray, np.ndarray, SolverReport]:
    """Integrate the model for ``inputs`` and return states at ``t_out``.

    Parameters
    ----------
    inputs : ModelInputs
    t_out : ndarray, shape (T,), min
    method : str
        "dopri5" or a ``solve_ivp`` method name.
    rtol : float
        Relative tolerance (the absolute tolerances come with ``inputs``).
    y0 : ndarray or None
        Starting state instead of ``inputs.y0``.

    Returns
    -------
    states : ndarray, shape (T, n_state)
    final : ndarray, shape (n_state,)
    report : SolverReport
    """
    y_start = inputs.y0 if y0 is None else y0
    if method == "dopri5":
        states, final, stats = integrate(y_start, inputs.params, inputs.seg_times, inputs.jumps,
                                         inputs.lay, layout.dims(inputs.lay), t_out, inputs.atol,
                                         rtol, 5.0, MAX_STEPS)
        status = int(stats[3])
        report = SolverReport("dopri5", status == 0, STATUS_MESSAGES[status], int(stats[0]),
                              int(stats[1]), int(stats[2]))
        if status != 0:
            raise SimulationError(f"the integration failed: {report.message}")
        return states, final, report
    if method not in SCIPY_METHODS:
        raise InputError(f"method must be 'dopri5' or one of {', '.join(SCIPY_METHODS)}; got "
                         f"{method!r}.")
    y = y_start.copy()
    n_seg = len(inputs.params)
    states = np.empty((len(t_out), y.size))
    evaluations = 0
    for k in range(n_seg):
        y = y + inputs.jumps[k]
        t0, t1 = inputs.seg_times[k], inputs.seg_times[k + 1]
        last = k == n_seg - 1
        mask = (t_out >= t0) & ((t_out <= t1) if last else (t_out < t1))
        t_eval = np.append(t_out[mask][t_out[mask] < t1], t1)
        with np.errstate(over="ignore"):  # scipy's finite-difference Jacobian probes
            sol = solve_ivp(m.derivatives, (t0, t1), y, method=method, t_eval=t_eval,
                            rtol=rtol, atol=inputs.atol, args=(inputs.params[k], inputs.lay))
        if sol.status != 0:
            raise SimulationError(f"the integration failed in segment {k} "
                                  f"({t0:g}-{t1:g} min): {sol.message}")
        n_inside = int(np.count_nonzero(t_out[mask] < t1))
        inside = np.flatnonzero(mask)
        states[inside[:n_inside]] = sol.y[:, :n_inside].T
        if inside.size > n_inside:  # the output at the very end of the plan
            states[inside[n_inside:]] = sol.y[:, -1]
        y = sol.y[:, -1]
        evaluations += sol.nfev
    return states, y, SolverReport(method, True, "The integration finished.", evaluations,
                                   0, 0)


def build_result(inputs: ModelInputs, t_out: np.ndarray, states: np.ndarray,
                 final: np.ndarray, report: SolverReport, patient: Patient, circuit: Circuit,
                 absorber: Absorber, vaporizer: Vaporizer, plan: Plan,
                 rules: Iterable[AlertRule]) -> Result:
    """Assemble a :class:`Result` from integrated states (outputs computed by the model)."""
    lay = inputs.lay
    G, S, C = (int(v) for v in lay[:3])
    seg_index = inputs.segment_at(t_out)
    aux = m.auxiliary_series(states, inputs.params, seg_index, lay, layout.dims(lay))
    a = layout.aux_slices(lay)
    sc = aux[:, a["scalars"]]
    sl = layout.state_slices(lay)
    circuit_amounts = states[:, sl["circuit"]]
    tissue = states[:, sl["tissue"]].reshape(len(t_out), C, S)
    lung_gas = float(inputs.k_body * inputs.params[0][layout.P_LUNG_VOLUME])
    capacity = inputs.params[0][layout.parameter_slices(lay)["tissue_capacity"]].reshape(C, S)
    y0 = inputs.y0
    held_at_start = y0[sl["circuit"]] + y0[sl["alveolar"]] * lung_gas
    held_at_start[layout.FIRST_SOLUBLE:] += (y0[sl["tissue"]].reshape(C, S) * capacity).sum(axis=0)
    cumulative = {name: states[:, sl[name]] for name in layout.ACCUMULATOR_NAMES}
    absorbed = np.zeros((len(t_out), G))
    absorbed[:, layout.CO2] = states[:, sl["absorbent"].start] - inputs.y0[sl["absorbent"].start]
    cumulative["absorbed"] = absorbed
    capacity_l = inputs.params[0][layout.P_ABSORBENT_CAPACITY]
    result = Result(
        time_min=t_out,
        segment_index=seg_index,
        gases=inputs.gases,
        soluble_gases=inputs.gases[layout.FIRST_SOLUBLE:],
        tissue_names=inputs.tissue_names,
        tissue_labels=inputs.tissue_labels,
        inspired=aux[:, a["inspired"]],
        end_tidal=states[:, sl["alveolar"]],
        arterial=aux[:, a["arterial"]],
        mixed_venous=aux[:, a["mixed_venous"]],
        tissue=tissue,
        fresh_gas_stpd=sc[:, layout.AUX_FRESH],
        vented_stpd=sc[:, layout.AUX_VENT],
        leak_stpd=sc[:, layout.AUX_LEAK],
        sample_lost_stpd=sc[:, layout.AUX_SAMPLE_LOST],
        entrained_stpd=sc[:, layout.AUX_ENTRAINED],
        draw_over_vapour_stpd=sc[:, layout.AUX_DRAW_OVER_VAPOUR],
        absorbed_stpd=sc[:, layout.AUX_ABSORBED],
        uptake_stpd=aux[:, a["uptake"]],
        vented_gas_stpd=aux[:, a["vented"]],
        fresh_gas_by_gas_stpd=aux[:, a["fresh"]],
        circuit_amount_stpd=sc[:, layout.AUX_CIRCUIT_AMOUNT],
        absorbent_efficiency=sc[:, layout.AUX_ABSORBENT_EFFICIENCY],
        absorbent_used_fraction=states[:, sl["absorbent"].start] / capacity_l,
        cumulative=cumulative,
        held_in_circuit=circuit_amounts,
        held_at_start=held_at_start,
        lung_gas_stpd=lung_gas,
        tissue_capacity_stpd=capacity,
        states=states,
        final_state=final,
        k_circuit=inputs.k_circuit,
        circuit_fixed_l=circuit.volume_l,
        bag_capacity_l=circuit.bag_l,
        absorbent_capacity_l=capacity_l,
        solver=report,
        patient=patient, circuit=circuit, absorber=absorber, vaporizer=vaporizer, plan=plan,
    )
    object.__setattr__(result, "alerts", evaluate_alerts(result, rules))
    return result


def simulate_dials(patient: Patient, circuit: Circuit, plan: Plan, *,
                   vaporizer: Vaporizer | None = None, absorber: Absorber | None = None,
                   output_interval_min: float = 0.1, method: str = "dopri5",
                   rtol: float = 1e-6, initial_state: np.ndarray | None = None,
                   fio2_threshold: float = 0.30,
                   alert_rules: Iterable[AlertRule] | None = None) -> Result:
    """Predict what a plan of dial and flow settings does for ``patient`` in ``circuit``.

    Parameters, result and errors are those of :func:`circlesim.simulate`
    (:func:`circlesim.targets.predict.simulate`), except that ``plan`` holds dial and flow
    settings only: the engine knows nothing of end-tidal targets, and a plan with target steps
    is refused here (it runs through :func:`circlesim.simulate`, which hands it to the
    target controller).
    """
    vaporizer = Vaporizer() if vaporizer is None else vaporizer
    absorber = Absorber() if absorber is None else absorber
    for name, obj, kind in (("patient", patient, Patient), ("circuit", circuit, Circuit),
                            ("plan", plan, Plan), ("vaporizer", vaporizer, Vaporizer),
                            ("absorber", absorber, Absorber)):
        if not isinstance(obj, kind):
            raise InputError(f"{name} must be a {kind.__name__}; got {type(obj).__name__}.")
    check_number("simulate", "output_interval_min", output_interval_min,
                 Interval(0.005, 10.0, "min"))
    check_number("simulate", "rtol", rtol, Interval(1e-12, 1e-2))
    rules = default_rules(fio2_threshold) if alert_rules is None else tuple(alert_rules)
    inputs = assemble(patient, circuit, absorber, vaporizer, plan)
    y0 = None
    if initial_state is not None:
        y0 = np.array(initial_state, dtype=float)
        if y0.shape != inputs.y0.shape or not np.all(np.isfinite(y0)):
            raise InputError("initial_state must be the final_state of a result for the same "
                             f"patient and agent (length {inputs.y0.size}); got shape "
                             f"{y0.shape}.")
        acc = layout.state_slices(inputs.lay)["delivered"].start
        y0[acc:] = 0.0
    t_out = output_times(plan.duration_min, output_interval_min, plan.step_times)
    states, final, report = solve_states(inputs, t_out, method=method, rtol=rtol, y0=y0)
    if y0 is not None:
        inputs = replace(inputs, y0=y0)
    return build_result(inputs, t_out, states, final, report, patient, circuit, absorber,
                        vaporizer, plan, rules)

