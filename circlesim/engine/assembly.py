"""Turn domain objects (patient, circuit, absorber, vaporizer, plan) into the model's arrays.

This is the only place that knows both the domain objects and the model's array layout. Unit
conversions come from :mod:`circlesim.base.units`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, fields

import numpy as np

from circlesim.base.units import atpd_to_stpd, btps_to_stpd, liquid_ml_to_vapour_l_stpd, ml_to_l
from circlesim.base.validation import InputError
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan, Segment
from circlesim.engine import layout
from circlesim.engine import model as m
from circlesim.properties import NITROGEN, NITROUS_OXIDE, SolubleGas

__all__ = ["GAS_LABELS", "GroupInputs", "ModelInputs", "assemble", "assemble_group"]

#: Alveolar O2 fraction below which O2 uptake is curtailed (the patient could not survive it;
#: it only keeps the arithmetic defined, and a warning is raised long before).
O2_FLOOR = 0.01
#: Rate (1/min) at which round-off excursions past the bag limits are returned.
RELAXATION_PER_MIN = 10.0

GAS_LABELS = {"oxygen": "O2", "carbon_dioxide": "CO2", "nitrogen": "N2",
              "nitrous_oxide": "N2O"}


@dataclass(frozen=True)
class ModelInputs:
    """Everything the integrator needs for one patient and one plan.

    Attributes
    ----------
    gases : tuple of str
        Gas names in model order.
    tissue_names, tissue_labels : tuple of str
    lay : ndarray of int64
        Model layout.
    params : ndarray, shape (n_segments, n_params)
    seg_times : ndarray, shape (n_segments + 1,), min
    jumps : ndarray, shape (n_segments, n_state)
    y0 : ndarray, shape (n_state,)
    atol : ndarray, shape (n_state,)
    k_circuit : float
        L STPD per litre of circuit gas (flowmeter and circuit conditions).
    k_body : float
        L STPD per litre BTPS (and per litre per unit fraction of a λ = 1 space at 37 °C).
    segments : tuple of Segment
    agent_index : int
        Index of the vaporizer's agent in ``gases``.
    """

    gases: tuple[str, ...]
    tissue_names: tuple[str, ...]
    tissue_labels: tuple[str, ...]
    lay: np.ndarray
    params: np.ndarray
    seg_times: np.ndarray
    jumps: np.ndarray
    y0: np.ndarray
    atol: np.ndarray
    k_circuit: float
    k_body: float
    segments: tuple[Segment, ...]
    agent_index: int
    circuit_min_stpd: float
    circuit_max_stpd: float

    def segment_at(self, time_min: np.ndarray) -> np.ndarray:
        """Index (int64) of the plan segment in force at each of ``time_min`` (min); the
        plan's end belongs to the last segment."""
        index = np.searchsorted(self.seg_times, time_min, side="right") - 1
        return np.clip(index, 0, len(self.params) - 1).astype(np.int64)


def _soluble_gases(vaporizer: Vaporizer) -> tuple[SolubleGas, ...]:
    return (NITROGEN, NITROUS_OXIDE, vaporizer.properties)


def _tissue_partition(gas: SolubleGas, partition: str) -> float:
    return {"brain": gas.brain_blood, "muscle": gas.muscle_blood, "fat": gas.fat_blood}[
        partition]


#: Ventilation handed to :meth:`Plan.segments` to mark the segments that take the patient's
#: own default (one NaN object, so that the plan's segment cache finds it again).
_PATIENT_DEFAULT = math.nan


def _check_dials(segments: Sequence[Segment], vaporizer: Vaporizer) -> None:
    """Refuse target steps (the engine runs dial plans) and dials above the vaporizer's range."""
    max_dial = vaporizer.max_dial
    for step_index, seg in enumerate(segments):  # one segment per step
        if seg.has_target:
            raise InputError(
                f"Plan.steps[{step_index}] holds an end-tidal target: the dial is chosen by the "
                "target controller, so run the plan with circlesim.simulate (target mode), "
                "not with the dial-plan engine directly.")
        if seg.dial_percent > max_dial:
            raise InputError(
                f"Plan.steps[{step_index}].dial_percent must be a number from 0 to "
                f"{max_dial:g} vol% (the {vaporizer.agent} vaporizer's range); "
                f"got {seg.dial_percent:g}.")


