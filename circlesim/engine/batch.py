"""Many patients or many plans in one compiled integration (engine layer).

:func:`simulate_batch` is :func:`circlesim.simulate` for a batch: each *member* is one
patient with one breathing system and one plan. The members' model inputs are built with
:func:`circlesim.engine.assembly.assemble` (the one place that turns domain objects into arrays),
stacked along a leading batch axis and integrated together by
:func:`circlesim.engine.solver.integrate_batch`, which runs the members in parallel on numba's
threads
— no Python loop over members in the integration. The outputs come from the model's own
functions (:func:`circlesim.engine.model.auxiliary_series`), so a member of a batch gives the same
numbers as :func:`circlesim.simulate` for that patient and plan.

Members may differ in patient, breathing system and plan; they must share the agent (the gas
layout), the tissue layout (``Patient.intertissue_diffusion``) and the plan length. Plans with
fewer steps are padded with empty segments at the end, which leave the state unchanged.

Memory: a batch keeps every state and auxiliary output, about 700 bytes per member and output
time (1,000 members × 241 times ≈ 170 MB). For large populations use
:mod:`circlesim.population.run`, which runs chunks of members and keeps only the curves it needs.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from numba import njit, prange

from circlesim.base.compiled_cache import discard_stale_cache
from circlesim.base.validation import InputError, Interval, check_number
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan
from circlesim.engine import layout
from circlesim.engine import model as m
from circlesim.engine.alerts import AlertRule, default_rules
from circlesim.engine.batch_inputs import assemble_members
from circlesim.engine.batch_result import BatchResult
from circlesim.engine.simulate import MAX_STEPS, SimulationError, output_times
from circlesim.engine.solver import STATUS_MESSAGES, integrate_batch, integrate_batch_serial

if TYPE_CHECKING:  # pragma: no cover
    pass

__all__ = ["simulate_batch"]

discard_stale_cache(__file__, [m.__file__, layout.__file__])

#: Largest integration step, min (as :func:`circlesim.engine.simulate.solve_states`).
H_MAX_MIN = 5.0


@njit(cache=True, error_model="numpy")
def _auxiliary_member(states, params, seg_index, lay, dims, out):
    """The model's auxiliary outputs of one member, written into ``out`` (no temporaries)."""
    work = np.empty(m.work_size(lay))
    for i in range(states.shape[0]):
        m.outputs(states[i], params[seg_index[i]], lay, dims, out[i], work)


@njit(cache=True, parallel=True, error_model="numpy", nogil=True)
def _auxiliary_parallel(states, params, seg_index, lay, dims):
    out = np.empty((states.shape[0], states.shape[1], lay[11]))
    gases, soluble, tissues, links = dims  # numba's parallel loop cannot take nested tuples
    for b in prange(states.shape[0]):
        _auxiliary_member(states[b], params[b], seg_index[b], lay,
                          (gases, soluble, tissues, links), out[b])
    return out


@njit(cache=True, error_model="numpy", nogil=True)
def _auxiliary_serial(states, params, seg_index, lay, dims):
    out = np.empty((states.shape[0], states.shape[1], lay[11]))
    for b in range(states.shape[0]):
        _auxiliary_member(states[b], params[b], seg_index[b], lay, dims, out[b])
    return out


def _as_tuple(name: str, value: Any, kind: type) -> tuple:
    """One object or a sequence of objects of ``kind`` as a non-empty tuple."""
    if isinstance(value, kind):
        return (value,)
    if isinstance(value, str | bytes) or not isinstance(value, Iterable):
        raise InputError(f"{name} must be a {kind.__name__} or a sequence of them; got "
                         f"{type(value).__name__}.")
    items = tuple(value)
    if not items:
        raise InputError(f"{name} must hold at least one {kind.__name__}; got none.")
    for i, item in enumerate(items):
        if not isinstance(item, kind):
            raise InputError(f"{name}[{i}] must be a {kind.__name__}; got "
                             f"{type(item).__name__}.")
    return items


def _broadcast(groups: dict[str, tuple]) -> tuple[int, dict[str, tuple]]:
    """Repeat length-1 groups to the common batch size; every other length must agree."""
    sizes = {name: len(items) for name, items in groups.items()}
    n = max(sizes.values())
    wrong = {name: k for name, k in sizes.items() if k not in (1, n)}
    if wrong:
        listed = ", ".join(f"{name} {k}" for name, k in sizes.items())
        raise InputError("patient, circuit, plan, vaporizer and absorber must each be one "
                         f"object or a sequence of the same length; got lengths {listed}.")
    return n, {name: items * n if len(items) == 1 else items for name, items in groups.items()}


