"""The equations: right-hand side and outputs of the circle-system and patient model.

This is the one place that defines the model. Everything here works on plain arrays: no
I/O, no plotting, no domain objects. The functions are compiled with numba so that the same
code serves scipy's ``solve_ivp`` (through :func:`derivatives`) and the compiled integrator in
:mod:`circlesim.engine.solver`.

Conventions (see ``docs/model.md`` for the derivation)
------------------------------------------------------
* Amounts of gas are litres of dry gas at STPD (moles × 22.414); flows are L STPD/min.
* Gas composition is a dry-gas fraction ``F``; in the body the partial pressure is
  ``F × (P_ambient − P_H2O,37)``. An amount dissolved in a volume ``V`` (L) with Ostwald
  coefficient ``λ`` (tissue/gas) is ``k_body × V × λ × F`` with ``k_body`` from
  :func:`circlesim.base.units.btps_to_stpd`.
* Gases are ordered O2, CO2, N2, N2O, then the volatile agents. The *soluble* gases are all
  but O2 and CO2 (index ``s = g − 2``); they dissolve in blood and tissues. O2 is consumed at
  a fixed rate and CO2 produced at a fixed rate; their body stores are taken as constant.

The array layout (gas order, the ``P_*``, ``ACC_*`` and ``AUX_*`` indices, the sizes and
named slices of ``y``, ``p`` and the outputs) is :mod:`circlesim.engine.layout`.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from circlesim.base.compiled_cache import discard_stale_cache
from circlesim.engine import layout
from circlesim.engine.layout import (
    ACC_DELIVERED,
    ACC_ENTRAINED,
    ACC_LEAKED,
    ACC_SAMPLED,
    ACC_UPTAKE,
    ACC_VENTED,
    AUX_ABSORBED,
    AUX_ABSORBENT_EFFICIENCY,
    AUX_CIRCUIT_AMOUNT,
    AUX_DRAW_OVER_VAPOUR,
    AUX_ENTRAINED,
    AUX_EXHALED_TO_ABSORBER,
    AUX_FRESH,
    AUX_LEAK,
    AUX_SAMPLE_LOST,
    AUX_VENT,
    CO2,
    FIRST_SOLUBLE,
    N2,
    O2,
    P_ABSORBENT_CAPACITY,
    P_ABSORBENT_KNEE,
    P_CARDIAC_OUTPUT,
    P_CIRCUIT_MAX,
    P_CIRCUIT_MIN,
    P_DEAD_SPACE,
    P_DRAW_OVER_GAS,
    P_DRAW_OVER_SATURATION,
    P_DRAW_OVER_SETTING,
    P_INSPIRED,
    P_K_BODY,
    P_LEAK,
    P_LUNG_VOLUME,
    P_O2_FLOOR,
    P_RELAXATION,
    P_SAMPLE_INSPIRED,
    P_SAMPLE_LOST,
    P_SHUNT,
    P_VCO2,
    P_VENT_EXHALED,
    P_VO2,
    aux_size,
)

# the compiled functions below take the layout's constants from layout.py
discard_stale_cache(__file__, [layout.__file__])

#: Room air as dry fractions, argon counted with nitrogen. Source: US Standard Atmosphere
#: 1976 dry-air composition (O2 20.946 %, N2 78.084 %, Ar 0.934 %; CO2 neglected).
AIR_O2 = 0.20946
AIR_N2 = 1.0 - AIR_O2

#: Width of the smooth switch at the bag's limits, as a fraction of the full circuit amount.
#: The switch is flat (zero slope) at the limit itself, so it adds no stiffness once the bag is
#: full or empty, and it keeps the right-hand side continuous for implicit integrators.
_WALL_BAND = 1e-3


@njit(cache=True, error_model="numpy")
def work_size(lay: np.ndarray) -> int:
    """Length of the scratch array :func:`evaluate` needs."""
    return 6 * lay[0] + 2 * lay[1]


@njit(cache=True, error_model="numpy")
def check_dims(lay: np.ndarray, dims: tuple) -> None:
    """Raise ValueError unless ``dims`` holds the sizes of ``lay`` (:func:`layout.dims`)."""
    if (len(dims[0]) != lay[0] or len(dims[1]) != lay[1] or len(dims[2]) != lay[2]
            or len(dims[3]) != lay[3]):
        raise ValueError("dims must be layout.dims(lay) of the same layout")


# ---- the right-hand side ---------------------------------------------------------------
@njit(cache=True, error_model="numpy")
def smoothstep(x: float) -> float:
    """0 for x ≤ 0, 1 for x ≥ 1, and 3x² − 2x³ between (continuous slope)."""
    if x <= 0.0:
        return 0.0
    if x >= 1.0:
        return 1.0
    return x * x * (3.0 - 2.0 * x)


@njit(cache=True, error_model="numpy")
def absorbent_efficiency(used_fraction: float, knee: float) -> float:
    """Fraction of the CO2 reaching the absorbent that it takes up.

    1 until ``knee`` of the capacity is used, then falls smoothly (cubic) to 0 at full use.
    """
    if used_fraction <= knee:
        return 1.0
    if used_fraction >= 1.0:
        return 0.0
    return 1.0 - smoothstep((used_fraction - knee) / (1.0 - knee))


@njit(cache=True, error_model="numpy")
def evaluate(y, p, lay, dims, dy, aux, work):
    """Time derivative ``dy`` of the state ``y`` and the auxiliary outputs ``aux``.

    Parameters
    ----------
    y : ndarray, shape (n_state,)
        State (see module docstring).
    p : ndarray, shape (n_params,)
        Parameters of the current plan segment.
    lay : ndarray of int64
        Layout from :func:`circlesim.engine.layout.layout`.
    dims : tuple of tuples
        The same layout's sizes, :func:`circlesim.engine.layout.dims` (compile-time constants).
    dy : ndarray, shape (n_state,)
        Output: derivatives, per minute.
    aux : ndarray, shape (n_aux,)
        Output: inspired fractions, uptake, vented and fresh gas per gas (L STPD/min),
        arterial and mixed-venous fractions of soluble gases, then scalar flows.
    work : ndarray, shape (>= work_size(lay),)
        Scratch space (so that no call allocates memory).
    """
    _model(y, p, lay, dims, dy, aux, work, True)


@njit(cache=True, error_model="numpy")
def outputs(y, p, lay, dims, aux, work):
    """The auxiliary outputs ``aux`` of the state ``y`` without its time derivative.

    The same equations as :func:`evaluate` (the compiler drops the parts that only feed the
    derivatives: tissue exchange, alveolar balance, the accumulators), about 40 % less work
    per call. Parameters as for :func:`evaluate`.
    """
    _model(y, p, lay, dims, aux, aux, work, False)  # ``dy`` is not touched without derivatives


@njit(error_model="numpy", inline="always")
def _model(y, p, lay, dims, dy, aux, work, with_derivatives):
    """The model's equations: :func:`evaluate` (``with_derivatives`` True) and
    :func:`outputs` (False). Inlined into both, so the flag is a compile-time constant."""
    G = len(dims[0])
    S = len(dims[1])
    C = len(dims[2])
    L = len(dims[3])
    off_fresh, off_lambda, off_flow, off_capacity, off_links = layout.offsets(G, S, C, L)[:5]
    links = 12
    y_alv = G
    y_tis = 2 * G
    y_abs = y_tis + C * S
    y_acc = y_abs + 1
    a_scal = 4 * G + 2 * S

    k_body = p[P_K_BODY]
    inspired = p[P_INSPIRED]
    dead = p[P_DEAD_SPACE]
    q_total = p[P_CARDIAC_OUTPUT]
    shunt = p[P_SHUNT]

    # circuit composition
    n_circuit = 0.0
    for g in range(G):
        n_circuit += y[g]
    fc = work[0:G]
    per_circuit = 1.0 / n_circuit
    for g in range(G):
        fc[g] = y[g] * per_circuit

    # inspiratory limb: circuit gas, plus vapour from a draw-over vaporizer
    sample = p[P_SAMPLE_LOST]
    f_ins = p[P_SAMPLE_INSPIRED]
    limb = inspired + sample * f_ins
    pick = 0.0
    draw_gas = int(p[P_DRAW_OVER_GAS])
    if draw_gas >= 0 and p[P_DRAW_OVER_SETTING] > 0.0:
        room = 1.0 - fc[draw_gas] / p[P_DRAW_OVER_SATURATION]
        if room > 0.0:
            pick = p[P_DRAW_OVER_SETTING] * room
    draw = limb * (1.0 - pick)
    vapour_in = limb * pick
    fi = work[G:2 * G]
    for g in range(G):
        fi[g] = (1.0 - pick) * fc[g]
    if draw_gas >= 0:
        fi[draw_gas] += pick

    # uptake by the patient
    fa_alv = y[y_alv:y_alv + G]
    uptake = work[2 * G:3 * G]
    floor = p[P_O2_FLOOR]
    if fa_alv[O2] >= floor:
        uptake[O2] = p[P_VO2]
    elif fa_alv[O2] > 0.0:
        uptake[O2] = p[P_VO2] * fa_alv[O2] / floor
    else:
        uptake[O2] = 0.0
    uptake[CO2] = -p[P_VCO2]
    f_venous = work[3 * G:3 * G + S]
    f_venous[:] = 0.0
    for c in range(C):
        q = p[off_flow + c]
        if q > 0.0:
            base = y_tis + c * S
            for s in range(S):
                f_venous[s] += q * y[base + s]
    f_arterial = work[3 * G + S:3 * G + 2 * S]
    per_output = 1.0 / q_total
    for s in range(S):
        f_venous[s] *= per_output
        g = s + FIRST_SOLUBLE
        lam = p[off_lambda + s]
        uptake[g] = q_total * (1.0 - shunt) * lam * k_body * (fa_alv[g] - f_venous[s])
        f_arterial[s] = (1.0 - shunt) * fa_alv[g] + shunt * f_venous[s]
    total_uptake = 0.0
    for g in range(G):
        total_uptake += uptake[g]

    # alveoli at constant volume: outflow = inflow − net uptake
    alv_in = inspired - dead
    alv_out = alv_in - total_uptake
    if with_derivatives:
        per_alv_amount = 1.0 / (k_body * p[P_LUNG_VOLUME])
        for g in range(G):
            dy[y_alv + g] = (alv_in * fi[g] - alv_out * fa_alv[g] - uptake[g]) * per_alv_amount

        # tissues: flow-limited exchange with arterial blood, plus intertissue diffusion
        for c in range(C):
            q = p[off_flow + c]
            base = y_tis + c * S
            for s in range(S):
                exchange = q * p[off_lambda + s] * k_body * (f_arterial[s] - y[base + s])
                dy[base + s] = exchange
        for link in range(L):
            c_from = lay[links + link]
            c_to = lay[links + L + link]
            for s in range(S):
                flux = p[off_links + link * S + s] * (y[y_tis + c_from * S + s]
                                                      - y[y_tis + c_to * S + s])
                dy[y_tis + c_from * S + s] -= flux
                dy[y_tis + c_to * S + s] += flux
        for c in range(C):
            for s in range(S):
                dy[y_tis + c * S + s] /= p[off_capacity + c * S + s]

    # exhaled gas: dead-space gas at inspired composition, then alveolar gas
    exhaled = work[3 * G + 2 * S:4 * G + 2 * S]
    exhaled_total = 0.0
    for g in range(G):
        exhaled[g] = dead * fi[g] + alv_out * fa_alv[g]
        exhaled_total += exhaled[g]
    # side-stream sample gas drawn at the Y-piece and not returned
    to_limb = work[5 * G + 2 * S:6 * G + 2 * S]
    limb_total = 0.0
    exhaled_share = work[4 * G + 2 * S:5 * G + 2 * S]  # mixed-expired composition
    exhaled_share[:] = 0.0
    if exhaled_total > 0.0:
        for g in range(G):
            exhaled_share[g] = exhaled[g] / exhaled_total
    for g in range(G):
        to_limb[g] = exhaled[g] - sample * (1.0 - f_ins) * exhaled_share[g]
        limb_total += to_limb[g]

    # fresh gas, leak, absorbent
    fresh_total = 0.0
    for g in range(G):
        fresh_total += p[off_fresh + g]
    leak = p[P_LEAK]
    capacity = p[P_ABSORBENT_CAPACITY]
    eta = absorbent_efficiency(y[y_abs] / capacity, p[P_ABSORBENT_KNEE])
    co2_back = to_limb[CO2]
    balance = fresh_total + limb_total - draw - leak
    net_without_vent = balance - eta * co2_back

    # pressure-limiting valve: vents only when the reservoir bag is full; a share ``beta`` of
    # the vented gas is exhaled gas taken before the absorbent, the rest mixed circuit gas.
    # An empty bag entrains room air.
    n_max = p[P_CIRCUIT_MAX]
    n_min = p[P_CIRCUIT_MIN]
    beta = p[P_VENT_EXHALED]
    band = _WALL_BAND * n_max
    vent = 0.0
    if net_without_vent > 0.0:
        # the vent that would keep the circuit amount constant ...
        vent = net_without_vent
        if limb_total > 0.0:
            vent = net_without_vent / (1.0 - eta * beta * co2_back / limb_total)
        if beta * vent > limb_total or limb_total <= 0.0:
            vent = balance  # all exhaled gas vented; nothing reaches the absorbent
        # ... opens smoothly over the last ``band`` litres before the bag is full
        vent *= smoothstep((n_circuit - n_max) / band + 1.0)
    vented_exhaled = 0.0
    if limb_total > 0.0:
        vented_exhaled = min(beta * vent, limb_total) / limb_total
    vent_circuit = vent - vented_exhaled * limb_total
    absorbed = eta * (1.0 - vented_exhaled) * co2_back
    entrained = 0.0
    if net_without_vent < 0.0:
        entrained = -net_without_vent * smoothstep((n_min - n_circuit) / band + 1.0)
    if n_circuit > n_max:
        vent_circuit += p[P_RELAXATION] * (n_circuit - n_max)
    if n_circuit < n_min:
        entrained += p[P_RELAXATION] * (n_min - n_circuit)

    vent_total = 0.0
    for g in range(G):
        vented_g = vented_exhaled * to_limb[g] + vent_circuit * fc[g]
        vent_total += vented_g
        aux[g] = fi[g]
        aux[G + g] = uptake[g]
        aux[2 * G + g] = vented_g
        aux[3 * G + g] = p[off_fresh + g]
        if not with_derivatives:
            continue
        air = 0.0
        if g == O2:
            air = AIR_O2
        elif g == N2:
            air = AIR_N2
        dy[g] = (p[off_fresh + g] + (1.0 - vented_exhaled) * to_limb[g] - draw * fc[g]
                 - leak * fc[g] - vent_circuit * fc[g] + entrained * air)
        delivered = p[off_fresh + g]
        if g == draw_gas:
            delivered += vapour_in
        dy[y_acc + ACC_DELIVERED * G + g] = delivered
        dy[y_acc + ACC_ENTRAINED * G + g] = entrained * air
        dy[y_acc + ACC_VENTED * G + g] = vented_g
        dy[y_acc + ACC_LEAKED * G + g] = leak * fc[g]
        dy[y_acc + ACC_SAMPLED * G + g] = (sample * f_ins * fi[g]
                                           + sample * (1.0 - f_ins) * exhaled_share[g])
        dy[y_acc + ACC_UPTAKE * G + g] = uptake[g]
    if with_derivatives:
        dy[CO2] -= absorbed
        dy[y_abs] = absorbed
    for s in range(S):
        aux[4 * G + s] = f_arterial[s]
        aux[4 * G + S + s] = f_venous[s]
    aux[a_scal + AUX_VENT] = vent_total
    aux[a_scal + AUX_ENTRAINED] = entrained
    aux[a_scal + AUX_ABSORBED] = absorbed
    aux[a_scal + AUX_LEAK] = leak
    aux[a_scal + AUX_SAMPLE_LOST] = sample
    aux[a_scal + AUX_FRESH] = fresh_total
    aux[a_scal + AUX_DRAW_OVER_VAPOUR] = vapour_in
    aux[a_scal + AUX_ABSORBENT_EFFICIENCY] = eta
    aux[a_scal + AUX_CIRCUIT_AMOUNT] = n_circuit
    aux[a_scal + AUX_EXHALED_TO_ABSORBER] = (1.0 - vented_exhaled) * limb_total


@njit(cache=True, error_model="numpy")
def auxiliary_series(states, params, seg_index, lay, dims):
    """Auxiliary outputs at many saved states.

    Parameters
    ----------
    states : ndarray, shape (n_times, n_state)
    params : ndarray, shape (n_segments, n_params)
    seg_index : ndarray of int64, shape (n_times,)
        Which segment's parameters apply at each saved time.
    lay : ndarray of int64
    dims : tuple of tuples
        ``layout.dims(lay)``.

    Returns
    -------
    ndarray, shape (n_times, n_aux)
    """
    check_dims(lay, dims)
    n_t = states.shape[0]
    out = np.empty((n_t, lay[11]))
    work = np.empty(work_size(lay))
    for i in range(n_t):
        outputs(states[i], params[seg_index[i]], lay, dims, out[i], work)
    return out


def derivatives(t: float, y: np.ndarray, p: np.ndarray, lay: np.ndarray) -> np.ndarray:
    """Right-hand side in the form ``scipy.integrate.solve_ivp`` expects.

    Parameters
    ----------
    t : float
        Time, min (the model is autonomous within a plan segment; ``t`` is unused).
    y : ndarray, shape (n_state,)
    p : ndarray, shape (n_params,)
    lay : ndarray of int64

    Returns
    -------
    ndarray, shape (n_state,)
        dy/dt, per minute.
    """
    dy = np.empty_like(y)
    evaluate(y, p, lay, layout.dims(lay), dy, np.empty(aux_size(lay)), np.empty(work_size(lay)))
    return dy
