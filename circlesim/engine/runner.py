"""Fast repeated runs of the model for many settings (engine layer).

The controller and the advisor run the model hundreds of times from intermediate states with
settings that differ only in the dial and the flows. :class:`Runner` builds the model's
parameter row for each distinct set of knob settings once (through
:func:`circlesim.engine.assembly.assemble`, the one place that turns settings into parameters) and
integrates with the compiled solver (:func:`circlesim.engine.solver.integrate`) from any state.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan, Segment, Step
from circlesim.engine import layout
from circlesim.engine.assembly import ModelInputs, assemble
from circlesim.engine.simulate import MAX_STEPS, SimulationError
from circlesim.engine.solver import STATUS_MESSAGES, integrate, integrate_batch

__all__ = ["Knobs", "Runner", "knobs_of"]

#: Largest integration step, min (as :func:`circlesim.engine.simulate.solve_states`).
H_MAX_MIN = 5.0


class Knobs(NamedTuple):
    """Settings in force over a stretch of time (what a person sets on the machine).

    Attributes
    ----------
    o2_l_min, air_l_min, n2o_l_min : float, L/min
        Flowmeter settings.
    dial_percent : float, vol%
    tidal_volume_ml : float, mL BTPS
    rate_per_min : float, breaths/min
    valve : {"open", "closed"}
    """

    o2_l_min: float
    air_l_min: float
    n2o_l_min: float
    dial_percent: float
    tidal_volume_ml: float
    rate_per_min: float
    valve: str

    @property
    def fgf_l_min(self) -> float:
        """Total flowmeter flow, L/min."""
        return self.o2_l_min + self.air_l_min + self.n2o_l_min

    def step(self, time_min: float, **extra) -> Step:
        """A plan step that sets every one of these knobs at ``time_min``."""
        return Step(time_min=time_min, **self._asdict(), **extra)


def knobs_of(segment: Segment) -> Knobs:
    """The knob settings of a resolved plan segment."""
    return Knobs(segment.o2_l_min, segment.air_l_min, segment.n2o_l_min,
                 segment.dial_percent, segment.tidal_volume_ml, segment.rate_per_min,
                 segment.valve)


class Runner:
    """Integrate the model from any state with settings given as :class:`Knobs`.

    Parameters
    ----------
    patient, circuit, absorber, vaporizer
        As for :func:`circlesim.simulate`.
    reference : Plan
        A plan without targets for this patient; it fixes the layout, the tolerances and the
        starting state (``inputs.y0``).
    rtol : float
        Relative tolerance of the integrator.
    """

    def __init__(self, patient: Patient, circuit: Circuit, absorber: Absorber,
                 vaporizer: Vaporizer, reference: Plan, rtol: float = 1e-6) -> None:
        self.patient = patient
        self.circuit = circuit
        self.absorber = absorber
        self.vaporizer = vaporizer
        self.rtol = rtol
        self.inputs: ModelInputs = assemble(patient, circuit, absorber, vaporizer, reference)
        lay = self.inputs.lay
        self.lay = lay
        self.dims = layout.dims(lay)
        n_gas = int(lay[0])
        slices = layout.state_slices(lay)
        #: index in the state of the alveolar (end-tidal) agent fraction
        self.et_index = slices["alveolar"].start + self.inputs.agent_index
        brain = list(self.inputs.tissue_names).index("vessel_rich")
        n_soluble = int(lay[1])
        #: index in the state of the vessel-rich group (brain) agent fraction equivalent
        self.brain_index = (slices["tissue"].start + brain * n_soluble
                            + self.inputs.agent_index - layout.FIRST_SOLUBLE)
        #: index in the state of the cumulative agent delivered, L STPD
        self.delivered_index = slices["delivered"].start + self.inputs.agent_index
        self.o2_alveolar_index = slices["alveolar"].start + layout.O2
        self.n_gas = n_gas
        self._rows: dict[Knobs, np.ndarray] = {}
        self._dial_basis: dict[Knobs, tuple | None] = {}
        self.calls = 0

    @property
    def max_dial(self) -> float:
        """Largest dial setting of the vaporizer, vol%."""
        return self.vaporizer.max_dial

    def _assembled_row(self, knobs: Knobs) -> np.ndarray:
        plan = Plan((knobs.step(0.0),), duration_min=1.0)
        return assemble(self.patient, self.circuit, self.absorber, self.vaporizer,
                        plan).params[0]

    def row(self, knobs: Knobs) -> np.ndarray:
        """The model's parameter row for ``knobs`` (cached).

        The dial enters the parameters through one function of the setting, ``g(d)``: the
        vapour a plenum vaporizer adds per litre of carrier gas, ``d / (1 − d)``, or the
        setting itself for a draw-over vaporizer. For each set of the other knobs, the rows
        at three dial settings come from :func:`circlesim.engine.assembly.assemble`; which ``g``
        joins them is confirmed there (to round-off), and other settings are then
        interpolated exactly. If neither form fits, every row is assembled.
        """
        row = self._rows.get(knobs)
        if row is not None:
            return row
        basis = self._basis_of(knobs)
        if basis is None:
            row = self._assembled_row(knobs)
        else:
            row0, slope, g = basis
            row = row0 + slope * g(knobs.dial_percent / 100.0)
        if len(self._rows) < 200_000:
            self._rows[knobs] = row
        return row

    def dial_effect(self, knobs: Knobs, dial_percent: np.ndarray | float) -> np.ndarray:
        """The dial as it enters the model, in vol%: ``100 g(d / 100)`` with ``g`` the
        function of the setting in which the parameters are linear (see :meth:`row`) —
        ``d / (1 − d)``, the vapour per litre of carrier gas, for a plenum vaporizer, ``d``
        for a draw-over one; ``dial_percent`` itself if neither form fits. (The
        concentrations are not linear in it: the vapour also adds to the gas flows.)

        Parameters
        ----------
        knobs : Knobs
            The other settings in force (their dial is ignored).
        dial_percent : float or ndarray, vol%
        """
        basis = self._basis_of(knobs)
        d = np.asarray(dial_percent, dtype=float)
        return d if basis is None else 100.0 * basis[2](d / 100.0)

    def _basis_of(self, knobs: Knobs) -> tuple | None:
        """:meth:`_basis` for the settings of ``knobs`` other than the dial (cached)."""
        key = knobs._replace(dial_percent=0.0)
        if key not in self._dial_basis:
            self._dial_basis[key] = self._basis(key)
        return self._dial_basis[key]

    def _basis(self, key: Knobs) -> tuple | None:
        top = self.max_dial
        ref, check = 0.5 * top, 0.9 * top
        rows = [self._assembled_row(key._replace(dial_percent=d)) for d in (0.0, ref, check)]
        for g in (lambda d: d / (1.0 - d), lambda d: d):
            slope = (rows[1] - rows[0]) / g(ref / 100.0)
            guess = rows[0] + slope * g(check / 100.0)
            if np.allclose(guess, rows[2], rtol=1e-12, atol=1e-15):
                return rows[0], slope, g
        return None

    def initial_state(self, knobs: Knobs) -> np.ndarray:
        """State at time 0 for a plan whose first settings are ``knobs`` (the circuit filled
        with their fresh gas, the patient breathing air:
        :func:`circlesim.engine.assembly.assemble`)."""
        plan = Plan((knobs.step(0.0),), duration_min=1.0)
        return assemble(self.patient, self.circuit, self.absorber, self.vaporizer, plan).y0

    def run(self, y: np.ndarray, knobs: list[Knobs], times: np.ndarray, t_out: np.ndarray
            ) -> tuple[np.ndarray, np.ndarray]:
        """Integrate from state ``y`` at ``times[0]`` through piecewise-constant settings.

        Parameters
        ----------
        y : ndarray, shape (n_state,)
        knobs : list of Knobs, length n
            Settings of each stretch.
        times : ndarray, shape (n + 1,), min
            Boundaries of the stretches, strictly increasing.
        t_out : ndarray, shape (T,), min
            Output times within ``[times[0], times[-1]]``, non-decreasing.

        Returns
        -------
        states : ndarray, shape (T, n_state)
        final : ndarray, shape (n_state,)
        """
        params = np.stack([self.row(k) for k in knobs])
        jumps = np.zeros((len(knobs), y.size))
        states, final, stats = integrate(y, params, np.asarray(times, dtype=float), jumps,
                                         self.lay, self.dims, np.asarray(t_out, dtype=float),
                                         self.inputs.atol, self.rtol, H_MAX_MIN, MAX_STEPS)
        self.calls += 1
        if stats[3] != 0:
            raise SimulationError(f"the integration failed: {STATUS_MESSAGES[int(stats[3])]}")
        return states, final

    def run_batch(self, y: np.ndarray, members: list[list[Knobs]], times: np.ndarray,
                  t_out: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`run` for several settings schedules over the same stretches, in parallel.

        Parameters
        ----------
        y : ndarray, shape (n_state,)
            Common starting state at ``times[0]``.
        members : list of list of Knobs, shape (B, n)
        times : ndarray, shape (n + 1,), min
        t_out : ndarray, shape (T,), min

        Returns
        -------
        states : ndarray, shape (B, T, n_state)
        final : ndarray, shape (B, n_state)
        """
        params = np.stack([np.stack([self.row(k) for k in member]) for member in members])
        b, n = params.shape[0], params.shape[1]
        seg_times = np.repeat(np.asarray(times, dtype=float)[None, :], b, axis=0)
        y0 = np.repeat(y[None, :], b, axis=0)
        jumps = np.zeros((b, n, y.size))
        states, final, stats = integrate_batch(y0, params, seg_times, jumps, self.lay,
                                               self.dims, np.asarray(t_out, dtype=float),
                                               self.inputs.atol, self.rtol, H_MAX_MIN,
                                               MAX_STEPS)
        self.calls += b
        bad = stats[:, 3] != 0
        if bad.any():
            code = int(stats[np.argmax(bad), 3])
            raise SimulationError(f"the integration failed: {STATUS_MESSAGES[code]}")
        return states, final
