"""The model's array layout: gas order, named indices, and the sizes and slices of the state,
parameter and output vectors of :mod:`circlesim.engine.model`.

Everything here is plain integers and slices (:func:`offsets` is compiled, so that the model
can inline it); the equations that use them live in :mod:`circlesim.engine.model`.

State vector ``y`` (length :func:`state_size`)
----------------------------------------------
``[0, G)``            circuit amount of each gas, L STPD
``[G, 2G)``           alveolar dry fraction of each gas
``[2G, 2G + C·S)``    tissue dry-fraction-equivalent partial pressure, tissue-major
``2G + C·S``          CO2 held by the absorbent, L STPD
then ``N_ACCUMULATORS`` blocks of ``G``: cumulative amounts (L STPD) delivered, entrained as
room air, vented, leaked, lost in sample gas, and taken up by the patient.

Parameter vector ``p`` (length :func:`parameter_size`)
------------------------------------------------------
``N_SCALARS`` scalars indexed by the ``P_*`` constants, then fresh gas per gas (G), blood/gas
coefficients (S), tissue blood flows (C), tissue capacities (C·S, L STPD per unit fraction)
and intertissue conductances (L·S, L STPD/min per unit fraction). The integer array ``lay``
from :func:`layout` holds the sizes and offsets.

Output vector ``aux`` (length :func:`aux_size`)
-----------------------------------------------
Inspired fractions, uptake, vented gas and fresh gas per gas (G each), arterial and
mixed-venous fractions of the soluble gases (S each), then ``N_AUX_SCALARS`` scalars indexed
by the ``AUX_*`` constants (:func:`aux_slices`).
"""

from __future__ import annotations

import numpy as np
from numba import njit

# ---- gas order -------------------------------------------------------------------------
O2, CO2, N2, N2O = 0, 1, 2, 3
FIRST_AGENT = 4
FIRST_SOLUBLE = 2  # soluble index s = g - FIRST_SOLUBLE

# ---- scalar parameters -----------------------------------------------------------------
P_INSPIRED = 0  # inspired minute flow into the patient, L STPD/min (dry gas)
P_DEAD_SPACE = 1  # part of it that ventilates dead space, L STPD/min
P_VO2 = 2  # oxygen consumption, L STPD/min
P_VCO2 = 3  # CO2 production, L STPD/min
P_CARDIAC_OUTPUT = 4  # L blood/min
P_SHUNT = 5  # fraction of cardiac output bypassing ventilated alveoli
P_K_BODY = 6  # L STPD per litre per unit fraction at 37 °C and ambient pressure
P_LUNG_VOLUME = 7  # alveolar gas volume (FRC), L BTPS
P_LEAK = 8  # circuit leak, L STPD/min
P_SAMPLE_LOST = 9  # side-stream sample flow not returned to the circuit, L STPD/min
P_SAMPLE_INSPIRED = 10  # fraction of sample gas drawn during inspiration
P_DRAW_OVER_SETTING = 11  # draw-over vaporizer setting as a fraction (0 = off)
P_DRAW_OVER_GAS = 12  # gas index of the draw-over vaporizer's agent, -1 = none
P_DRAW_OVER_SATURATION = 13  # saturated vapour fraction in the vaporizer chamber
P_CIRCUIT_MIN = 14  # circuit amount with the reservoir bag empty, L STPD
P_CIRCUIT_MAX = 15  # circuit amount with the reservoir bag full, L STPD
P_RELAXATION = 16  # 1/min, return rate of round-off excursions past the bag limits
P_ABSORBENT_CAPACITY = 17  # L STPD of CO2 the absorbent can hold
P_ABSORBENT_KNEE = 18  # fraction of capacity used when efficiency starts to fall
P_O2_FLOOR = 19  # alveolar O2 fraction below which O2 uptake is curtailed
P_VENT_EXHALED = 20  # share of vented gas taken from exhaled gas before the absorbent
N_SCALARS = 21

# ---- accumulators ----------------------------------------------------------------------
ACC_DELIVERED = 0
ACC_ENTRAINED = 1
ACC_VENTED = 2
ACC_LEAKED = 3
ACC_SAMPLED = 4
ACC_UPTAKE = 5
N_ACCUMULATORS = 6
ACCUMULATOR_NAMES = ("delivered", "entrained", "vented", "leaked", "sampled", "uptake")

# ---- auxiliary outputs: scalars after the per-gas blocks --------------------------------
AUX_VENT = 0  # vented gas, L STPD/min
AUX_ENTRAINED = 1  # room air entrained into an empty circuit, L STPD/min
AUX_ABSORBED = 2  # CO2 taken up by absorbent, L STPD/min
AUX_LEAK = 3  # L STPD/min
AUX_SAMPLE_LOST = 4  # L STPD/min
AUX_FRESH = 5  # fresh gas including plenum vapour, L STPD/min
AUX_DRAW_OVER_VAPOUR = 6  # vapour added by a draw-over vaporizer, L STPD/min
AUX_ABSORBENT_EFFICIENCY = 7  # fraction of CO2 reaching the absorbent that it takes up
AUX_CIRCUIT_AMOUNT = 8  # L STPD of gas in the circuit
AUX_EXHALED_TO_ABSORBER = 9  # exhaled gas passing the absorbent, L STPD/min
N_AUX_SCALARS = 10