def _check_tidal_volumes(tidal_ml: np.ndarray, dead_space_ml: np.ndarray,
                         members: bool = False) -> None:
    """Refuse tidal volumes (mL, shape (B, n_segments)) not above each member's dead space."""
    bad = np.argwhere(tidal_ml <= dead_space_ml[:, None] + 1.0)
    if bad.size:
        b, step_index = (int(v) for v in bad[0])
        who = f"batch member {b}: " if members else ""
        raise InputError(
            f"{who}Plan.steps[{step_index}].tidal_volume_ml must be larger than the dead space "
            f"({dead_space_ml[b]:.0f} mL); got {tidal_ml[b, step_index]:g}.")


@dataclass(frozen=True)
class GroupInputs:
    """The model inputs of patients who share one breathing system, absorber, vaporizer and plan.

    Built by :func:`assemble_group`; the arrays of every member at once (batch axis first), so a
    population needs no Python loop over patients beyond reading each patient's physiology.

    Attributes
    ----------
    gases, tissue_names, tissue_labels, lay, seg_times, jumps, atol, k_circuit, k_body,
    agent_index, circuit_min_stpd, circuit_max_stpd
        As :class:`ModelInputs` (shared by every member).
    params : ndarray, shape (B, n_segments, n_params)
    y0 : ndarray, shape (B, n_state)
    patients : tuple of Patient, length B
    circuit, plan
        The shared breathing system and plan.
    """

    gases: tuple[str, ...]
    tissue_names: tuple[str, ...]
    tissue_labels: tuple[str, ...]
    lay: np.ndarray
    params: np.ndarray
    seg_times: np.ndarray
    jumps: np.ndarray
    y0: np.ndarray
    atol: np.ndarray
    k_circuit: float
    k_body: float
    agent_index: int
    circuit_min_stpd: float
    circuit_max_stpd: float
    patients: tuple[Patient, ...]
    circuit: Circuit
    plan: Plan

    def __len__(self) -> int:
        return len(self.patients)

    def member(self, b: int) -> ModelInputs:
        """Member ``b``'s inputs as :class:`ModelInputs` (with its resolved segments)."""
        p = self.patients[b]
        own = {"params": self.params[b], "y0": self.y0[b],
               "segments": self.plan.segments(p.default_tidal_volume_ml, p.default_rate_per_min,
                                              self.circuit.valve)}
        return ModelInputs(**{f.name: own[f.name] if f.name in own else getattr(self, f.name)
                              for f in fields(ModelInputs)})


def assemble(patient: Patient, circuit: Circuit, absorber: Absorber, vaporizer: Vaporizer,
             plan: Plan) -> ModelInputs:
    """Build the model inputs for one patient, breathing system and plan."""
    return assemble_group((patient,), circuit, absorber, vaporizer, plan).member(0)


def _tissue_arrays(patients: Sequence[Patient]) -> tuple[tuple, np.ndarray, np.ndarray]:
    """Each patient's tissue groups: (groups of the first, volumes L (B, C), blood flows L/min
    (B, C)).

    Raises
    ------
    InputError
        If the patients' tissue groups differ (``Patient.intertissue_diffusion``).
    """
    groups = [p.tissues() for p in patients]
    names = tuple(t.name for t in groups[0])
    for b, g in enumerate(groups):
        if tuple(t.name for t in g) != names:
            raise InputError(f"batch member {b}: every member of a batch must have the same "
                             "tissue layout; this one differs from member 0 "
                             "(Patient.intertissue_diffusion).")
    volume = np.array([[t.volume_l for t in g] for g in groups])
    flow = np.array([[t.blood_flow_l_min for t in g] for g in groups])
    return groups[0], volume, flow


