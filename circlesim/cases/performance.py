"""Predictive performance: how far measurements lie from predictions, as Varvel et al. measure it.

Source: Varvel JR, Donoho DL, Shafer SL. Measuring the predictive performance of computer-
controlled infusion pumps. J Pharmacokinet Biopharm 1992;20:63–94. For each sample

    PE = (measured − predicted) / predicted × 100 %,

and for each series of one case

* MDPE (bias) = median PE;
* MDAPE (inaccuracy) = median |PE|;
* divergence = slope of the least-squares line of |PE| against time, in % per hour;
* wobble = median |PE − MDPE|.

Pooled over cases, each measure is the median of the per-case values (the paper's
individual-then-population approach). Samples whose prediction is below a floor
(:func:`circlesim.cases.columns.floor_percent`) are left out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Performance", "performance", "performance_errors", "pooled"]


@dataclass(frozen=True)
class Performance:
    """Varvel's measures for one series of one case (or pooled over cases).

    Attributes
    ----------
    n : int
        Samples scored (pooled: cases).
    mdpe_percent : float, %
    mdape_percent : float, %
    divergence_percent_h : float, % per hour
        NaN when the samples span no time.
    wobble_percent : float, %
    """

    n: int
    mdpe_percent: float
    mdape_percent: float
    divergence_percent_h: float
    wobble_percent: float

    def row(self) -> list[float]:
        """The four measures in the order MDPE, MDAPE, divergence, wobble."""
        return [self.mdpe_percent, self.mdape_percent, self.divergence_percent_h,
                self.wobble_percent]


def performance_errors(measured: np.ndarray, predicted: np.ndarray,
                       floor: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Performance errors, %, of the samples that can be scored, and which those are.

    Parameters
    ----------
    measured, predicted : ndarray, shape (N,)
        Same unit; NaN measured values are left out.
    floor : float
        Predictions below this are left out.

    Returns
    -------
    pe : ndarray, shape (M,), %
    kept : ndarray of bool, shape (N,)
    """
    measured = np.asarray(measured, dtype=float)
    predicted = np.asarray(predicted, dtype=float)
    kept = np.isfinite(measured) & np.isfinite(predicted) & (predicted >= floor) & (
        predicted > 0.0)
    return (measured[kept] - predicted[kept]) / predicted[kept] * 100.0, kept


def performance(time_min: np.ndarray, measured: np.ndarray, predicted: np.ndarray,
                floor: float = 0.0) -> Performance | None:
    """Varvel's measures for one series; None when no sample can be scored.

    Parameters
    ----------
    time_min : ndarray, shape (N,), min
    measured, predicted : ndarray, shape (N,)
    floor : float
        Predictions below this are not scored (same unit as the values).
    """
    pe, kept = performance_errors(measured, predicted, floor)
    if pe.size == 0:
        return None
    t_h = np.asarray(time_min, dtype=float)[kept] / 60.0
    mdpe = float(np.median(pe))
    ape = np.abs(pe)
    if pe.size >= 2 and np.ptp(t_h) > 0.0:
        slope = float(np.polyfit(t_h, ape, 1)[0])
    else:
        slope = math.nan
    return Performance(n=int(pe.size), mdpe_percent=mdpe, mdape_percent=float(np.median(ape)),
                       divergence_percent_h=slope,
                       wobble_percent=float(np.median(np.abs(pe - mdpe))))


def pooled(per_case: list[Performance]) -> Performance | None:
    """The median over cases of each measure (NaN divergences left out)."""
    if not per_case:
        return None
    rows = np.array([p.row() for p in per_case], dtype=float)
    div = rows[:, 2][np.isfinite(rows[:, 2])]
    return Performance(n=len(per_case), mdpe_percent=float(np.median(rows[:, 0])),
                       mdape_percent=float(np.median(rows[:, 1])),
                       divergence_percent_h=float(np.median(div)) if div.size else math.nan,
                       wobble_percent=float(np.median(rows[:, 3])))
