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
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numba import njit, prange

from circlesim.base.compiled_cache import discard_stale_cache
from circlesim.base.units import vapour_l_stpd_to_grams, vapour_l_stpd_to_liquid_ml
from circlesim.base.validation import InputError, Interval, check_number
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan
from circlesim.engine import model as m
from circlesim.engine.alerts import AlertRule, default_rules
from circlesim.engine.assembly import ModelInputs, assemble
from circlesim.engine.result import Result, SolverReport
from circlesim.engine.simulate import MAX_STEPS, SimulationError, build_result, output_times
from circlesim.engine.solver import STATUS_MESSAGES, integrate_batch, integrate_batch_serial
from circlesim.properties import NITROUS_OXIDE, mac_at_age

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["BatchResult", "simulate_batch"]

discard_stale_cache(__file__, [m.__file__])

#: Largest integration step, min (as :func:`circlesim.engine.simulate.solve_states`).
H_MAX_MIN = 5.0


@njit(cache=True, error_model="numpy")
def _auxiliary_member(states, params, seg_index, lay, out):
    """The model's auxiliary outputs of one member, written into ``out`` (no temporaries)."""
    dy = np.empty(states.shape[1])
    work = np.empty(m.work_size(lay))
    for i in range(states.shape[0]):
        m.evaluate(states[i], params[seg_index[i]], lay, dy, out[i], work)


@njit(cache=True, parallel=True, error_model="numpy", nogil=True)
def _auxiliary_parallel(states, params, seg_index, lay):
    out = np.empty((states.shape[0], states.shape[1], lay[11]))
    for b in prange(states.shape[0]):
        _auxiliary_member(states[b], params[b], seg_index[b], lay, out[b])
    return out


@njit(cache=True, error_model="numpy", nogil=True)
def _auxiliary_serial(states, params, seg_index, lay):
    out = np.empty((states.shape[0], states.shape[1], lay[11]))
    for b in range(states.shape[0]):
        _auxiliary_member(states[b], params[b], seg_index[b], lay, out[b])
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