def assemble_group(patients: Sequence[Patient], circuit: Circuit, absorber: Absorber,
                   vaporizer: Vaporizer, plan: Plan) -> GroupInputs:
    """Build the model inputs of many patients sharing the breathing system and the plan.

    Parameters
    ----------
    patients : sequence of Patient
        At least one; all with the same tissue layout (``Patient.intertissue_diffusion``).
    circuit, absorber, vaporizer, plan
        Shared by every patient.

    Raises
    ------
    InputError
        As :func:`assemble`, naming the batch member when there are several; or if the
        patients' tissue layouts differ.
    """
    patients = tuple(patients)
    several = len(patients) > 1
    template = plan.segments(_PATIENT_DEFAULT, _PATIENT_DEFAULT, circuit.valve)
    _check_dials(template, vaporizer)
    soluble = _soluble_gases(vaporizer)
    gases = ("oxygen", "carbon_dioxide", *(g.name for g in soluble))
    n_gas = len(gases)
    agent_index = n_gas - 1
    tissues, volume, flow = _tissue_arrays(patients)
    tissue_index = {t.name: i for i, t in enumerate(tissues)}
    links = patients[0].intertissue_links()
    lay = layout.layout(n_gas, len(tissues), [tissue_index[a] for a, _, _ in links],
                   [tissue_index[b] for _, b, _ in links])
    slices = layout.parameter_slices(lay)
    n_params = layout.parameter_size(lay)
    k_circ = atpd_to_stpd(circuit.gas_temperature_c, circuit.ambient_pressure_kpa)
    k_body = btps_to_stpd(circuit.ambient_pressure_kpa)

    # ---- each patient's physiology (one row per patient) ----------------------------------
    def column(name: str) -> np.ndarray:
        return np.fromiter((getattr(p, name) for p in patients), dtype=float,
                           count=len(patients))

    dead_space, tidal_default, rate_default = (column(k) for k in (
        "dead_space", "default_tidal_volume_ml", "default_rate_per_min"))
    lam = np.array([[g.blood_gas_for(p.blood_gas_source) * p.solubility_scale for g in soluble]
                    for p in patients])                                   # (B, S)
    partition = np.array([[_tissue_partition(g, t.partition) for g in soluble]
                          for t in tissues])                              # (C, S)
    capacity = k_body * volume[:, :, None] * partition[None] * lam[:, None, :]  # (B, C, S)
    conductance = np.stack([capacity[:, tissue_index[to]] / tau for _, to, tau in links],
                           axis=1) if links else np.empty((len(patients), 0, len(soluble)))

    agent = vaporizer.properties
    saturation = agent.vapour_pressure_kpa(circuit.gas_temperature_c) / circuit.ambient_pressure_kpa
    base = np.zeros((len(patients), n_params))
    base[:, layout.P_VO2] = ml_to_l(column("vo2"))
    base[:, layout.P_VCO2] = ml_to_l(column("vco2"))
    base[:, layout.P_CARDIAC_OUTPUT] = column("cardiac_output")
    base[:, layout.P_SHUNT] = column("shunt_fraction")
    base[:, layout.P_K_BODY] = k_body
    base[:, layout.P_LUNG_VOLUME] = column("frc")
    base[:, layout.P_LEAK] = k_circ * ml_to_l(circuit.leak_ml_min)
    base[:, layout.P_SAMPLE_LOST] = 0.0 if circuit.sample_returned else (
        k_circ * ml_to_l(circuit.sample_ml_min))
    base[:, layout.P_SAMPLE_INSPIRED] = circuit.inspiratory_fraction
    base[:, layout.P_DRAW_OVER_GAS] = agent_index if vaporizer.placement == "inside" else -1
    base[:, layout.P_DRAW_OVER_SATURATION] = min(saturation, 1.0)
    n_min = k_circ * circuit.volume_l
    n_max = k_circ * circuit.total_volume_l
    base[:, layout.P_CIRCUIT_MIN] = n_min
    base[:, layout.P_CIRCUIT_MAX] = n_max
    base[:, layout.P_RELAXATION] = RELAXATION_PER_MIN
    base[:, layout.P_ABSORBENT_CAPACITY] = absorber.capacity_l
    base[:, layout.P_ABSORBENT_KNEE] = absorber.breakthrough_start
    base[:, layout.P_O2_FLOOR] = O2_FLOOR
    base[:, layout.P_VENT_EXHALED] = circuit.vent_exhaled_share
    base[:, slices["blood_gas"]] = lam
    base[:, slices["tissue_flow"]] = flow
    base[:, slices["tissue_capacity"]] = capacity.reshape(len(patients), -1)
    base[:, slices["link_conductance"]] = conductance.reshape(len(patients), -1)

    # ---- the plan's segments (one column per setting, segment axis first) -----------------
    n_seg = len(template)
    n_state = layout.state_size(lay)
    o2, air, n2o, dial, inject, tidal, rate = (np.array(
        [getattr(seg, name) for seg in template], dtype=float) for name in (
        "o2_l_min", "air_l_min", "n2o_l_min", "dial_percent", "inject_ml", "tidal_volume_ml",
        "rate_per_min"))
    # NaN: the segment takes each patient's default ventilation
    tidal = np.where(np.isnan(tidal), tidal_default[:, None], tidal[None, :])   # (B, n_seg)
    rate = np.where(np.isnan(rate), rate_default[:, None], rate[None, :])
    _check_tidal_volumes(tidal, dead_space, several)
    params = np.repeat(base[:, None, :], n_seg, axis=1)
    params[:, :, layout.P_INSPIRED] = k_body * (ml_to_l(tidal) * rate)
    params[:, :, layout.P_DEAD_SPACE] = k_body * (ml_to_l(dead_space)[:, None] * rate)
    carrier = np.zeros((n_seg, n_gas))
    carrier[:, layout.O2] = k_circ * (o2 + m.AIR_O2 * air)
    carrier[:, layout.N2] = k_circ * m.AIR_N2 * air
    carrier[:, layout.N2O] = k_circ * n2o
    fraction = dial / 100.0
    if vaporizer.placement == "outside":
        carrier[:, agent_index] = carrier.sum(axis=1) * fraction / (1.0 - fraction)
    else:
        params[:, :, layout.P_DRAW_OVER_SETTING] = fraction
    params[:, :, slices["fresh"]] = carrier
    jumps = np.zeros((n_seg, n_state))
    injected = inject > 0.0
    if injected.any():
        vapour = liquid_ml_to_vapour_l_stpd(inject[injected], agent.liquid_density_g_ml,
                                            agent.molar_mass_g_mol)
        jumps[injected, agent_index] = vapour
        jumps[injected, layout.state_slices(lay)["delivered"].start + agent_index] = vapour
    seg_times = np.array([s.start_min for s in template] + [template[-1].end_min])

    y0 = initial_states(lay, params[:, 0], circuit, absorber, k_circ, several)
    atol = np.empty(n_state)
    sl = layout.state_slices(lay)
    atol[sl["circuit"]] = 1e-12
    atol[sl["alveolar"]] = 1e-12
    atol[sl["tissue"]] = 1e-12
    atol[sl["absorbent"]] = 1e-7
    atol[sl["absorbent"].stop:] = 1e-7
    return GroupInputs(gases=gases, tissue_names=tuple(t.name for t in tissues),
                       tissue_labels=tuple(t.label for t in tissues), lay=lay, params=params,
                       seg_times=seg_times, jumps=jumps, y0=y0, atol=atol, k_circuit=k_circ,
                       k_body=k_body, agent_index=agent_index, circuit_min_stpd=n_min,
                       circuit_max_stpd=n_max, patients=patients, circuit=circuit, plan=plan)