def simulate_batch(patient: Patient | Sequence[Patient], circuit: Circuit | Sequence[Circuit],
                   plan: Plan | Sequence[Plan], *,
                   vaporizer: Vaporizer | Sequence[Vaporizer] | None = None,
                   absorber: Absorber | Sequence[Absorber] | None = None,
                   output_interval_min: float = 0.1, rtol: float = 1e-6,
                   fio2_threshold: float = 0.30,
                   alert_rules: Iterable[AlertRule] | None = None,
                   parallel: bool = True) -> BatchResult:
    """Predict many members (patient, breathing system, plan) in one compiled integration.

    Each argument is one object (shared by every member) or a sequence with one object per
    member; sequences longer than one must all have the same length ``B``.

    Parameters
    ----------
    patient : Patient or sequence of Patient
    circuit : Circuit or sequence of Circuit
    plan : Plan or sequence of Plan
        Plans must have the same ``duration_min``; their step times are all in the output.
    vaporizer : Vaporizer or sequence, optional
        Default: a sevoflurane plenum vaporizer outside the circle. Every member must use the
        same agent.
    absorber : Absorber or sequence, optional
        Default: 1 kg of soda lime.
    output_interval_min : float, min, 0.005–10
        Spacing of the output times, shared by every member.
    rtol : float, 1e-12–1e-2
        Relative tolerance of the integrator.
    fio2_threshold : float, 0.21–1
        Lowest acceptable inspired O2 fraction for the alerts of :meth:`BatchResult.member`
        (ignored if ``alert_rules`` is given).
    alert_rules : iterable of AlertRule, optional
    parallel : bool
        Integrate the members on numba's threads (default). False runs them one after the
        other on the calling thread, for callers that are themselves parallel workers.

    Returns
    -------
    BatchResult

    Raises
    ------
    InputError
        For invalid inputs (naming the member), members with different agents or tissue
        layouts, or plans of different lengths.
    SimulationError
        If the integration of any member fails.
    """
    n, g = _broadcast({
        "patient": _as_tuple("patient", patient, Patient),
        "circuit": _as_tuple("circuit", circuit, Circuit),
        "plan": _as_tuple("plan", plan, Plan),
        "vaporizer": _as_tuple("vaporizer", Vaporizer() if vaporizer is None else vaporizer,
                               Vaporizer),
        "absorber": _as_tuple("absorber", Absorber() if absorber is None else absorber,
                              Absorber),
    })
    check_number("simulate_batch", "output_interval_min", output_interval_min,
                 Interval(0.005, 10.0, "min"))
    check_number("simulate_batch", "rtol", rtol, Interval(1e-12, 1e-2))
    rules = default_rules(fio2_threshold) if alert_rules is None else tuple(alert_rules)
    duration = g["plan"][0].duration_min
    for b, pl in enumerate(g["plan"]):
        if pl.duration_min != duration:
            raise InputError(f"plan[{b}].duration_min must equal that of plan[0] "
                             f"({duration:g} min) in a batch; got {pl.duration_min:g}.")
    inputs = assemble_members(g["patient"], g["circuit"], g["absorber"], g["vaporizer"],
                              g["plan"])
    groups = inputs.groups
    first = groups[0][1]
    for members, grp in groups:
        if grp.gases != first.gases:
            b = members[0]
            raise InputError(f"every member of a batch must use the same agent; member {b} uses "
                             f"{g['vaporizer'][b].agent}, member 0 {g['vaporizer'][0].agent}.")
        if not np.array_equal(grp.lay, first.lay):
            raise InputError("every member of a batch must have the same tissue layout; member "
                             f"{members[0]} differs from member 0 "
                             "(Patient.intertissue_diffusion).")
    step_times = sorted({t for pl in g["plan"] for t in pl.step_times})
    t_out = output_times(duration, output_interval_min, step_times)
    y0, params, seg_times, jumps = inputs.y0, inputs.params, inputs.seg_times, inputs.jumps
    integrate = integrate_batch if parallel else integrate_batch_serial
    dims = layout.dims(first.lay)
    states, final, stats = integrate(y0, params, seg_times, jumps, first.lay, dims, t_out,
                                     first.atol, rtol, H_MAX_MIN, MAX_STEPS)
    failed = np.flatnonzero(stats[:, 3] != 0)
    if failed.size:
        b = int(failed[0])
        raise SimulationError(f"the integration failed for {failed.size} of {n} members; "
                              f"member {b}: {STATUS_MESSAGES[int(stats[b, 3])]}")
    seg_index = np.empty((n, t_out.size), dtype=np.int64)
    for members, grp in groups:
        seg_index[members] = np.searchsorted(grp.seg_times, t_out, side="right") - 1
    np.clip(seg_index, 0, params.shape[1] - 1, out=seg_index)
    auxiliary = _auxiliary_parallel if parallel else _auxiliary_serial
    aux = auxiliary(states, params, seg_index, first.lay, dims)
    return BatchResult(
        time_min=t_out, gases=first.gases, soluble_gases=first.gases[layout.FIRST_SOLUBLE:],
        tissue_names=first.tissue_names, tissue_labels=first.tissue_labels, states=states,
        aux=aux, final_state=final, solver_stats=stats, inputs=inputs,
        patients=g["patient"], circuits=g["circuit"], absorbers=g["absorber"],
        vaporizers=g["vaporizer"], plans=g["plan"], rules=rules)