@dataclass(frozen=True, eq=False)
class BatchResult:
    """Time series for a batch of members (patient, breathing system, plan), batch axis first.

    Array shapes use ``B`` members, ``T`` output times (shared by every member), ``G`` gases,
    ``S`` soluble gases and ``C`` tissue groups; the names, units and meaning of every series
    are those of :class:`circlesim.engine.result.Result` with a leading batch axis. Series are views
    or small computations on :attr:`states` and :attr:`aux`, made on access.
    :meth:`member` gives one member as a full :class:`~circlesim.engine.result.Result` (with
    alerts).

    Attributes
    ----------
    time_min : ndarray, shape (T,)
        Minutes from the start of the plans.
    gases, soluble_gases, tissue_names, tissue_labels : tuple of str
    states : ndarray, shape (B, T, n_state)
        Raw model states (see :mod:`circlesim.engine.model`).
    aux : ndarray, shape (B, T, n_aux)
        The model's auxiliary outputs at the output times.
    final_state : ndarray, shape (B, n_state)
        State of each member at the end of its plan.
    solver_stats : ndarray of int64, shape (B, 4)
        Right-hand-side evaluations, accepted steps, rejected steps and status of each member.
    inputs : tuple of ModelInputs
        Each member's model inputs (unpadded).
    patients, circuits, absorbers, vaporizers, plans : tuple, length B
        Each member's inputs, so that any member can be reproduced.
    rules : tuple of AlertRule
        Alert rules applied by :meth:`member`.
    """

    time_min: np.ndarray
    gases: tuple[str, ...]
    soluble_gases: tuple[str, ...]
    tissue_names: tuple[str, ...]
    tissue_labels: tuple[str, ...]
    states: np.ndarray
    aux: np.ndarray
    final_state: np.ndarray
    solver_stats: np.ndarray
    inputs: tuple[ModelInputs, ...]
    patients: tuple[Patient, ...]
    circuits: tuple[Circuit, ...]
    absorbers: tuple[Absorber, ...]
    vaporizers: tuple[Vaporizer, ...]
    plans: tuple[Plan, ...]
    rules: tuple[AlertRule, ...]

    # ---- names (shared with Result) -------------------------------------------------------
    gas_index = Result.gas_index
    soluble_index = Result.soluble_index
    tissue_index = Result.tissue_index

    def __len__(self) -> int:
        return self.states.shape[0]

    @property
    def agent(self) -> str:
        """Name of the volatile agent (the same for every member)."""
        return self.vaporizers[0].agent

    @property
    def _lay(self) -> np.ndarray:
        return self.inputs[0].lay

    def _member_values(self, values: Iterable[float]) -> np.ndarray:
        return np.fromiter(values, dtype=float, count=len(self))

    @property
    def k_circuit(self) -> np.ndarray:
        """L STPD per litre at flowmeter/circuit conditions, shape (B,)."""
        return self._member_values(i.k_circuit for i in self.inputs)

    @property
    def mac_percent(self) -> np.ndarray:
        """Age-adjusted MAC of the agent for each member, vol%, shape (B,)."""
        return self._member_values(v.properties.mac_percent(p.age_years)
                                   for v, p in zip(self.vaporizers, self.patients, strict=True))

    @property
    def n2o_mac_percent(self) -> np.ndarray:
        """Age-adjusted MAC of N2O for each member, vol% (Mapleson 1996), shape (B,)."""
        mac40 = float(NITROUS_OXIDE.mac40_percent)
        return self._member_values(mac_at_age(mac40, p.age_years) for p in self.patients)

    # ---- series ---------------------------------------------------------------------------
    def _aux(self, name: str) -> np.ndarray:
        return self.aux[:, :, m.aux_slices(self._lay)[name]]

    def _aux_scalar(self, index: int) -> np.ndarray:
        return self.aux[:, :, m.aux_slices(self._lay)["scalars"].start + index]

    def _state(self, name: str) -> np.ndarray:
        return self.states[:, :, m.state_slices(self._lay)[name]]

    @property
    def inspired(self) -> np.ndarray:
        """Inspired dry-gas fractions, shape (B, T, G)."""
        return self._aux("inspired")

    @property
    def end_tidal(self) -> np.ndarray:
        """End-tidal (alveolar) dry-gas fractions, shape (B, T, G)."""
        return self._state("alveolar")

    @property
    def circuit_gas(self) -> np.ndarray:
        """Well-mixed circuit gas fractions, shape (B, T, G)."""
        amounts = self._state("circuit")
        return amounts / amounts.sum(axis=2, keepdims=True)

    @property
    def arterial(self) -> np.ndarray:
        """Arterial partial pressures as dry-fraction equivalents, shape (B, T, S)."""
        return self._aux("arterial")

    @property
    def mixed_venous(self) -> np.ndarray:
        """Mixed-venous partial pressures as dry-fraction equivalents, shape (B, T, S)."""
        return self._aux("mixed_venous")

    @property
    def tissue(self) -> np.ndarray:
        """Tissue partial pressures as dry-fraction equivalents, shape (B, T, C, S)."""
        b, t = self.states.shape[:2]
        return self._state("tissue").reshape(b, t, len(self.tissue_names),
                                             len(self.soluble_gases))

    @property
    def uptake_stpd(self) -> np.ndarray:
        """Uptake by the patient per gas, L STPD/min, shape (B, T, G)."""
        return self._aux("uptake")

    @property
    def vented_gas_stpd(self) -> np.ndarray:
        """Vented gas per gas, L STPD/min, shape (B, T, G)."""
        return self._aux("vented")

    @property
    def fresh_gas_by_gas_stpd(self) -> np.ndarray:
        """Fresh gas per gas (plenum vapour included), L STPD/min, shape (B, T, G)."""
        return self._aux("fresh")

    @property
    def fresh_gas_stpd(self) -> np.ndarray:
        """Fresh gas flow with plenum vapour, L STPD/min, shape (B, T)."""
        return self._aux_scalar(m.AUX_FRESH)

    @property
    def vented_stpd(self) -> np.ndarray:
        """Gas vented by the pressure-limiting valve, L STPD/min, shape (B, T)."""
        return self._aux_scalar(m.AUX_VENT)

    @property
    def entrained_stpd(self) -> np.ndarray:
        """Room air entrained by an empty circuit, L STPD/min, shape (B, T)."""
        return self._aux_scalar(m.AUX_ENTRAINED)

    @property
    def absorbed_stpd(self) -> np.ndarray:
        """CO2 taken up by the absorbent, L STPD/min, shape (B, T)."""
        return self._aux_scalar(m.AUX_ABSORBED)

    @property
    def circuit_amount_stpd(self) -> np.ndarray:
        """Gas in the circuit, L STPD, shape (B, T)."""
        return self._aux_scalar(m.AUX_CIRCUIT_AMOUNT)

    @property
    def absorbent_used_fraction(self) -> np.ndarray:
        """Fraction of each member's absorbent capacity used, shape (B, T)."""
        capacity = self._member_values(i.params[0, m.P_ABSORBENT_CAPACITY] for i in self.inputs)
        return self._state("absorbent")[:, :, 0] / capacity[:, None]

    @property
    def cumulative(self) -> dict[str, np.ndarray]:
        """Amounts since the start, L STPD, each shape (B, T, G) (as ``Result.cumulative``)."""
        out = {name: self._state(name) for name in m.ACCUMULATOR_NAMES}
        start = np.stack([i.y0 for i in self.inputs])[:, m.state_slices(self._lay)[
            "absorbent"].start]
        absorbed = np.zeros_like(out["delivered"])
        absorbed[:, :, m.CO2] = self._state("absorbent")[:, :, 0] - start[:, None]
        out["absorbed"] = absorbed
        return out

    # ---- convenient series (as Result, with the batch axis first) -------------------------
    def inspired_percent(self, gas: str) -> np.ndarray:
        """Inspired concentration, vol% (dry gas), shape (B, T)."""
        return 100.0 * self.inspired[:, :, self.gas_index(gas)]

    def end_tidal_percent(self, gas: str) -> np.ndarray:
        """End-tidal concentration, vol% (dry gas), shape (B, T)."""
        return 100.0 * self.end_tidal[:, :, self.gas_index(gas)]

    def tissue_percent(self, tissue: str, gas: str = "agent") -> np.ndarray:
        """Tissue partial pressure as a vol% equivalent, shape (B, T)."""
        return 100.0 * self.tissue[:, :, self.tissue_index(tissue), self.soluble_index(gas)]

    def brain_percent(self, gas: str = "agent") -> np.ndarray:
        """Vessel-rich group (brain) partial pressure as a vol% equivalent, shape (B, T)."""
        return self.tissue_percent("vessel_rich", gas)

    @property
    def fresh_gas_l_min(self) -> np.ndarray:
        """Fresh gas flow with plenum vapour, L/min at flowmeter conditions, shape (B, T)."""
        return self.fresh_gas_stpd / self.k_circuit[:, None]

    @property
    def vented_l_min(self) -> np.ndarray:
        """Gas vented to the scavenging system, L/min at circuit conditions, shape (B, T)."""
        return self.vented_stpd / self.k_circuit[:, None]

    @property
    def bag_volume_l(self) -> np.ndarray:
        """Reservoir bag volume, L at circuit conditions, shape (B, T)."""
        fixed = self._member_values(c.volume_l for c in self.circuits)
        return self.circuit_amount_stpd / self.k_circuit[:, None] - fixed[:, None]

    def liquid_ml(self, vapour_l_stpd: np.ndarray) -> np.ndarray:
        """Liquid agent (mL) making ``vapour_l_stpd`` litres STPD of agent vapour."""
        a = self.vaporizers[0].properties
        return vapour_l_stpd_to_liquid_ml(vapour_l_stpd, a.liquid_density_g_ml,
                                          a.molar_mass_g_mol)

    def grams(self, vapour_l_stpd: np.ndarray) -> np.ndarray:
        """Mass (g) of ``vapour_l_stpd`` litres STPD of agent vapour."""
        return vapour_l_stpd_to_grams(vapour_l_stpd,
                                      self.vaporizers[0].properties.molar_mass_g_mol)

    @property
    def agent_delivered_ml(self) -> np.ndarray:
        """Cumulative liquid agent delivered (vaporizer and injections), mL, shape (B, T)."""
        return self.liquid_ml(self.cumulative["delivered"][:, :, self.gas_index("agent")])

    @property
    def agent_uptake_ml(self) -> np.ndarray:
        """Cumulative liquid-equivalent agent taken up by the patient, mL, shape (B, T)."""
        return self.liquid_ml(self.cumulative["uptake"][:, :, self.gas_index("agent")])

    # ---- members ----------------------------------------------------------------------------
    def solver_report(self, index: int) -> SolverReport:
        """How the integration of member ``index`` went."""
        ev, steps, rejected, status = (int(v) for v in self.solver_stats[index])
        return SolverReport("dopri5", status == 0, STATUS_MESSAGES[status], ev, steps, rejected)

    def member(self, index: int) -> Result:
        """Member ``index`` as a full :class:`~circlesim.engine.result.Result`, alerts included."""
        b = int(index)
        if not -len(self) <= b < len(self):
            raise IndexError(f"member index must be from 0 to {len(self) - 1}; got {index}.")
        b %= len(self)
        return build_result(self.inputs[b], self.time_min, self.states[b], self.final_state[b],
                            self.solver_report(b), self.patients[b], self.circuits[b],
                            self.absorbers[b], self.vaporizers[b], self.plans[b], self.rules)

    def frame(self) -> pd.DataFrame:
        """Every member's :meth:`Result.frame` stacked, with a ``member`` column first.

        Builds one :class:`Result` per member: meant for batches of up to a few hundred.
        """
        import pandas as pd

        parts = []
        for b in range(len(self)):
            part = self.member(b).frame()
            part.insert(0, "member", b)
            parts.append(part)
        return pd.concat(parts, ignore_index=True)


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
    inputs = []
    for b in range(n):
        try:
            inputs.append(assemble(g["patient"][b], g["circuit"][b], g["absorber"][b],
                                   g["vaporizer"][b], g["plan"][b]))
        except InputError as exc:
            raise InputError(f"batch member {b}: {exc}") from None
    first = inputs[0]
    for b, inp in enumerate(inputs):
        if inp.gases != first.gases:
            raise InputError(f"every member of a batch must use the same agent; member {b} uses "
                             f"{g['vaporizer'][b].agent}, member 0 {g['vaporizer'][0].agent}.")
        if not np.array_equal(inp.lay, first.lay):
            raise InputError("every member of a batch must have the same tissue layout; member "
                             f"{b} differs from member 0 (Patient.intertissue_diffusion).")
    step_times = sorted({t for pl in g["plan"] for t in pl.step_times})
    t_out = output_times(duration, output_interval_min, step_times)
    y0, params, seg_times, jumps = _stack(inputs)
    integrate = integrate_batch if parallel else integrate_batch_serial
    states, final, stats = integrate(y0, params, seg_times, jumps, first.lay, t_out, first.atol,
                                     rtol, H_MAX_MIN, MAX_STEPS)
    failed = np.flatnonzero(stats[:, 3] != 0)
    if failed.size:
        b = int(failed[0])
        raise SimulationError(f"the integration failed for {failed.size} of {n} members; "
                              f"member {b}: {STATUS_MESSAGES[int(stats[b, 3])]}")
    seg_index = np.empty((n, t_out.size), dtype=np.int64)
    for b in range(n):
        seg_index[b] = np.searchsorted(seg_times[b], t_out, side="right") - 1
    np.clip(seg_index, 0, params.shape[1] - 1, out=seg_index)
    auxiliary = _auxiliary_parallel if parallel else _auxiliary_serial
    aux = auxiliary(states, params, seg_index, first.lay)
    return BatchResult(
        time_min=t_out, gases=first.gases, soluble_gases=first.gases[m.FIRST_SOLUBLE:],
        tissue_names=first.tissue_names, tissue_labels=first.tissue_labels, states=states,
        aux=aux, final_state=final, solver_stats=stats, inputs=tuple(inputs),
        patients=g["patient"], circuits=g["circuit"], absorbers=g["absorber"],
        vaporizers=g["vaporizer"], plans=g["plan"], rules=rules)


def _stack(inputs: Sequence[ModelInputs]) -> tuple[np.ndarray, ...]:
    """Stack the members' arrays; shorter plans get empty segments at the end.

    An empty segment starts and ends at the plan's end time, has no jump and repeats the last
    segment's parameters, so it leaves the state exactly as it was.
    """
    n = len(inputs)
    n_seg = max(len(i.params) for i in inputs)
    n_params = inputs[0].params.shape[1]
    n_state = inputs[0].y0.size
    params = np.empty((n, n_seg, n_params))
    seg_times = np.empty((n, n_seg + 1))
    jumps = np.zeros((n, n_seg, n_state))
    for b, inp in enumerate(inputs):
        k = len(inp.params)
        params[b, :k] = inp.params
        params[b, k:] = inp.params[-1]
        seg_times[b, :k + 1] = inp.seg_times
        seg_times[b, k + 1:] = inp.seg_times[-1]
        jumps[b, :k] = inp.jumps
    y0 = np.stack([i.y0 for i in inputs])
    return y0, params, seg_times, jumps
