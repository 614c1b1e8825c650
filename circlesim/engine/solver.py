"""Compiled adaptive integrator for the model: Dormand–Prince 5(4) with dense output.

A plan is a series of segments with constant settings. :func:`integrate` restarts the
integration at every segment boundary (applying any jump in the state there, e.g. injected
liquid agent) and fills the requested output times from the method's fourth-order continuous
extension. :func:`integrate_batch` does the same for many patients or plans at once, in
parallel over the leading batch axis.

The coefficients are those of Dormand & Prince, J Comput Appl Math 1980;6:19–26, with the
dense output and PI step-size control of Hairer, Nørsett & Wanner, *Solving Ordinary
Differential Equations I*, 2nd ed., Springer 1993, §II.5–6 (their code DOPRI5). The method is
checked against closed-form solutions in ``tests/test_solver.py``.

Every Runge–Kutta method conserves linear invariants, so the gas-balance bookkeeping held in
the state closes to round-off whatever the step size.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from circlesim.base.compiled_cache import discard_stale_cache
from circlesim.engine import layout, model
from circlesim.engine.model import check_dims, evaluate, work_size

discard_stale_cache(__file__, [model.__file__, layout.__file__])

__all__ = ["STATUS_MESSAGES", "integrate", "integrate_batch", "integrate_batch_serial"]

STATUS_OK = 0
STATUS_TOO_MANY_STEPS = 1
STATUS_STEP_TOO_SMALL = 2
STATUS_NOT_FINITE = 3
STATUS_MESSAGES = {
    STATUS_OK: "The integration finished.",
    STATUS_TOO_MANY_STEPS: "The integrator needed more steps than allowed (max_steps).",
    STATUS_STEP_TOO_SMALL: "The integrator's step became too small to make progress.",
    STATUS_NOT_FINITE: "The state became non-finite (NaN or infinite).",
}

# Dormand–Prince 5(4) tableau
C2, C3, C4, C5 = 1.0 / 5.0, 3.0 / 10.0, 4.0 / 5.0, 8.0 / 9.0
A21 = 1.0 / 5.0
A31, A32 = 3.0 / 40.0, 9.0 / 40.0
A41, A42, A43 = 44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0
A51, A52, A53, A54 = 19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0
A61, A62, A63, A64, A65 = (9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0, 49.0 / 176.0,
                           -5103.0 / 18656.0)
A71, A73, A74, A75, A76 = (35.0 / 384.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0,
                           11.0 / 84.0)
E1, E3, E4, E5, E6, E7 = (71.0 / 57600.0, -71.0 / 16695.0, 71.0 / 1920.0, -17253.0 / 339200.0,
                          22.0 / 525.0, -1.0 / 40.0)
D1, D3, D4, D5, D6, D7 = (-12715105075.0 / 11282082432.0, 87487479700.0 / 32700410799.0,
                          -10690763975.0 / 1880347072.0, 701980252875.0 / 199316789632.0,
                          -1453857185.0 / 822651844.0, 69997945.0 / 29380423.0)
SAFETY = 0.9
BETA = 0.04
EXPO = 0.2 - BETA * 0.75
FAC_MIN = 0.2
FAC_MAX = 10.0


@njit(cache=True, error_model="numpy")
def _error_norm(err, y0, y1, atol, rtol):
    total = 0.0
    n = err.size
    for i in range(n):
        scale = atol[i] + rtol * max(abs(y0[i]), abs(y1[i]))
        total += (err[i] / scale) ** 2
    return np.sqrt(total / n)


@njit(cache=True, error_model="numpy")
def _initial_step(y, f0, p, lay, dims, atol, rtol, h_max, aux, work, f1, scratch):
    n = y.size
    d0 = 0.0
    d1 = 0.0
    for i in range(n):
        scale = atol[i] + rtol * abs(y[i])
        d0 += (y[i] / scale) ** 2
        d1 += (f0[i] / scale) ** 2
    d0 = np.sqrt(d0 / n)
    d1 = np.sqrt(d1 / n)
    h0 = 1e-6 if (d0 < 1e-5 or d1 < 1e-5) else 0.01 * d0 / d1
    h0 = min(h0, h_max)
    for i in range(n):
        work[i] = y[i] + h0 * f0[i]
    evaluate(work, p, lay, dims, f1, aux, scratch)
    d2 = 0.0
    for i in range(n):
        scale = atol[i] + rtol * abs(y[i])
        d2 += ((f1[i] - f0[i]) / scale) ** 2
    d2 = np.sqrt(d2 / n) / h0
    if max(d1, d2) <= 1e-15:
        h1 = max(1e-6, h0 * 1e-3)
    else:
        h1 = (0.01 / max(d1, d2)) ** 0.2
    return min(100.0 * h0, h1, h_max)


@njit(cache=True, error_model="numpy")
def integrate(y0, params, seg_times, jumps, lay, dims, t_out, atol, rtol, h_max, max_steps):
    """Integrate a piecewise-constant plan and return the state at the output times.

    Parameters
    ----------
    y0 : ndarray, shape (n_state,)
        State at ``seg_times[0]``.
    params : ndarray, shape (n_segments, n_params)
        Model parameters of each segment.
    seg_times : ndarray, shape (n_segments + 1,)
        Segment boundaries, min, strictly increasing.
    jumps : ndarray, shape (n_segments, n_state)
        Added to the state at the start of each segment (e.g. injected vapour).
    lay : ndarray of int64
        Model layout (:func:`circlesim.engine.layout.layout`).
    dims : tuple of tuples
        Its sizes, :func:`circlesim.engine.layout.dims`: the code is compiled once per layout
        with the sizes as constants.
    t_out : ndarray, shape (n_out,)
        Output times, min, non-decreasing, within ``[seg_times[0], seg_times[-1]]``.
    atol : ndarray, shape (n_state,)
        Absolute tolerances, in the unit of each state.
    rtol : float
        Relative tolerance.
    h_max : float
        Largest step, min.
    max_steps : int
        Largest number of steps (accepted and rejected) over the whole plan.

    Returns
    -------
    states : ndarray, shape (n_out, n_state)
    final : ndarray, shape (n_state,)
        State at ``seg_times[-1]``.
    stats : ndarray of int64, shape (4,)
        Right-hand-side evaluations, accepted steps, rejected steps, status code
        (see :data:`STATUS_MESSAGES`).
    """
    check_dims(lay, dims)
    n = y0.size
    n_seg = params.shape[0]
    n_out = t_out.size
    states = np.zeros((n_out, n))
    stats = np.zeros(4, dtype=np.int64)
    k = np.empty((7, n))
    y = y0.copy()
    y_new = np.empty(n)
    work = np.empty(n)
    err = np.empty(n)
    aux = np.empty(lay[11])
    scratch = np.empty(work_size(lay))
    i_out = 0
    steps = 0
    for seg in range(n_seg):
        p = params[seg]
        t = seg_times[seg]
        t_end = seg_times[seg + 1]
        last_segment = seg == n_seg - 1
        for i in range(n):
            y[i] += jumps[seg, i]
        while i_out < n_out and t_out[i_out] <= t:
            states[i_out, :] = y
            i_out += 1
        evaluate(y, p, lay, dims, k[0], aux, scratch)
        stats[0] += 1
        h = _initial_step(y, k[0], p, lay, dims, atol, rtol, h_max, aux, work, k[1], scratch)
        stats[0] += 1
        fac_old = 1e-4
        rejected = False
        while t < t_end:
            if steps >= max_steps:
                stats[3] = 1
                return states, y, stats
            steps += 1
            if h < 1e-12 * max(1.0, abs(t)):
                stats[3] = 2
                return states, y, stats
            h_step = min(h, t_end - t)
            if t + 1.01 * h_step >= t_end:
                h_step = t_end - t
            for i in range(n):
                work[i] = y[i] + h_step * A21 * k[0, i]
            evaluate(work, p, lay, dims, k[1], aux, scratch)
            for i in range(n):
                work[i] = y[i] + h_step * (A31 * k[0, i] + A32 * k[1, i])
            evaluate(work, p, lay, dims, k[2], aux, scratch)
            for i in range(n):
                work[i] = y[i] + h_step * (A41 * k[0, i] + A42 * k[1, i] + A43 * k[2, i])
            evaluate(work, p, lay, dims, k[3], aux, scratch)
            for i in range(n):
                work[i] = y[i] + h_step * (A51 * k[0, i] + A52 * k[1, i] + A53 * k[2, i]
                                           + A54 * k[3, i])
            evaluate(work, p, lay, dims, k[4], aux, scratch)
            for i in range(n):
                work[i] = y[i] + h_step * (A61 * k[0, i] + A62 * k[1, i] + A63 * k[2, i]
                                           + A64 * k[3, i] + A65 * k[4, i])
            evaluate(work, p, lay, dims, k[5], aux, scratch)
            for i in range(n):
                y_new[i] = y[i] + h_step * (A71 * k[0, i] + A73 * k[2, i] + A74 * k[3, i]
                                            + A75 * k[4, i] + A76 * k[5, i])
            evaluate(y_new, p, lay, dims, k[6], aux, scratch)
            stats[0] += 6
            for i in range(n):
                err[i] = h_step * (E1 * k[0, i] + E3 * k[2, i] + E4 * k[3, i] + E5 * k[4, i]
                                   + E6 * k[5, i] + E7 * k[6, i])
            error = _error_norm(err, y, y_new, atol, rtol)
            if not np.isfinite(error):
                error = 1e10
            fac11 = error ** EXPO
            if error <= 1.0:
                finite = True
                for i in range(n):
                    if not np.isfinite(y_new[i]):
                        finite = False
                if not finite:
                    stats[3] = 3
                    return states, y, stats
                fac = fac11 / fac_old ** BETA
                fac = max(1.0 / FAC_MAX, min(1.0 / FAC_MIN, fac / SAFETY))
                h_next = h_step / fac
                if rejected:
                    h_next = min(h_next, h_step)
                fac_old = max(error, 1e-4)
                rejected = False
                t_new = t + h_step
                if t_new >= t_end:
                    t_new = t_end
                # dense output for the output times inside (t, t_new]
                while i_out < n_out and (t_out[i_out] < t_new
                                         or (last_segment and t_out[i_out] <= t_new)):
                    theta = (t_out[i_out] - t) / h_step
                    theta1 = 1.0 - theta
                    for i in range(n):
                        r2 = y_new[i] - y[i]
                        r3 = h_step * k[0, i] - r2
                        r4 = r2 - h_step * k[6, i] - r3
                        r5 = h_step * (D1 * k[0, i] + D3 * k[2, i] + D4 * k[3, i]
                                       + D5 * k[4, i] + D6 * k[5, i] + D7 * k[6, i])
                        states[i_out, i] = y[i] + theta * (r2 + theta1 * (
                            r3 + theta * (r4 + theta1 * r5)))
                    i_out += 1
                for i in range(n):
                    y[i] = y_new[i]
                    k[0, i] = k[6, i]
                t = t_new
                h = min(h_next, h_max)
                stats[1] += 1
            else:
                h = h_step / min(1.0 / FAC_MIN, fac11 / SAFETY)
                rejected = True
                stats[2] += 1
    while i_out < n_out:
        states[i_out, :] = y
        i_out += 1
    return states, y, stats


@njit(cache=True, parallel=True, error_model="numpy", nogil=True)
def integrate_batch(y0, params, seg_times, jumps, lay, dims, t_out, atol, rtol, h_max, max_steps):
    """:func:`integrate` for many members at once, in parallel over the leading axis.

    Parameters
    ----------
    y0 : ndarray, shape (batch, n_state)
    params : ndarray, shape (batch, n_segments, n_params)
    seg_times : ndarray, shape (batch, n_segments + 1)
    jumps : ndarray, shape (batch, n_segments, n_state)
    lay, dims, t_out, atol, rtol, h_max, max_steps
        As for :func:`integrate` (shared by every member).

    Returns
    -------
    states : ndarray, shape (batch, n_out, n_state)
    final : ndarray, shape (batch, n_state)
    stats : ndarray of int64, shape (batch, 4)
    """
    batch = y0.shape[0]
    n = y0.shape[1]
    states = np.empty((batch, t_out.size, n))
    final = np.empty((batch, n))
    stats = np.empty((batch, 4), dtype=np.int64)
    gases, soluble, tissues, links = dims  # numba's parallel loop cannot take nested tuples
    for b in prange(batch):
        s, f, st = integrate(y0[b], params[b], seg_times[b], jumps[b], lay,
                             (gases, soluble, tissues, links), t_out, atol, rtol, h_max,
                             max_steps)
        states[b] = s
        final[b] = f
        stats[b] = st
    return states, final, stats


@njit(cache=True, error_model="numpy", nogil=True)
def integrate_batch_serial(y0, params, seg_times, jumps, lay, dims, t_out, atol, rtol,
                           h_max, max_steps):
    """:func:`integrate_batch` on the calling thread only, one member after another.

    For callers that already run in parallel (worker processes, Dask worker threads), where
    numba's own threads would oversubscribe the cores or, with numba's ``workqueue`` threading
    layer, must not be launched from several threads at once. Same arguments and results as
    :func:`integrate_batch`, member for member identical.
    """
    batch = y0.shape[0]
    n = y0.shape[1]
    states = np.empty((batch, t_out.size, n))
    final = np.empty((batch, n))
    stats = np.empty((batch, 4), dtype=np.int64)
    for b in range(batch):
        s, f, st = integrate(y0[b], params[b], seg_times[b], jumps[b], lay, dims, t_out, atol,
                             rtol, h_max, max_steps)
        states[b] = s
        final[b] = f
        stats[b] = st
    return states, final, stats
