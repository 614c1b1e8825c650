"""Leaks and side-stream sample gas that is not returned: the flow that must be supplied, and
what they do to the inspired O2 fraction.

A leak takes circuit gas; a lost sample takes inspired gas during inspiration and exhaled gas
during expiration. Both must be replaced by fresh gas before anything is vented, so the flow
that keeps the bag full rises by the leak plus the non-CO2 part of the lost sample (the CO2 in
exhaled sample gas would have been absorbed anyway). With the valve venting exhaled gas first
(the default) both also lower FIO2: they take O2-rich circuit gas, so more of the O2-poor
exhaled gas returns. With the valve venting well-mixed circuit gas, a leak changes nothing
else as long as the valve still vents (it only takes the place of venting). The derivation is
in ``docs/oxygen.md``.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
from scipy.optimize import brentq

from circlesim.base.validation import InputError, Interval, check_number
from circlesim.domain.plan import MAX_TOTAL_FGF_L_MIN, MIN_TOTAL_FGF_L_MIN
from circlesim.oxygen.setup import (
    FreshGas,
    Setup,
    check_leak_below_flow,
    check_threshold,
    engine_steady_state,
    steady_state,
)

__all__ = ["loss_effects", "required_fgf_l_min", "with_losses"]


def with_losses(setup: Setup, leak_ml_min: float, sample_lost_ml_min: float) -> Setup:
    """The set-up with a leak and a lost sample flow (0 mL/min: the sample is returned)."""
    check_number("with_losses", "leak_ml_min", leak_ml_min, Interval(0.0, 5000.0, "mL/min"))
    check_number("with_losses", "sample_lost_ml_min", sample_lost_ml_min,
                 Interval(0.0, 500.0, "mL/min"))
    if sample_lost_ml_min > 0.0:
        return setup.with_circuit(leak_ml_min=leak_ml_min, sample_ml_min=sample_lost_ml_min,
                                  sample_returned=False)
    return setup.with_circuit(leak_ml_min=leak_ml_min, sample_returned=True)


def _state(setup: Setup, fresh: FreshGas, fgf_l_min: float | None = None):
    """Closed-form steady state of a make-up (at another total flow if given)."""
    fgf = fresh.fgf_l_min if fgf_l_min is None else fgf_l_min
    return steady_state(setup, fgf, fresh.o2_fraction, carrier=fresh.carrier,
                        dial_percent=fresh.dial_percent)


def _fio2(setup: Setup, fgf: float, fresh: FreshGas) -> float:
    return float(_state(setup, fresh, fgf).inspired_o2)


def required_fgf_l_min(setup: Setup, fresh: FreshGas, fio2_threshold: float) -> float:
    """Lowest total flow (L/min) at the make-up's O2 fraction that keeps steady-state FIO2 at
    or above the threshold (NaN if none up to 20 L/min reaches it).

    Parameters
    ----------
    setup : Setup
    fresh : FreshGas
        Its O2 fraction, carrier and dial are used; its flow is not.
    fio2_threshold : float, 0.21–1
    """
    threshold = check_threshold(fio2_threshold, "required_fgf_l_min")
    grid = np.geomspace(MIN_TOTAL_FGF_L_MIN, MAX_TOTAL_FGF_L_MIN, 60)
    values = np.array([_fio2(setup, f, fresh) for f in grid]) - threshold
    above = np.flatnonzero(values >= 0.0)
    if above.size == 0:
        return float("nan")
    i = int(above[0])
    if i == 0:
        return float(grid[0])
    return float(brentq(lambda f: _fio2(setup, f, fresh) - threshold, grid[i - 1], grid[i],
                        xtol=1e-6))


def loss_effects(setup: Setup, fresh: FreshGas, leaks_ml_min: Iterable[float] = (
        0.0, 100.0, 200.0, 500.0), samples_lost_ml_min: Iterable[float] = (0.0, 200.0), *,
        fio2_threshold: float = 0.30, engine_check: bool = False):
    """Effect of each combination of leak and lost sample flow.

    Parameters
    ----------
    setup : Setup
        Its own leak and sample settings are replaced by each combination.
    fresh : FreshGas
        The make-up whose FIO2 is reported.
    leaks_ml_min : sequence of float, mL/min, each 0–5000 and below the fresh gas flow
    samples_lost_ml_min : sequence of float, mL/min, each 0–500
    fio2_threshold : float, 0.21–1
    engine_check : bool
        Also run the engine to its steady state for each row.

    Returns
    -------
    pandas.DataFrame
        One row per combination: ``leak_ml_min``, ``sample_lost_ml_min``; ``steady_fio2``
        (closed form) and ``fio2_drop`` against no loss; ``minimum_fgf_l_min`` (the flow that
        just keeps the bag full) and ``extra_minimum_fgf_l_min``; ``required_fgf_l_min`` (the
        flow at this O2 fraction that keeps FIO2 at the threshold) and
        ``extra_required_fgf_l_min``; ``bag_empties`` at this make-up; with
        ``engine_check``, ``engine_fio2``.

    Raises
    ------
    InputError
        If a leak plus lost sample is not smaller than the make-up's flow, or the lists are
        empty.
    """
    import pandas as pd

    threshold = check_threshold(fio2_threshold, "loss_effects")
    leaks = [float(v) for v in leaks_ml_min]
    samples = [float(v) for v in samples_lost_ml_min]
    if not leaks or not samples:
        raise InputError("loss_effects needs at least one leak and one sample flow "
                         "(0 for none); got an empty list.")
    rows = []
    base = with_losses(setup, 0.0, 0.0)
    base_fio2 = _fio2(base, fresh.fgf_l_min, fresh)
    base_state = _state(base, fresh)
    base_required = required_fgf_l_min(base, fresh, threshold)
    for leak in leaks:
        for sample in samples:
            lossy = with_losses(setup, leak, sample)
            check_leak_below_flow(lossy.circuit, fresh.fgf_l_min, "loss_effects")
            state = _state(lossy, fresh)
            fio2 = float(state.inspired_o2)
            required = required_fgf_l_min(lossy, fresh, threshold)
            row = {"leak_ml_min": leak, "sample_lost_ml_min": sample, "steady_fio2": fio2,
                   "fio2_drop": base_fio2 - fio2,
                   "minimum_fgf_l_min": _minimum_fgf(lossy, state, fresh),
                   "extra_minimum_fgf_l_min": _minimum_fgf(lossy, state, fresh)
                   - _minimum_fgf(base, base_state, fresh),
                   "required_fgf_l_min": required,
                   "extra_required_fgf_l_min": required - base_required,
                   "bag_empties": bool(state.surplus_l_min < 0.0)}
            if engine_check:
                row["engine_fio2"] = float(engine_steady_state(lossy, fresh).inspired[-1, 0])
            rows.append(row)
    return pd.DataFrame(rows)


def _minimum_fgf(setup: Setup, state, fresh: FreshGas) -> float:
    """Flowmeter flow (L/min) whose fresh gas (with vapour) equals uptake plus losses."""
    return float(state.minimum_fresh_l_min) * (1.0 - fresh.dial_percent / 100.0) / (
        setup.k_circuit)

