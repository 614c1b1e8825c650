"""The result of a simulation: named time series, the gas balance, warnings and solver report.

Gas composition is kept as dry-gas fractions (0–1) and amounts as litres STPD, as inside the
model; the accessors and :meth:`Result.frame` present them the way people read them — vol%,
flows in L/min at the flowmeters' conditions, uptake in mL/min STPD, liquid agent in mL.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

from circlesim.base.files import write_text_atomic
from circlesim.base.units import (
    body_partial_pressure_kpa,
    vapour_l_stpd_to_grams,
    vapour_l_stpd_to_liquid_ml,
)
from circlesim.properties import NITROUS_OXIDE, mac_at_age

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
    from circlesim.domain.patient import Patient
    from circlesim.domain.plan import Plan

__all__ = ["Alert", "Result", "SolverReport", "TargetTrace"]


@dataclass(frozen=True)
class Alert:
    """A rule that fired.

    Attributes
    ----------
    key, severity, message, source : str
    start_min : float
        First output time at which the condition held, min.
    end_min : float or None
        Last time it held, or None if it still held at the end of the plan.
    extreme : float
        Lowest (for "below") or highest (for "above") value reached, in the rule's unit.
    """

    key: str
    severity: str
    message: str
    source: str
    start_min: float
    end_min: float | None
    extreme: float

    def __str__(self) -> str:
        until = "the end of the plan" if self.end_min is None else f"{self.end_min:.1f} min"
        return f"[{self.severity}] from {self.start_min:.1f} min to {until}: {self.message}"

class TargetTrace(Protocol):
    """What a result carries from a layer that chose its dial settings (target mode).

    The engine knows nothing of targets; the target layer attaches an object with these two
    methods as ``Result.control`` (:class:`circlesim.targets.settings.ControlReport`).
    """

    def target_series(self, time_min: np.ndarray) -> np.ndarray:
        """End-tidal target at ``time_min`` (shape (T,)), vol%; NaN where there is none."""

    def dial_series(self, time_min: np.ndarray) -> np.ndarray:
        """Dial setting in force at ``time_min`` (shape (T,)), vol%."""


@dataclass(frozen=True)
class SolverReport:
    """How the integration went.

    Attributes
    ----------
    method : str
        Integrator used.
    success : bool
    message : str
    evaluations : int
        Right-hand-side evaluations.
    steps : int
        Accepted steps (0 when the method does not report them, as for scipy's).
    rejected : int
        Rejected steps.
    """

    method: str
    success: bool
    message: str
    evaluations: int
    steps: int
    rejected: int


@dataclass(frozen=True, eq=False)
class Result:
    """Time series predicted for one patient, breathing system and plan.

    Array shapes use ``T`` output times, ``G`` gases (:attr:`gases`), ``S`` soluble gases
    (:attr:`soluble_gases`: nitrogen, nitrous oxide, the agent) and ``C`` tissue groups.

    Attributes
    ----------
    time_min : ndarray, shape (T,)
        Minutes from the start of the plan.
    segment_index : ndarray of int, shape (T,)
        The plan segment (:meth:`~circlesim.domain.plan.Plan.segments`) in force at each
        output time.
    gases, soluble_gases, tissue_names, tissue_labels : tuple of str
    inspired, end_tidal : ndarray, shape (T, G)
        Dry-gas fractions: inspired gas, alveolar (end-tidal) gas.
    arterial, mixed_venous : ndarray, shape (T, S)
        Partial pressures of the soluble gases as dry-gas-fraction equivalents.
    tissue : ndarray, shape (T, C, S)
        Tissue partial pressures as dry-gas-fraction equivalents.
    fresh_gas_stpd, vented_stpd, leak_stpd, sample_lost_stpd, entrained_stpd : ndarray (T,)
        Flows, L STPD/min: fresh gas with plenum vapour, gas vented by the pressure-limiting
        valve, leak, side-stream sample gas not returned, room air entrained by an empty
        circuit.
    draw_over_vapour_stpd, absorbed_stpd : ndarray (T,)
        Vapour added by a draw-over vaporizer and CO2 taken up by the absorbent, L STPD/min.
    uptake_stpd, vented_gas_stpd : ndarray, shape (T, G)
        Uptake by the patient's blood (O2 consumption positive, CO2 output negative) and vented
        gas, per gas, L STPD/min.
    circuit_amount_stpd : ndarray (T,)
        Gas in the circuit, L STPD.
    absorbent_efficiency, absorbent_used_fraction : ndarray (T,)
    cumulative : dict of str to ndarray, shape (T, G)
        Amounts since the start, L STPD: "delivered", "entrained", "vented", "leaked",
        "sampled", "uptake"; and "absorbed" (CO2 only, others zero).
    held_in_circuit : ndarray, shape (T, G)
        Amounts in the circuit, L STPD.
    held_at_start : ndarray, shape (G,)
        Amount in circuit and patient at the start, before any injection at time 0, L STPD.
    lung_gas_stpd : float
        Gas in the lungs at FRC, L STPD.
    tissue_capacity_stpd : ndarray, shape (C, S)
        Gas each tissue group holds per unit dry-gas-fraction equivalent, L STPD.
    states : ndarray, shape (T, n_state)
        Raw model states (layout: :mod:`circlesim.engine.layout`).
    final_state : ndarray
        State at the end of the plan, for continuing (``simulate(..., initial_state=...)``).
    k_circuit : float
        L STPD per litre at flowmeter/circuit conditions.
    circuit_fixed_l, bag_capacity_l : float
        Circuit gas volume without the bag, and bag capacity, L.
    alerts : tuple of Alert
        Warnings raised by the alert rules, each with its start time.
    control : TargetTrace or None
        For plans with end-tidal targets, attached by the target layer: the targets, the
        controller's plan and whether each target was met
        (:class:`circlesim.targets.settings.ControlReport`); None otherwise.
    solver : SolverReport
    patient, circuit, absorber, vaporizer, plan
        The inputs, so that the run can be reproduced.
    """

    time_min: np.ndarray
    segment_index: np.ndarray
    gases: tuple[str, ...]
    soluble_gases: tuple[str, ...]
    tissue_names: tuple[str, ...]
    tissue_labels: tuple[str, ...]
    inspired: np.ndarray
    end_tidal: np.ndarray
    arterial: np.ndarray
    mixed_venous: np.ndarray
    tissue: np.ndarray
    fresh_gas_stpd: np.ndarray
    vented_stpd: np.ndarray
    leak_stpd: np.ndarray
    sample_lost_stpd: np.ndarray
    entrained_stpd: np.ndarray
    draw_over_vapour_stpd: np.ndarray
    absorbed_stpd: np.ndarray
    uptake_stpd: np.ndarray
    vented_gas_stpd: np.ndarray
    fresh_gas_by_gas_stpd: np.ndarray
    circuit_amount_stpd: np.ndarray
    absorbent_efficiency: np.ndarray
    absorbent_used_fraction: np.ndarray
    cumulative: dict[str, np.ndarray]
    held_in_circuit: np.ndarray
    held_at_start: np.ndarray
    lung_gas_stpd: float
    tissue_capacity_stpd: np.ndarray
    states: np.ndarray
    final_state: np.ndarray
    k_circuit: float
    circuit_fixed_l: float
    bag_capacity_l: float
    absorbent_capacity_l: float
    solver: SolverReport
    patient: Patient
    circuit: Circuit
    absorber: Absorber
    vaporizer: Vaporizer
    plan: Plan
    alerts: tuple[Alert, ...] = field(default=())
    control: TargetTrace | None = None

    # ---- derived on first use (most callers never read them) ------------------------------
    @cached_property
    def circuit_gas(self) -> np.ndarray:
        """Dry-gas fractions of the well-mixed circuit gas, shape (T, G)."""
        return self.held_in_circuit / self.circuit_amount_stpd[:, None]

    @cached_property
    def held_in_patient(self) -> np.ndarray:
        """Amounts in the patient's lungs and tissues, L STPD, shape (T, G)."""
        held = self.end_tidal * self.lung_gas_stpd
        held[:, -len(self.soluble_gases):] += np.einsum("tcs,cs->ts", self.tissue,
                                                        self.tissue_capacity_stpd)
        return held

    # ---- names and conversions -----------------------------------------------------------
    @property
    def agent(self) -> str:
        """Name of the volatile agent."""
        return self.vaporizer.agent

    def gas_index(self, gas: str) -> int:
        """Column of ``gas`` in the (T, G) arrays ("agent" means the volatile agent)."""
        name = self.agent if gas == "agent" else _GAS_ALIASES.get(gas, gas)
        try:
            return self.gases.index(name)
        except ValueError:
            raise KeyError(f"unknown gas {gas!r}; known: {', '.join(self.gases)}") from None

    def soluble_index(self, gas: str) -> int:
        """Column of ``gas`` in the (T, S) arrays."""
        name = self.agent if gas == "agent" else _GAS_ALIASES.get(gas, gas)
        try:
            return self.soluble_gases.index(name)
        except ValueError:
            raise KeyError(f"{gas!r} does not dissolve in the model's tissues; soluble gases: "
                           f"{', '.join(self.soluble_gases)}") from None

    def tissue_index(self, tissue: str) -> int:
        """Index of a tissue group ("brain" means the vessel-rich group)."""
        name = "vessel_rich" if tissue == "brain" else tissue
        return self.tissue_names.index(name)

    @property
    def mac_percent(self) -> float:
        """Age-adjusted MAC of the agent for this patient, vol% (Mapleson 1996)."""
        return self.vaporizer.properties.mac_percent(self.patient.age_years)

    @property
    def n2o_mac_percent(self) -> float:
        """Age-adjusted MAC of N2O for this patient, vol% (Mapleson 1996)."""
        return mac_at_age(float(NITROUS_OXIDE.mac40_percent), self.patient.age_years)

    @property
    def dry_pressure_kpa(self) -> float:
        """Pressure of dry gas in the lungs, kPa (ambient minus water vapour at 37 °C)."""
        return float(body_partial_pressure_kpa(1.0, self.circuit.ambient_pressure_kpa))

    # ---- convenient series ----------------------------------------------------------------
    def inspired_percent(self, gas: str) -> np.ndarray:
        """Inspired concentration, vol% (dry gas)."""
        return 100.0 * self.inspired[:, self.gas_index(gas)]

    def end_tidal_percent(self, gas: str) -> np.ndarray:
        """End-tidal (alveolar) concentration, vol% (dry gas)."""
        return 100.0 * self.end_tidal[:, self.gas_index(gas)]

    def tissue_percent(self, tissue: str, gas: str = "agent") -> np.ndarray:
        """Tissue partial pressure as a vol% equivalent."""
        return 100.0 * self.tissue[:, self.tissue_index(tissue), self.soluble_index(gas)]

    def brain_percent(self, gas: str = "agent") -> np.ndarray:
        """Vessel-rich group (brain) partial pressure as a vol% equivalent."""
        return self.tissue_percent("vessel_rich", gas)

    def partial_pressure_kpa(self, fraction: np.ndarray) -> np.ndarray:
        """Partial pressure (kPa) in the lungs or body of a dry-gas fraction series."""
        return np.asarray(fraction) * self.dry_pressure_kpa

    @cached_property
    def segments(self) -> tuple:
        """The plan's segments for this patient and circuit (:meth:`~circlesim.domain.plan.
        Plan.segments`); ``segment_index`` points into them."""
        return self.plan.segments(self.patient.default_tidal_volume_ml,
                                  self.patient.default_rate_per_min, self.circuit.valve)

    def segment_values(self, setting: str) -> np.ndarray:
        """A plan setting (a :class:`~circlesim.domain.plan.Segment` field) at each output time."""
        return np.array([getattr(s, setting) for s in self.segments])[self.segment_index]

    @property
    def valve_closed(self) -> np.ndarray:
        """Whether the pressure-limiting valve is closed at each output time, shape (T,)."""
        return np.array([s.valve == "closed" for s in self.segments])[self.segment_index]

    @property
    def fresh_gas_l_min(self) -> np.ndarray:
        """Fresh gas flow including plenum vapour, L/min at flowmeter conditions."""
        return self.fresh_gas_stpd / self.k_circuit

    @property
    def flowmeter_total_l_min(self) -> np.ndarray:
        """Total of the O2, air and N2O flowmeters (vapour excluded), L/min, as set."""
        return self.segment_values("fgf_l_min")

    @property
    def vented_l_min(self) -> np.ndarray:
        """Gas vented to the scavenging system, L/min at circuit conditions."""
        return self.vented_stpd / self.k_circuit

    @property
    def bag_volume_l(self) -> np.ndarray:
        """Reservoir bag volume, L at circuit conditions."""
        return self.circuit_amount_stpd / self.k_circuit - self.circuit_fixed_l

    @property
    def uptake_ml_min(self) -> np.ndarray:
        """Uptake by the patient per gas, mL/min STPD, shape (T, G)."""
        return 1000.0 * self.uptake_stpd

    def liquid_ml(self, vapour_l_stpd: np.ndarray) -> np.ndarray:
        """Liquid agent (mL) making ``vapour_l_stpd`` litres STPD of agent vapour."""
        a = self.vaporizer.properties
        return vapour_l_stpd_to_liquid_ml(vapour_l_stpd, a.liquid_density_g_ml, a.molar_mass_g_mol)

    def grams(self, vapour_l_stpd: np.ndarray) -> np.ndarray:
        """Mass (g) of ``vapour_l_stpd`` litres STPD of agent vapour."""
        return vapour_l_stpd_to_grams(vapour_l_stpd, self.vaporizer.properties.molar_mass_g_mol)

    @property
    def agent_delivered_ml(self) -> np.ndarray:
        """Cumulative liquid agent delivered (vaporizer and injections), mL."""
        return self.liquid_ml(self.cumulative["delivered"][:, self.gas_index("agent")])

    @property
    def agent_vented_ml(self) -> np.ndarray:
        """Cumulative liquid-equivalent agent vented to the scavenger, mL."""
        ia = self.gas_index("agent")
        lost = (self.cumulative["vented"][:, ia] + self.cumulative["leaked"][:, ia]
                + self.cumulative["sampled"][:, ia])
        return self.liquid_ml(lost)

    @property
    def agent_uptake_ml(self) -> np.ndarray:
        """Cumulative liquid-equivalent agent taken up by the patient, mL."""
        return self.liquid_ml(self.cumulative["uptake"][:, self.gas_index("agent")])

    # ---- sampling ---------------------------------------------------------------------------
    def at(self, time_min: float, values: np.ndarray) -> float:
        """Value of a (T,) series at ``time_min`` by linear interpolation."""
        if not self.time_min[0] <= time_min <= self.time_min[-1]:
            raise ValueError(f"time_min must lie within the plan (0 to "
                             f"{self.time_min[-1]:g} min); got {time_min:g}.")
        return float(np.interp(time_min, self.time_min, values))

    # ---- bookkeeping ------------------------------------------------------------------------
    def gas_balance(self) -> dict[str, np.ndarray]:
        """Every gas's balance at the end of the plan, L STPD per gas (shape (G,)).

        ``residual`` = delivered + entrained − vented − leaked − sampled − absorbed −
        consumed by metabolism − change held in circuit and patient. It is zero to round-off.
        """
        end = {k: v[-1] for k, v in self.cumulative.items()}
        metabolic = np.zeros(len(self.gases))
        metabolic[:2] = end["uptake"][:2]
        held = self.held_in_circuit[-1] + self.held_in_patient[-1] - self.held_at_start
        inflow = end["delivered"] + end["entrained"]
        outflow = end["vented"] + end["leaked"] + end["sampled"] + end["absorbed"] + metabolic
        return {"in": inflow, "out": outflow, "held_change": held,
                "residual": inflow - outflow - held}

    # ---- tables -----------------------------------------------------------------------------
    def frame(self) -> pd.DataFrame:
        """The time series as a pandas table with units in the column names."""
        import pandas as pd

        cols: dict[str, Any] = {"time_min": self.time_min}
        for g, name in enumerate(self.gases):
            cols[f"inspired_{name}_pct"] = 100.0 * self.inspired[:, g]
            cols[f"end_tidal_{name}_pct"] = 100.0 * self.end_tidal[:, g]
        for s, name in enumerate(self.soluble_gases):
            cols[f"arterial_{name}_pct"] = 100.0 * self.arterial[:, s]
            cols[f"mixed_venous_{name}_pct"] = 100.0 * self.mixed_venous[:, s]
            for c, tissue in enumerate(self.tissue_names):
                cols[f"{tissue}_{name}_pct"] = 100.0 * self.tissue[:, c, s]
        cols[f"end_tidal_{self.agent}_mac"] = self.end_tidal[:, self.gas_index("agent")] * (
            100.0 / self.mac_percent)
        cols[f"brain_{self.agent}_kpa"] = self.partial_pressure_kpa(
            self.tissue[:, self.tissue_index("brain"), self.soluble_index("agent")])
        cols["fresh_gas_l_min"] = self.fresh_gas_l_min
        cols["vented_l_min"] = self.vented_l_min
        cols["leak_l_min"] = self.leak_stpd / self.k_circuit
        cols["sample_lost_l_min"] = self.sample_lost_stpd / self.k_circuit
        cols["air_entrained_l_min"] = self.entrained_stpd / self.k_circuit
        for g, name in enumerate(self.gases):
            cols[f"uptake_{name}_ml_min_stpd"] = 1000.0 * self.uptake_stpd[:, g]
        cols["bag_volume_l"] = self.bag_volume_l
        cols["co2_absorbed_l_stpd"] = self.cumulative["absorbed"][:, self.gas_index(
            "carbon_dioxide")]
        cols["absorbent_used_pct"] = 100.0 * self.absorbent_used_fraction
        cols[f"{self.agent}_delivered_ml_liquid"] = self.agent_delivered_ml
        cols[f"{self.agent}_vented_ml_liquid"] = self.agent_vented_ml
        cols[f"{self.agent}_uptake_ml_liquid"] = self.agent_uptake_ml
        if self.control is not None:
            cols[f"target_end_tidal_{self.agent}_pct"] = self.control.target_series(
                self.time_min)
            cols[f"dial_{self.agent}_pct"] = self.control.dial_series(self.time_min)
        return pd.DataFrame(cols)

    def to_csv(self, path, *, overwrite: bool = False):
        """Write :meth:`frame` as CSV, atomically; an existing file is kept unless ``overwrite``."""
        return write_text_atomic(path, self.frame().to_csv(index=False, float_format="%.6g"),
                                 overwrite=overwrite)


_GAS_ALIASES = {"o2": "oxygen", "co2": "carbon_dioxide", "n2": "nitrogen", "n2o": "nitrous_oxide"}