# ---- layout ----------------------------------------------------------------------------
@njit(cache=True, inline="always")
def offsets(G: int, S: int, C: int, L: int) -> tuple[int, int, int, int, int, int, int, int]:
    """Offsets and lengths of the parameter, state and output vectors for given sizes.

    Parameters
    ----------
    G, S, C, L : int
        Gases, soluble gases, tissue compartments and intertissue links.

    Returns
    -------
    tuple of int
        Offsets in ``p`` of the fresh gas, blood/gas coefficients, tissue flows, tissue
        capacities and link conductances, then the lengths of ``p``, ``y`` and ``aux``.
        Compiled (and inlined into the model), so that sizes known when compiling give
        constant offsets there.
    """
    off_fresh = N_SCALARS
    off_lambda = off_fresh + G
    off_flow = off_lambda + S
    off_capacity = off_flow + C
    off_links = off_capacity + C * S
    n_params = off_links + L * S
    n_state = 2 * G + C * S + 1 + N_ACCUMULATORS * G
    n_aux = 4 * G + 2 * S + N_AUX_SCALARS
    return (off_fresh, off_lambda, off_flow, off_capacity, off_links, n_params, n_state,
            n_aux)


def layout(n_gases: int, n_tissues: int, links_from, links_to) -> np.ndarray:
    """Integer layout array describing the sizes and offsets of ``y`` and ``p``.

    Parameters
    ----------
    n_gases : int
        G, number of gases (≥ 4: O2, CO2, N2, N2O, then agents).
    n_tissues : int
        C, number of tissue compartments (perfused and unperfused).
    links_from, links_to : sequence of int, shape (L,)
        Tissue indices joined by intertissue diffusion.

    Returns
    -------
    numpy.ndarray of int64
        ``[G, S, C, L, off_fresh, off_lambda, off_flow, off_capacity, off_links,
        n_params, n_state, n_aux, links_from..., links_to...]``.
    """
    links_from = np.asarray(links_from, dtype=np.int64)
    links_to = np.asarray(links_to, dtype=np.int64)
    if n_gases < FIRST_AGENT:
        raise ValueError("the model needs at least O2, CO2, N2 and N2O")
    G = n_gases
    S = G - FIRST_SOLUBLE
    C = n_tissues
    L = links_from.size
    head = [G, S, C, L, *offsets(G, S, C, L)]
    return np.concatenate([np.asarray(head, dtype=np.int64), links_from, links_to])


def dims(lay: np.ndarray) -> tuple[tuple[int, ...], ...]:
    """The sizes G, S, C and L of ``lay`` as the lengths of four tuples, for the compiled code.

    numba types a tuple by its length, so compiled code that reads the sizes as
    ``len(dims[0])`` … is compiled once per layout with the sizes as constants.
    """
    G, S, C, L = (int(v) for v in lay[:4])
    return ((0,) * G, (0,) * S, (0,) * C, (0,) * L)


def state_size(lay: np.ndarray) -> int:
    """Length of the state vector."""
    return int(lay[10])


def parameter_size(lay: np.ndarray) -> int:
    """Length of the parameter vector."""
    return int(lay[9])


def aux_size(lay: np.ndarray) -> int:
    """Length of the auxiliary-output vector."""
    return int(lay[11])


def state_slices(lay: np.ndarray) -> dict[str, slice]:
    """Named slices into the state vector."""
    G, S, C = lay[:3].tolist()
    tissue = 2 * G
    absorbent = tissue + C * S
    acc = absorbent + 1
    out = {
        "circuit": slice(0, G),
        "alveolar": slice(G, 2 * G),
        "tissue": slice(tissue, absorbent),
        "absorbent": slice(absorbent, absorbent + 1),
    }
    for k, name in enumerate(ACCUMULATOR_NAMES):
        out[name] = slice(acc + k * G, acc + (k + 1) * G)
    return out


def aux_slices(lay: np.ndarray) -> dict[str, slice]:
    """Named slices into the auxiliary-output vector."""
    G, S = lay[:2].tolist()
    return {
        "inspired": slice(0, G),
        "uptake": slice(G, 2 * G),
        "vented": slice(2 * G, 3 * G),
        "fresh": slice(3 * G, 4 * G),
        "arterial": slice(4 * G, 4 * G + S),
        "mixed_venous": slice(4 * G + S, 4 * G + 2 * S),
        "scalars": slice(4 * G + 2 * S, 4 * G + 2 * S + N_AUX_SCALARS),
    }


def parameter_slices(lay: np.ndarray) -> dict[str, slice]:
    """Named slices into the parameter vector."""
    G, S, C, L, off_fresh, off_lambda, off_flow, off_capacity, off_links = lay[:9].tolist()
    return {
        "fresh": slice(off_fresh, off_fresh + G),
        "blood_gas": slice(off_lambda, off_lambda + S),
        "tissue_flow": slice(off_flow, off_flow + C),
        "tissue_capacity": slice(off_capacity, off_capacity + C * S),
        "link_conductance": slice(off_links, off_links + L * S),
    }
