"""The result of a batch run: every member's series with a leading batch axis.

:class:`BatchResult` holds the states and auxiliary outputs of :func:`circlesim.engine.batch.
simulate_batch` and presents them with the names and units of
:class:`circlesim.engine.result.Result`; :meth:`BatchResult.member` gives one member as a
full result.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np

from circlesim.base.units import vapour_l_stpd_to_grams, vapour_l_stpd_to_liquid_ml
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan
from circlesim.engine import layout
from circlesim.engine.alerts import AlertRule
from circlesim.engine.batch_inputs import MemberInputs
from circlesim.engine.result import Result, SolverReport
from circlesim.engine.simulate import build_result
from circlesim.engine.solver import STATUS_MESSAGES
from circlesim.properties import NITROUS_OXIDE, mac_at_age

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["BatchResult"]


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
    inputs : MemberInputs
        The batch's stacked model inputs; ``inputs[b]`` is member ``b``'s
        :class:`~circlesim.engine.assembly.ModelInputs` (unpadded).
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
    inputs: MemberInputs
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
        return self.inputs.lay

    def _member_values(self, values: Iterable[float]) -> np.ndarray:
        return np.fromiter(values, dtype=float, count=len(self))

    @property
    def k_circuit(self) -> np.ndarray:
        """L STPD per litre at flowmeter/circuit conditions, shape (B,)."""
        return self.inputs.k_circuit

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
        return self.aux[:, :, layout.aux_slices(self._lay)[name]]

    def _aux_scalar(self, index: int) -> np.ndarray:
        return self.aux[:, :, layout.aux_slices(self._lay)["scalars"].start + index]

    def _state(self, name: str) -> np.ndarray:
        return self.states[:, :, layout.state_slices(self._lay)[name]]

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
        return self._aux_scalar(layout.AUX_FRESH)

    @property
    def vented_stpd(self) -> np.ndarray:
        """Gas vented by the pressure-limiting valve, L STPD/min, shape (B, T)."""
        return self._aux_scalar(layout.AUX_VENT)

    @property
    def entrained_stpd(self) -> np.ndarray:
        """Room air entrained by an empty circuit, L STPD/min, shape (B, T)."""
        return self._aux_scalar(layout.AUX_ENTRAINED)

    @property
    def absorbed_stpd(self) -> np.ndarray:
        """CO2 taken up by the absorbent, L STPD/min, shape (B, T)."""
        return self._aux_scalar(layout.AUX_ABSORBED)

    @property
    def circuit_amount_stpd(self) -> np.ndarray:
        """Gas in the circuit, L STPD, shape (B, T)."""
        return self._aux_scalar(layout.AUX_CIRCUIT_AMOUNT)

    @property
    def absorbent_used_fraction(self) -> np.ndarray:
        """Fraction of each member's absorbent capacity used, shape (B, T)."""
        capacity = self.inputs.params[:, 0, layout.P_ABSORBENT_CAPACITY]
        return self._state("absorbent")[:, :, 0] / capacity[:, None]

    @cached_property
    def cumulative(self) -> dict[str, np.ndarray]:
        """Amounts since the start, L STPD, each shape (B, T, G) (as ``Result.cumulative``;
        made on first access and kept)."""
        out = {name: self._state(name) for name in layout.ACCUMULATOR_NAMES}
        start = self.inputs.y0[:, layout.state_slices(self._lay)[
            "absorbent"].start]
        absorbed = np.zeros_like(out["delivered"])
        absorbed[:, :, layout.CO2] = self._state("absorbent")[:, :, 0] - start[:, None]
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
