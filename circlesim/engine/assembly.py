"""Turn domain objects (patient, circuit, absorber, vaporizer, plan) into the model's arrays.

This is the only place that knows both the domain objects and the model's array layout. Unit
conversions come from :mod:`circlesim.base.units`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from circlesim.base.units import atpd_to_stpd, btps_to_stpd, liquid_ml_to_vapour_l_stpd, ml_to_l
from circlesim.base.validation import InputError
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan, Segment
from circlesim.engine import model as m
from circlesim.properties import NITROGEN, NITROUS_OXIDE, SolubleGas

__all__ = ["GAS_LABELS", "ModelInputs", "assemble"]

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


def _soluble_gases(vaporizer: Vaporizer) -> tuple[SolubleGas, ...]:
    return (NITROGEN, NITROUS_OXIDE, vaporizer.properties)


def _tissue_partition(gas: SolubleGas, partition: str) -> float:
    return {"brain": gas.brain_blood, "muscle": gas.muscle_blood, "fat": gas.fat_blood}[
        partition]


def check_plan_against(plan: Plan, patient: Patient, circuit: Circuit,
                       vaporizer: Vaporizer) -> tuple[Segment, ...]:
    """Resolve a plan's segments for this patient and vaporizer, checking what depends on both.

    Raises
    ------
    InputError
        If a dial is above the vaporizer's range or a tidal volume does not exceed the dead
        space.
    """
    segments = plan.segments(patient.default_tidal_volume_ml, patient.default_rate_per_min,
                             circuit.valve)
    max_dial = vaporizer.max_dial
    dead_space = patient.dead_space
    for i, seg in enumerate(segments):
        step_index = i
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
        if seg.tidal_volume_ml <= dead_space + 1.0:
            raise InputError(
                f"Plan.steps[{step_index}].tidal_volume_ml must be larger than the dead space "
                f"({patient.dead_space:.0f} mL); got {seg.tidal_volume_ml:g}.")
    return segments


def assemble(patient: Patient, circuit: Circuit, absorber: Absorber, vaporizer: Vaporizer,
             plan: Plan) -> ModelInputs:
    """Build the model inputs for one patient, breathing system and plan."""
    segments = check_plan_against(plan, patient, circuit, vaporizer)
    soluble = _soluble_gases(vaporizer)
    gases = ("oxygen", "carbon_dioxide", *(g.name for g in soluble))
    n_gas = len(gases)
    agent_index = n_gas - 1
    tissues = patient.tissues()
    tissue_index = {t.name: i for i, t in enumerate(tissues)}
    links = patient.intertissue_links()
    lay = m.layout(n_gas, len(tissues), [tissue_index[a] for a, _, _ in links],
                   [tissue_index[b] for _, b, _ in links])
    slices = m.parameter_slices(lay)
    n_params = m.parameter_size(lay)
    k_circ = atpd_to_stpd(circuit.gas_temperature_c, circuit.ambient_pressure_kpa)
    k_body = btps_to_stpd(circuit.ambient_pressure_kpa)

    lam = np.array([g.blood_gas_for(patient.blood_gas_source) * patient.solubility_scale
                    for g in soluble])
    capacity = np.empty((len(tissues), len(soluble)))
    for c, tissue in enumerate(tissues):
        for s, gas in enumerate(soluble):
            capacity[c, s] = (k_body * tissue.volume_l * _tissue_partition(gas, tissue.partition)
                              * lam[s])
    conductance = np.empty((len(links), len(soluble)))
    for k, (_, to, tau) in enumerate(links):
        conductance[k] = capacity[tissue_index[to]] / tau

    agent = vaporizer.properties
    saturation = agent.vapour_pressure_kpa(circuit.gas_temperature_c) / circuit.ambient_pressure_kpa
    base = np.zeros(n_params)
    base[m.P_VO2] = ml_to_l(patient.vo2)
    base[m.P_VCO2] = ml_to_l(patient.vco2)
    base[m.P_CARDIAC_OUTPUT] = patient.cardiac_output
    base[m.P_SHUNT] = patient.shunt_fraction
    base[m.P_K_BODY] = k_body
    base[m.P_LUNG_VOLUME] = patient.frc
    base[m.P_LEAK] = k_circ * ml_to_l(circuit.leak_ml_min)
    base[m.P_SAMPLE_LOST] = 0.0 if circuit.sample_returned else (
        k_circ * ml_to_l(circuit.sample_ml_min))
    base[m.P_SAMPLE_INSPIRED] = circuit.inspiratory_fraction
    base[m.P_DRAW_OVER_GAS] = agent_index if vaporizer.placement == "inside" else -1
    base[m.P_DRAW_OVER_SATURATION] = min(saturation, 1.0)
    n_min = k_circ * circuit.volume_l
    n_max = k_circ * circuit.total_volume_l
    base[m.P_CIRCUIT_MIN] = n_min
    base[m.P_CIRCUIT_MAX] = n_max
    base[m.P_RELAXATION] = RELAXATION_PER_MIN
    base[m.P_ABSORBENT_CAPACITY] = absorber.capacity_l
    base[m.P_ABSORBENT_KNEE] = absorber.breakthrough_start
    base[m.P_O2_FLOOR] = O2_FLOOR
    base[m.P_VENT_EXHALED] = circuit.vent_exhaled_share
    base[slices["blood_gas"]] = lam
    base[slices["tissue_flow"]] = [t.blood_flow_l_min for t in tissues]
    base[slices["tissue_capacity"]] = capacity.ravel()
    base[slices["link_conductance"]] = conductance.ravel()

    n_state = m.state_size(lay)
    params = np.repeat(base[None, :], len(segments), axis=0)
    jumps = np.zeros((len(segments), n_state))
    # every segment at once (one array per setting, segment axis first)
    o2, air, n2o, dial, tidal, rate, inject = (np.array(
        [getattr(seg, name) for seg in segments], dtype=float) for name in (
        "o2_l_min", "air_l_min", "n2o_l_min", "dial_percent", "tidal_volume_ml",
        "rate_per_min", "inject_ml"))
    params[:, m.P_INSPIRED] = k_body * (ml_to_l(tidal) * rate)
    params[:, m.P_DEAD_SPACE] = k_body * (ml_to_l(patient.dead_space) * rate)
    carrier = np.zeros((len(segments), n_gas))
    carrier[:, m.O2] = k_circ * (o2 + m.AIR_O2 * air)
    carrier[:, m.N2] = k_circ * m.AIR_N2 * air
    carrier[:, m.N2O] = k_circ * n2o
    fraction = dial / 100.0
    if vaporizer.placement == "outside":
        carrier[:, agent_index] = carrier.sum(axis=1) * fraction / (1.0 - fraction)
    else:
        params[:, m.P_DRAW_OVER_SETTING] = fraction
    params[:, slices["fresh"]] = carrier
    injected = inject > 0.0
    if injected.any():
        vapour = liquid_ml_to_vapour_l_stpd(inject[injected], agent.liquid_density_g_ml,
                                            agent.molar_mass_g_mol)
        jumps[injected, agent_index] = vapour
        jumps[injected, m.state_slices(lay)["delivered"].start + agent_index] = vapour
    seg_times = np.array([s.start_min for s in segments] + [segments[-1].end_min])

    y0 = initial_state(lay, params[0], patient, circuit, absorber, k_circ)
    atol = np.empty(n_state)
    sl = m.state_slices(lay)
    atol[sl["circuit"]] = 1e-12
    atol[sl["alveolar"]] = 1e-12
    atol[sl["tissue"]] = 1e-12
    atol[sl["absorbent"]] = 1e-7
    atol[sl["absorbent"].stop:] = 1e-7
    return ModelInputs(gases=gases, tissue_names=tuple(t.name for t in tissues),
                       tissue_labels=tuple(t.label for t in tissues), lay=lay, params=params,
                       seg_times=seg_times, jumps=jumps, y0=y0, atol=atol, k_circuit=k_circ,
                       k_body=k_body, segments=segments, agent_index=agent_index,
                       circuit_min_stpd=n_min, circuit_max_stpd=n_max)


def initial_state(lay: np.ndarray, p: np.ndarray, patient: Patient, circuit: Circuit,
                  absorber: Absorber, k_circ: float) -> np.ndarray:
    """State at time 0: the patient in steady state breathing room air; the circuit filled.

    The circuit holds the first step's fresh gas without vapour (or room air, as the circuit's
    ``start_gas`` says) at its starting bag fill; the alveoli are in steady state with
    air at the first segment's ventilation; tissue nitrogen is in equilibrium with alveolar
    nitrogen; the absorbent starts at its stated used fraction.
    """
    sl = m.state_slices(lay)
    y = np.zeros(m.state_size(lay))
    amount = k_circ * (circuit.volume_l + circuit.bag_fill * circuit.bag_l)
    if circuit.start_gas == "air":
        y[m.O2] = amount * m.AIR_O2
        y[m.N2] = amount * m.AIR_N2
    else:
        carrier = p[m.parameter_slices(lay)["fresh"]].copy()
        carrier[m.FIRST_AGENT:] = 0.0
        y[: carrier.size] = amount * carrier / carrier.sum()
    alveolar_in = p[m.P_INSPIRED] - p[m.P_DEAD_SPACE]
    alveolar_out = alveolar_in - p[m.P_VO2] + p[m.P_VCO2]
    if alveolar_in <= p[m.P_VO2]:
        raise InputError("the first step's alveolar ventilation is too small to supply the "
                         "patient's oxygen consumption breathing air; raise tidal_volume_ml or "
                         "rate_per_min.")
    alv = sl["alveolar"].start
    y[alv + m.O2] = (alveolar_in * m.AIR_O2 - p[m.P_VO2]) / alveolar_out
    y[alv + m.CO2] = p[m.P_VCO2] / alveolar_out
    y[alv + m.N2] = alveolar_in * m.AIR_N2 / alveolar_out
    n_soluble = int(lay[1])
    tissue = sl["tissue"]
    for c in range(int(lay[2])):
        y[tissue.start + c * n_soluble + (m.N2 - m.FIRST_SOLUBLE)] = y[alv + m.N2]
    y[sl["absorbent"].start] = absorber.used_fraction * absorber.capacity_l
    return y
