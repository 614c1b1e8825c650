"""Oxygen at minimal flow: fresh-gas make-ups, the breathing-system set-up, and steady states.

The quality team's analyses (see ``docs/oxygen.md``) share the pieces defined here:

* :class:`FreshGas` — a make-up given the way a department writes its rules: total flow at the
  flowmeters, O2 fraction and carrier (air or N2O), optionally a vaporizer dial;
* :class:`Setup` — patient, circuit, vaporizer and absorber together;
* :func:`minimal_flow_plan` — pre-oxygenation, an initial high-flow period, then the make-up;
* :func:`circuit_flows` — the engine's own flows for a set-up, for the closed forms of
  :mod:`circlesim.oxygen.balance`;
* :func:`steady_state` (closed form) and :func:`engine_steady_state` (the engine run until
  nothing changes).

The other ``oxygen_*`` modules build on these: the lowest safe fresh-gas O2 fraction
(:mod:`~circlesim.oxygen.minimum`), the flow × O2 map (:mod:`~circlesim.oxygen.flow_map`), time
courses (:mod:`~circlesim.oxygen.course`), nitrogen (:mod:`~circlesim.oxygen.nitrogen`), leaks
and lost sample gas (:mod:`~circlesim.oxygen.losses`) and the absorbent
(:mod:`~circlesim.oxygen.absorbent`).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field, replace

import numpy as np

from circlesim.base.units import atpd_to_stpd
from circlesim.base.validation import (
    InputError,
    Interval,
    OneOf,
    bounded,
    check_fields,
    check_number,
)
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import MAX_PLAN_MIN, MAX_TOTAL_FGF_L_MIN, MIN_TOTAL_FGF_L_MIN, Plan, Step
from circlesim.engine import layout
from circlesim.engine import model as m
from circlesim.engine.assembly import assemble
from circlesim.engine.result import Result
from circlesim.oxygen.balance import CircuitFlows, SteadyState, mass_balance
from circlesim.scenario import Scenario
from circlesim.targets.predict import simulate

__all__ = [
    "AIR_O2",
    "CARRIERS",
    "FIO2_THRESHOLD_RANGE",
    "FreshGas",
    "Setup",
    "check_fgf_grid",
    "check_leak_below_flow",
    "check_threshold",
    "circuit_flows",
    "engine_steady_state",
    "fresh_gas_stpd",
    "minimal_flow_plan",
    "minimum_fgf_l_min",
    "steady_state",
]

#: O2 fraction of dry air (the model's value, US Standard Atmosphere 1976).
AIR_O2 = m.AIR_O2
#: Carrier gases a make-up can use.
CARRIERS = ("air", "n2o")
#: A canister that stays fresh for a day of any plan (5 kg at the theoretical 26 L/100 g);
#: used for steady states of the gases.
FRESH_ABSORBER = Absorber(granule_mass_g=5000.0, capacity_l_per_100g=26.0,
                          breakthrough_start=0.99)
#: Allowed range of an FIO2 threshold.
FIO2_THRESHOLD_RANGE = Interval(0.21, 1.0)


@dataclass(frozen=True)
class FreshGas:
    """A fresh-gas make-up.

    Parameters
    ----------
    fgf_l_min : float, L/min, 0.1–20
        Total of the O2 and carrier flowmeters (vapour excluded), at flowmeter conditions.
    o2_fraction : float, 0.20946–1
        O2 fraction of the flowmeter gas (air alone gives 0.20946).
    carrier : {"air", "n2o"}
        The gas mixed with O2.
    dial_percent : float, vol%, 0–25
        Vaporizer dial (0: no agent).
    """

    fgf_l_min: float = field(metadata=bounded(MIN_TOTAL_FGF_L_MIN, MAX_TOTAL_FGF_L_MIN, "L/min"))
    o2_fraction: float = field(metadata=bounded(AIR_O2, 1.0))
    carrier: str = field(default="air", metadata={"constraint": OneOf(CARRIERS)})
    dial_percent: float = field(default=0.0, metadata=bounded(0.0, 25.0, "vol%"))

    def __post_init__(self) -> None:
        check_fields(self)

    @property
    def carrier_l_min(self) -> float:
        """Air or N2O flowmeter, L/min."""
        if self.carrier == "n2o":
            return self.fgf_l_min * (1.0 - self.o2_fraction)
        return self.fgf_l_min * (1.0 - self.o2_fraction) / (1.0 - AIR_O2)

    @property
    def o2_l_min(self) -> float:
        """O2 flowmeter, L/min."""
        return self.fgf_l_min - self.carrier_l_min

    def settings(self) -> dict[str, float]:
        """The step settings (O2, air and N2O flowmeters in L/min, dial in vol%)."""
        carrier = self.carrier_l_min
        return {"o2_l_min": self.o2_l_min,
                "air_l_min": carrier if self.carrier == "air" else 0.0,
                "n2o_l_min": carrier if self.carrier == "n2o" else 0.0,
                "dial_percent": self.dial_percent}

    def describe(self) -> str:
        """Short text, e.g. "0.5 L/min, 50 % O2 in air"."""
        text = (f"{self.fgf_l_min:g} L/min, {100 * self.o2_fraction:.0f} % O2 in "
                f"{'air' if self.carrier == 'air' else 'N2O'}")
        return text + (f", dial {self.dial_percent:g} %" if self.dial_percent else "")


@dataclass(frozen=True)
class Setup:
    """Patient and breathing system for the oxygen analyses.

    Parameters
    ----------
    patient : Patient
    circuit : Circuit
    vaporizer : Vaporizer
        Only matters when a make-up sets a dial.
    absorber : Absorber
    """

    patient: Patient = field(default_factory=Patient)
    circuit: Circuit = field(default_factory=Circuit)
    vaporizer: Vaporizer = field(default_factory=Vaporizer)
    absorber: Absorber = field(default_factory=Absorber)

    def __post_init__(self) -> None:
        for name, kind in (("patient", Patient), ("circuit", Circuit),
                           ("vaporizer", Vaporizer), ("absorber", Absorber)):
            if not isinstance(getattr(self, name), kind):
                raise InputError(f"Setup.{name} must be a {kind.__name__}; got "
                                 f"{type(getattr(self, name)).__name__}.")

    @classmethod
    def from_scenario(cls, scenario: Scenario) -> Setup:
        """The patient and breathing system of a scenario (its plan is not used)."""
        return cls(scenario.model_patient, scenario.model_circuit, scenario.vaporizer,
                   scenario.absorber)

    def with_circuit(self, **changes) -> Setup:
        """A copy with some circuit fields changed (validated again)."""
        return replace(self, circuit=replace(self.circuit, **changes))

    def simulate(self, plan: Plan, **kwargs) -> Result:
        """Run :func:`circlesim.simulate` for this set-up."""
        return simulate(self.patient, self.circuit, plan, vaporizer=self.vaporizer,
                        absorber=self.absorber, **kwargs)

    @property
    def k_circuit(self) -> float:
        """L STPD per litre at flowmeter (circuit) conditions."""
        return atpd_to_stpd(self.circuit.gas_temperature_c, self.circuit.ambient_pressure_kpa)


# ---- input checks ---------------------------------------------------------------------------
def check_threshold(threshold: float, owner: str = "oxygen") -> float:
    """Check an FIO2 threshold (0.21–1) and return it as a float."""
    return check_number(owner, "fio2_threshold", threshold, FIO2_THRESHOLD_RANGE)


def check_fgf_grid(fgf_l_min: Iterable[float] | float, owner: str = "oxygen",
                   name: str = "fgf_l_min") -> np.ndarray:
    """Check a grid of total fresh gas flows (L/min): non-empty, each 0.1–20 L/min.

    Returns
    -------
    ndarray, shape (n,)
        The flows in the order given.
    """
    values = np.atleast_1d(np.asarray(fgf_l_min, dtype=object))
    if values.ndim != 1 or values.size == 0:
        raise InputError(f"{owner}.{name} must hold at least one fresh gas flow "
                         f"({MIN_TOTAL_FGF_L_MIN:g}-{MAX_TOTAL_FGF_L_MIN:g} L/min); got none.")
    interval = Interval(MIN_TOTAL_FGF_L_MIN, MAX_TOTAL_FGF_L_MIN, "L/min")
    return np.array([check_number(owner, f"{name}[{i}]", v, interval)
                     for i, v in enumerate(values)])


def check_leak_below_flow(circuit: Circuit, fgf_l_min: float, owner: str = "oxygen") -> None:
    """Refuse a leak plus lost sample gas that is not smaller than the fresh gas flow."""
    lost = circuit.leak_ml_min + (0.0 if circuit.sample_returned else circuit.sample_ml_min)
    if lost >= 1000.0 * fgf_l_min:
        what = "leak_ml_min" if circuit.sample_returned else "leak_ml_min + sample_ml_min"
        raise InputError(
            f"{owner}: Circuit.{what} must be smaller than the fresh gas flow "
            f"({1000.0 * fgf_l_min:g} mL/min); got {lost:g} mL/min. No fresh gas flow that "
            "small can keep the circuit filled.")


# ---- plans ----------------------------------------------------------------------------------
def minimal_flow_plan(maintenance: FreshGas, *, duration_min: float = 120.0,
                      initial_min: float = 10.0, initial_fgf_l_min: float = 4.0,
                      initial_o2_fraction: float | None = None,
                      preoxygenation_min: float = 0.0,
                      preoxygenation_fgf_l_min: float = 10.0, valve: str = "open",
                      name: str = "minimal flow") -> Plan:
    """A plan: optional pre-oxygenation, an initial high-flow period, then the make-up.

    Parameters
    ----------
    maintenance : FreshGas
        Make-up from the end of the initial period to the end of the plan.
    duration_min : float, min, 1–1440
    initial_min : float, min, 0–1440
        Length of the initial high-flow period (0: none).
    initial_fgf_l_min : float, L/min, 0.1–20
        Its total flow, with the carrier and dial of ``maintenance``.
    initial_o2_fraction : float or None, 0.20946–1
        Its O2 fraction (default: that of ``maintenance``).
    preoxygenation_min : float, min, 0–1440
        O2 alone at ``preoxygenation_fgf_l_min`` before the high-flow period (0: none).
    preoxygenation_fgf_l_min : float, L/min, 0.1–20
    valve : {"open", "closed"}
        Pressure-limiting valve during the maintenance part.
    name : str

    Returns
    -------
    Plan
    """
    if not isinstance(maintenance, FreshGas):
        raise InputError(f"maintenance must be a FreshGas; got {type(maintenance).__name__}.")
    owner = "minimal_flow_plan"
    check_number(owner, "duration_min", duration_min, Interval(1.0, MAX_PLAN_MIN, "min"))
    check_number(owner, "initial_min", initial_min, Interval(0.0, MAX_PLAN_MIN, "min"))
    check_number(owner, "preoxygenation_min", preoxygenation_min,
                 Interval(0.0, MAX_PLAN_MIN, "min"))
    steps = []
    t = 0.0
    if preoxygenation_min > 0.0:
        pre = FreshGas(preoxygenation_fgf_l_min, 1.0, maintenance.carrier, 0.0)
        steps.append(Step(t, **pre.settings(), valve="open", note="pre-oxygenation"))
        t += float(preoxygenation_min)
    if initial_min > 0.0:
        fraction = maintenance.o2_fraction if initial_o2_fraction is None else initial_o2_fraction
        high = replace(maintenance, fgf_l_min=initial_fgf_l_min, o2_fraction=fraction)
        steps.append(Step(t, **high.settings(), valve="open", note="initial high flow"))
        t += float(initial_min)
    if not t < duration_min:
        raise InputError(f"{owner}.duration_min must be longer than pre-oxygenation plus the "
                         f"initial period ({t:g} min); got {duration_min:g}.")
    steps.append(Step(t, **maintenance.settings(), valve=valve, note=maintenance.describe()))
    return Plan(tuple(steps), duration_min=float(duration_min), name=name,
                description=f"{maintenance.describe()} after {initial_min:g} min at "
                            f"{initial_fgf_l_min:g} L/min")


# ---- closed forms ---------------------------------------------------------------------------
def circuit_flows(setup: Setup, *, tidal_volume_ml: float | None = None,
                  rate_per_min: float | None = None) -> CircuitFlows:
    """The engine's flows (L STPD/min) for a set-up, taken from the assembled model inputs.

    Parameters
    ----------
    setup : Setup
    tidal_volume_ml : float or None, mL BTPS
        Ventilation (default: the patient's).
    rate_per_min : float or None, breaths/min
    """
    probe = Plan((Step(0.0, o2_l_min=1.0, tidal_volume_ml=tidal_volume_ml,
                       rate_per_min=rate_per_min),), duration_min=1.0)
    p = assemble(setup.patient, setup.circuit, setup.absorber, setup.vaporizer, probe).params[0]
    return CircuitFlows(
        inspired_l_min=float(p[layout.P_INSPIRED]), dead_space_l_min=float(p[layout.P_DEAD_SPACE]),
        vo2_l_min=float(p[layout.P_VO2]), vco2_l_min=float(p[layout.P_VCO2]),
        leak_l_min=float(p[layout.P_LEAK]), sample_lost_l_min=float(p[layout.P_SAMPLE_LOST]),
        sample_inspired_fraction=float(p[layout.P_SAMPLE_INSPIRED]),
        vent_exhaled_share=float(p[layout.P_VENT_EXHALED]), k_circuit=setup.k_circuit)


def fresh_gas_stpd(k_circuit: float, fgf_l_min, o2_fraction, carrier: str = "air",
                   dial_percent: float = 0.0) -> dict[str, np.ndarray]:
    """Fresh gas per gas, L STPD/min, for make-ups given by flow and O2 fraction (broadcast).

    Parameters
    ----------
    k_circuit : float
        L STPD per litre at flowmeter conditions (:attr:`Setup.k_circuit`).
    fgf_l_min : array_like, L/min
        Total flowmeter flow.
    o2_fraction : array_like, 0.20946–1
    carrier : {"air", "n2o"}
    dial_percent : float, vol%
        Plenum vaporizer dial; the vapour adds ``dial / (1 − dial)`` of the carrier flow.

    Returns
    -------
    dict with keys "o2", "n2", "n2o", "agent"
    """
    flow = k_circuit * np.asarray(fgf_l_min, dtype=float)
    x = np.asarray(o2_fraction, dtype=float)
    o2 = flow * x
    carrier_flow = flow * (1.0 - x)
    zero = np.zeros(np.broadcast(flow, x).shape)
    n2 = carrier_flow if carrier == "air" else zero
    n2o = carrier_flow if carrier == "n2o" else zero
    dial = dial_percent / 100.0
    agent = (flow + zero) * dial / (1.0 - dial)
    return {"o2": o2 + zero, "n2": n2 + zero, "n2o": n2o + zero, "agent": agent}


def steady_state(setup: Setup, fgf_l_min, o2_fraction, *, carrier: str = "air",
                 dial_percent: float = 0.0, tidal_volume_ml: float | None = None,
                 rate_per_min: float | None = None) -> SteadyState:
    """Steady state of the circuit in closed form for make-ups (arrays broadcast).

    Exact for the model once the body's nitrogen, N2O and agent stores are in equilibrium
    (their uptake is then zero) and the absorbent is fresh. A vaporizer inside the circle is
    not covered (use :func:`engine_steady_state`).

    Parameters
    ----------
    setup : Setup
    fgf_l_min : array_like, L/min
    o2_fraction : array_like, 0.20946–1
    carrier : {"air", "n2o"}
    dial_percent : float, vol%
    tidal_volume_ml, rate_per_min : float or None
        Ventilation (default: the patient's).
    """
    if dial_percent > 0.0 and setup.vaporizer.placement == "inside":
        raise InputError("steady_state covers a plenum vaporizer outside the circle; with a "
                         "draw-over vaporizer inside it use engine_steady_state.")
    flows = circuit_flows(setup, tidal_volume_ml=tidal_volume_ml, rate_per_min=rate_per_min)
    fresh = fresh_gas_stpd(flows.k_circuit, fgf_l_min, o2_fraction, carrier, dial_percent)
    return mass_balance(flows, fresh["o2"], fresh["n2"], fresh["n2o"], fresh["agent"])


def minimum_fgf_l_min(setup: Setup, *, dial_percent: float = 0.0) -> float:
    """Total flowmeter flow (L/min) that just replaces the O2 consumption, the leak and the lost
    sample gas once the body's N2 and N2O stores are full: below it the bag empties. It is the
    O2 supply of a closed circuit.

    Parameters
    ----------
    setup : Setup
    dial_percent : float, vol%
        Plenum vaporizer dial (its vapour counts towards the fresh gas).
    """
    flows = circuit_flows(setup)
    fresh = fresh_gas_stpd(flows.k_circuit, 1.0, 1.0)
    needed = float(mass_balance(flows, fresh["o2"]).minimum_fresh_l_min)
    return needed * (1.0 - dial_percent / 100.0) / flows.k_circuit


def engine_steady_state(setup: Setup, fresh: FreshGas, *, chunk_min: float = 1440.0,
                        max_chunks: int = 6, tolerance: float = 1e-6,
                        output_interval_min: float = 10.0) -> Result:
    """Run the engine at a constant make-up until the inspired gas stops changing.

    The plan is repeated in chunks of ``chunk_min`` minutes, each continuing from the last,
    until inspired O2, N2 and N2O change by less than ``tolerance`` (fraction) over a chunk.
    The set-up's canister is replaced by the largest one allowed and renewed at the start of
    every chunk, so that this is the steady state of the gases with fresh absorbent (a real
    canister would be spent long before).

    Parameters
    ----------
    setup : Setup
    fresh : FreshGas
        Constant make-up from time 0 (the patient starts breathing room air).
    chunk_min : float, min, 1-1440
    max_chunks : int
    tolerance : float
        Largest change of an inspired fraction over the last chunk.
    output_interval_min : float, min

    Returns
    -------
    Result
        The last chunk; its last row is the steady state.

    Raises
    ------
    InputError
        If it has not settled after ``max_chunks`` chunks.
    """
    plan = Plan((Step(0.0, **fresh.settings()),), duration_min=chunk_min, name="steady state")
    setup = replace(setup, absorber=FRESH_ABSORBER)
    inputs = assemble(setup.patient, setup.circuit, setup.absorber, setup.vaporizer, plan)
    absorbent = layout.state_slices(inputs.lay)["absorbent"].start
    result = setup.simulate(plan, output_interval_min=output_interval_min)
    previous = result.inspired[-1, :4]
    for _ in range(max_chunks - 1):
        y = result.final_state.copy()
        y[absorbent] = inputs.y0[absorbent]
        result = setup.simulate(plan, output_interval_min=output_interval_min, initial_state=y)
        now = result.inspired[-1, :4]
        if np.max(np.abs(now - previous)) < tolerance:
            return result
        previous = now
    raise InputError(f"engine_steady_state: the circuit had not settled after "
                     f"{max_chunks * chunk_min:g} min at {fresh.describe()}; raise max_chunks.")
