"""The circle system's steady-state mass balance in closed form (pure arithmetic on flows).

Everything here is in litres of dry gas at STPD per minute, the engine's unit (see
:mod:`circlesim.engine.model`). The derivation is in ``docs/oxygen.md``; in short, with the alveoli
and
the circuit in steady state, fresh absorbent (every litre of CO2 that reaches it is taken up)
and the reservoir bag full, the balance of each gas ``g`` other than CO2 over the circuit gives

    FI_g = (Fresh_g + air_g · Entrained − c · U_g) / (Fresh + Entrained − c · Σ U)

where ``c = (1 − φ) · k`` is the share of the patient's exhaled gas that comes back to the
circuit past the pressure-limiting valve and the side-stream sample line, ``φ`` the share of
the exhaled gas that the valve vents before the absorbent and ``k`` the share left after the
expiratory part of the lost sample gas. With the valve venting well-mixed circuit gas
(``vent_exhaled_share = 0``) and no lost sample gas, ``c = 1`` and this is the design brief's
``FIO2 = (FGF · FO2,fresh − VO2) / (FGF − VO2 − other uptake)``.

The forms are exact for the model in steady state: the tests compare them with the engine
within 0.5 % absolute.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from circlesim.engine.assembly import O2_FLOOR
from circlesim.engine.model import AIR_N2, AIR_O2

__all__ = ["CircuitFlows", "SteadyState", "mass_balance", "required_fresh_o2"]


@dataclass(frozen=True)
class CircuitFlows:
    """The flows that set the circuit's mass balance, all L STPD/min (the engine's values).

    Attributes
    ----------
    inspired_l_min : float, L STPD/min
        Inspired minute flow of dry gas, ``I``.
    dead_space_l_min : float, L STPD/min
        Part of it that ventilates the dead space.
    vo2_l_min, vco2_l_min : float, L STPD/min
        Oxygen consumption and CO2 production.
    leak_l_min : float, L STPD/min
        Circuit leak, at circuit composition.
    sample_lost_l_min : float, L STPD/min
        Side-stream sample gas not returned to the circuit (0 if it is returned).
    sample_inspired_fraction : float, 0–1
        Share of the sample gas drawn during inspiration (inspired composition); the rest is
        drawn from exhaled gas.
    vent_exhaled_share : float, 0–1
        ``β``: share of the vented gas taken from exhaled gas before the absorbent.
    k_circuit : float, L STPD per L
        Factor from flowmeter (circuit) conditions to STPD.
    """

    inspired_l_min: float
    dead_space_l_min: float
    vo2_l_min: float
    vco2_l_min: float
    leak_l_min: float
    sample_lost_l_min: float
    sample_inspired_fraction: float
    vent_exhaled_share: float
    k_circuit: float

    @property
    def alveolar_l_min(self) -> float:
        """Alveolar part of the inspired flow, L STPD/min."""
        return self.inspired_l_min - self.dead_space_l_min


@dataclass(frozen=True)
class SteadyState:
    """The circuit's steady state at one or many settings (arrays broadcast together).

    Fractions are dry-gas fractions (0–1); flows are L STPD/min.

    Attributes
    ----------
    inspired_o2, inspired_n2, inspired_n2o, inspired_agent : ndarray
        Inspired fractions.
    end_tidal_o2, end_tidal_n2, end_tidal_n2o : ndarray
        Alveolar (end-tidal) fractions.
    sustainable : ndarray of bool
        False where the fresh gas cannot meet the O2 consumption: the O2 balance would need an
        alveolar O2 fraction below the model's floor of 0.01, where O2 uptake is curtailed
        (``inspired_o2`` and the end-tidal fractions are then reported as 0).
    surplus_l_min : ndarray, L STPD/min
        Fresh gas left over after uptake, leak and lost sample gas; negative means the bag
        empties and room air is drawn in.
    vented_l_min : ndarray, L STPD/min
        Gas vented by the pressure-limiting valve.
    vented_exhaled_share : ndarray, 0–1
        ``φ``: share of the exhaled gas returning to the circuit that is vented before the
        absorbent.
    entrained_l_min : ndarray, L STPD/min
        Room air drawn into an empty circuit.
    co2_to_absorber_l_min : ndarray, L STPD/min
        CO2 reaching (and, with fresh absorbent, taken up by) the absorbent.
    minimum_fresh_l_min : ndarray, L STPD/min
        Fresh gas (with vapour) at which the bag just stays full.
    returned_share : ndarray, 0–1
        ``c = (1 − φ) k``: share of the exhaled gas that returns past the valve and the sample
        line to the absorbent and the circuit.
    """

    inspired_o2: np.ndarray
    inspired_n2: np.ndarray
    inspired_n2o: np.ndarray
    inspired_agent: np.ndarray
    end_tidal_o2: np.ndarray
    end_tidal_n2: np.ndarray
    end_tidal_n2o: np.ndarray
    sustainable: np.ndarray
    surplus_l_min: np.ndarray
    vented_l_min: np.ndarray
    vented_exhaled_share: np.ndarray
    entrained_l_min: np.ndarray
    co2_to_absorber_l_min: np.ndarray
    minimum_fresh_l_min: np.ndarray
    returned_share: np.ndarray


@dataclass(frozen=True)
class _Returns:
    """How much of the exhaled gas comes back, and what the valve and room air do."""

    fresh: np.ndarray
    consumed: np.ndarray
    exhaled: np.ndarray
    k: np.ndarray
    surplus: np.ndarray
    losses: np.ndarray
    vent: np.ndarray
    phi: np.ndarray
    entrained: np.ndarray
    c: np.ndarray

    @property
    def denominator(self) -> np.ndarray:
        """``Fresh + Entrained − c · (VO2 + other uptake)``, L STPD/min."""
        return self.fresh + self.entrained - self.c * self.consumed


def _returns(f: CircuitFlows, fresh, other) -> _Returns:
    """Valve, sample line and room air at a total fresh gas and a net uptake of soluble gas."""
    exhaled = f.inspired_l_min - f.vo2_l_min + f.vco2_l_min - other  # E, with CO2
    exhaled_dry = exhaled - f.vco2_l_min  # X, without CO2
    s_insp = f.sample_lost_l_min * f.sample_inspired_fraction
    s_exp = f.sample_lost_l_min - s_insp
    k = 1.0 - s_exp / exhaled  # share of exhaled gas that passes the sample line
    beta = f.vent_exhaled_share
    losses = f.vo2_l_min + other + f.leak_l_min + s_insp + s_exp * exhaled_dry / exhaled
    surplus = fresh - losses  # N: what the valve must vent (negative: bag empties)
    venting = surplus >= 0.0
    vent = np.where(venting, surplus / (1.0 - beta + beta * exhaled_dry / exhaled), 0.0)
    phi = np.where(k * exhaled > 0.0, beta * vent / (k * exhaled), 0.0)
    all_exhaled = phi >= 1.0  # the valve vents every exhaled litre and some circuit gas
    phi = np.minimum(phi, 1.0)
    vent = np.where(all_exhaled,
                    fresh + k * exhaled - f.inspired_l_min - s_insp - f.leak_l_min, vent)
    entrained = np.where(venting, 0.0, -surplus)
    c = (1.0 - phi) * k
    return _Returns(fresh=fresh, consumed=f.vo2_l_min + other, exhaled=exhaled, k=k,
                    surplus=surplus, losses=losses, vent=vent, phi=phi, entrained=entrained,
                    c=c)


def mass_balance(flows: CircuitFlows, fresh_o2, fresh_n2=0.0, fresh_n2o=0.0, fresh_agent=0.0, *,
                 uptake_n2=0.0, uptake_n2o=0.0, uptake_agent=0.0) -> SteadyState:
    """Steady state of the circuit in closed form.

    Parameters
    ----------
    flows : CircuitFlows
        Patient and circuit flows, L STPD/min.
    fresh_o2, fresh_n2, fresh_n2o, fresh_agent : array_like, L STPD/min
        Fresh gas per gas (vapour from a plenum vaporizer in ``fresh_agent``); broadcast
        together.
    uptake_n2, uptake_n2o, uptake_agent : array_like, L STPD/min
        Net uptake of the soluble gases by the patient's blood. In the true steady state they
        are zero (the default); the instantaneous values from a simulation give the
        quasi-steady state of the circuit at that moment.

    Returns
    -------
    SteadyState
    """
    fo2, fn2, fn2o, fag, un2, un2o, uag = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (fresh_o2, fresh_n2, fresh_n2o, fresh_agent,
                                               uptake_n2, uptake_n2o, uptake_agent)))
    f = flows
    other = un2 + un2o + uag
    r = _returns(f, fo2 + fn2 + fn2o + fag, other)
    denominator = r.denominator
    c, entrained = r.c, r.entrained
    o2_numerator = fo2 + AIR_O2 * entrained - c * f.vo2_l_min
    safe_den = np.where(denominator > 1e-12, denominator, 1.0)
    alv_in = f.alveolar_l_min
    alv_out = alv_in - f.vo2_l_min + f.vco2_l_min - other
    end_tidal_o2 = (alv_in * o2_numerator / safe_den - f.vo2_l_min) / alv_out
    # the patient can take up VO2 only while alveolar O2 stays above the model's floor
    sustainable = (o2_numerator > 0.0) & (denominator > 1e-12) & (end_tidal_o2 >= O2_FLOOR)
    fi_o2 = np.where(sustainable, o2_numerator / safe_den, 0.0)
    fi_n2 = np.where(sustainable, (fn2 + AIR_N2 * entrained - c * un2) / safe_den, 0.0)
    fi_n2o = np.where(sustainable, (fn2o - c * un2o) / safe_den, 0.0)
    fi_ag = np.where(sustainable, (fag - c * uag) / safe_den, 0.0)
    return SteadyState(
        inspired_o2=fi_o2, inspired_n2=fi_n2, inspired_n2o=fi_n2o, inspired_agent=fi_ag,
        end_tidal_o2=np.where(sustainable, end_tidal_o2, 0.0),
        end_tidal_n2=np.where(sustainable, (alv_in * fi_n2 - un2) / alv_out, 0.0),
        end_tidal_n2o=np.where(sustainable, (alv_in * fi_n2o - un2o) / alv_out, 0.0),
        sustainable=sustainable, surplus_l_min=r.surplus, vented_l_min=r.vent,
        vented_exhaled_share=r.phi, entrained_l_min=entrained,
        co2_to_absorber_l_min=c * f.vco2_l_min, minimum_fresh_l_min=r.losses,
        returned_share=c)


def required_fresh_o2(flows: CircuitFlows, fresh_total, inspired_o2, *,
                      other_uptake=0.0) -> np.ndarray:
    """O2 in the fresh gas (L STPD/min) that gives an inspired O2 fraction in steady state.

    The inspired fraction is affine in the fresh O2 flow at a fixed total fresh gas flow
    (the valve, the sample line and room air depend only on the total), so this inverts
    :func:`mass_balance` exactly: ``O2 = FIO2 · D − air_O2 · Entrained + c · VO2``.

    Parameters
    ----------
    flows : CircuitFlows
    fresh_total : array_like, L STPD/min
        Total fresh gas with vapour.
    inspired_o2 : float or array_like, 0–1
        Wanted inspired O2 fraction.
    other_uptake : array_like, L STPD/min
        Net uptake of N2, N2O and agent (0 in the true steady state).

    Returns
    -------
    ndarray, L STPD/min
        May exceed ``fresh_total`` (the fraction cannot be reached at that flow).
    """
    fresh_total, fio2, other = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (fresh_total, inspired_o2, other_uptake)))
    r = _returns(flows, fresh_total, other)
    return fio2 * r.denominator - AIR_O2 * r.entrained + r.c * flows.vo2_l_min