def initial_states(lay: np.ndarray, p: np.ndarray, circuit: Circuit, absorber: Absorber,
                   k_circ: float, members: bool = False) -> np.ndarray:
    """State at time 0 of each member, shape (B, n_state), from its first segment's
    parameters ``p`` (shape (B, n_params)): the patient in steady state breathing room air;
    the circuit filled.

    The circuit holds the first step's fresh gas without vapour (or room air, as the circuit's
    ``start_gas`` says) at its starting bag fill; the alveoli are in steady state with
    air at the first segment's ventilation; tissue nitrogen is in equilibrium with alveolar
    nitrogen; the absorbent starts at its stated used fraction.
    """
    sl = layout.state_slices(lay)
    y = np.zeros((p.shape[0], layout.state_size(lay)))
    amount = k_circ * (circuit.volume_l + circuit.bag_fill * circuit.bag_l)
    if circuit.start_gas == "air":
        y[:, layout.O2] = amount * m.AIR_O2
        y[:, layout.N2] = amount * m.AIR_N2
    else:
        carrier = p[:, layout.parameter_slices(lay)["fresh"]].copy()
        carrier[:, layout.FIRST_AGENT:] = 0.0
        y[:, : carrier.shape[1]] = amount * carrier / carrier.sum(axis=1, keepdims=True)
    vo2, vco2 = p[:, layout.P_VO2], p[:, layout.P_VCO2]
    alveolar_in = p[:, layout.P_INSPIRED] - p[:, layout.P_DEAD_SPACE]
    alveolar_out = alveolar_in - vo2 + vco2
    short = np.flatnonzero(alveolar_in <= vo2)
    if short.size:
        who = f"batch member {int(short[0])}: " if members else ""
        raise InputError(f"{who}the first step's alveolar ventilation is too small to supply "
                         "the patient's oxygen consumption breathing air; raise "
                         "tidal_volume_ml or rate_per_min.")
    alv = sl["alveolar"].start
    y[:, alv + layout.O2] = (alveolar_in * m.AIR_O2 - vo2) / alveolar_out
    y[:, alv + layout.CO2] = vco2 / alveolar_out
    y[:, alv + layout.N2] = alveolar_in * m.AIR_N2 / alveolar_out
    n_soluble = int(lay[1])
    tissue = sl["tissue"]
    for c in range(int(lay[2])):
        nitrogen = tissue.start + c * n_soluble + layout.N2 - layout.FIRST_SOLUBLE
        y[:, nitrogen] = y[:, alv + layout.N2]
    y[:, sl["absorbent"].start] = absorber.used_fraction * absorber.capacity_l
    return y

