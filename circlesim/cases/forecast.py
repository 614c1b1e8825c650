"""Forecast the rest of a case from a fit of its first minutes, with a 5–95 % band.

:func:`forecast_case` fits the patient on the measurements up to ``until_min``
(:func:`circlesim.cases.fit.fit_case`), draws parameter sets from the Laplace approximation,
runs them all in one batch and reports, for every measured series, the band of the model's
curve (5 %, 50 %, 95 % by default), the posterior-mode prediction, and Varvel's measures on
the held-out measurements — beside the same measures for the unfitted prior model.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from circlesim.base.validation import InputError, Interval, check_number
from circlesim.cases.check import CHECK_INTERVAL_MIN
from circlesim.cases.columns import MeasuredSeries, floor_percent
from circlesim.cases.fit import CaseFit, batch_predictions, data_points, fit_case
from circlesim.cases.performance import Performance, performance
from circlesim.cases.priors import noise_sd
from circlesim.cases.record import CaseRecord

__all__ = ["Band", "Forecast", "band_from_fit", "forecast_case"]

#: The band's draws come from the Laplace approximation widened by this factor.
_WIDEN = 1.5


@dataclass(frozen=True, eq=False)
class Forecast:
    """A fit on the first minutes of a case and what it predicts for the rest.

    Attributes
    ----------
    record : CaseRecord
        The whole record.
    fit : CaseFit
    until_min : float, min
    time_min : ndarray, shape (T,), min
        Times of the curves.
    low, median, high : dict of MeasuredSeries to ndarray, shape (T,), vol%
        Band of the model's curve over the parameter draws (monitor view).
    mode : dict of MeasuredSeries to ndarray, shape (T,), vol%
        The posterior-mode curve.
    measured_low, measured_high : dict of MeasuredSeries to ndarray, shape (T,), vol%
        The band a measurement is expected in: the curve's band with the monitor's noise.
    held_out : dict of MeasuredSeries to Performance or None
        Varvel's measures of the mode's forecast on the measurements after ``until_min``.
    prior_held_out : dict of MeasuredSeries to Performance or None
        The same for the unfitted model.
    coverage : dict of MeasuredSeries to float
        Share of the held-out measurements inside ``measured_low``–``measured_high``.
    percentiles : tuple of float
    draws : int
    effective_draws : float
        Effective number of draws after importance weighting (Kish).
    """

    record: CaseRecord
    fit: CaseFit
    until_min: float
    time_min: np.ndarray
    low: dict[MeasuredSeries, np.ndarray]
    median: dict[MeasuredSeries, np.ndarray]
    high: dict[MeasuredSeries, np.ndarray]
    mode: dict[MeasuredSeries, np.ndarray]
    measured_low: dict[MeasuredSeries, np.ndarray]
    measured_high: dict[MeasuredSeries, np.ndarray]
    held_out: dict[MeasuredSeries, Performance | None]
    prior_held_out: dict[MeasuredSeries, Performance | None]
    coverage: dict[MeasuredSeries, float]
    percentiles: tuple[float, float]
    draws: int
    effective_draws: float

    def table(self) -> list[list[object]]:
        """Rows: series, held-out samples, MDPE % and MDAPE % fitted and unfitted, band
        coverage %."""
        rows: list[list[object]] = []
        for s in self.record.measured:
            fitted, prior = self.held_out.get(s), self.prior_held_out.get(s)
            rows.append([s.label, 0 if fitted is None else fitted.n,
                         None if fitted is None else fitted.mdpe_percent,
                         None if fitted is None else fitted.mdape_percent,
                         None if prior is None else prior.mdpe_percent,
                         None if prior is None else prior.mdape_percent,
                         100.0 * self.coverage.get(s, np.nan)])
        return rows


@dataclass(frozen=True, eq=False)
class Band:
    """Percentile band of each measured series over parameter draws (vol%, shape (T,)).

    ``low``/``median``/``high`` are of the model's curve; ``measured_low``/``measured_high``
    also include the monitor's noise (where a measurement is expected to fall); ``mode`` is
    the posterior-mode curve; ``effective_draws`` the Kish effective number of draws.
    """

    low: dict[MeasuredSeries, np.ndarray]
    median: dict[MeasuredSeries, np.ndarray]
    high: dict[MeasuredSeries, np.ndarray]
    measured_low: dict[MeasuredSeries, np.ndarray]
    measured_high: dict[MeasuredSeries, np.ndarray]
    mode: dict[MeasuredSeries, np.ndarray]
    effective_draws: float


def band_from_fit(fit: CaseFit, record: CaseRecord, times_min: np.ndarray, *, draws: int = 200,
                  percentiles: tuple[float, float] = (5.0, 95.0), seed: int | None = 0
                  ) -> Band:
    """The band of each measured series of ``record`` at ``times_min`` after ``fit``.

    The draws come from the fit's Laplace approximation widened by :data:`_WIDEN` and are
    reweighted by the exact posterior over the fitted measurements (sampling importance
    weights), so the band follows the posterior where it is not Gaussian. The weights need one
    model run per draw over the record, which the band needs anyway.
    """
    rng = np.random.default_rng(seed)
    proposal = (_WIDEN ** 2) * fit.covariance
    bounds = np.array(fit.prior.bounds(record.scenario.patient))
    thetas = rng.multivariate_normal(fit.theta, proposal, size=draws, method="eigh")
    thetas = np.clip(thetas, bounds[:, 0], bounds[:, 1])
    thetas = np.vstack([fit.theta, thetas])
    parts, y, _ = data_points(fit.record)
    sd = fit.noise_sd
    fitted_times = fit.record.time_min
    at = np.union1d(times_min, fitted_times)
    own = record.with_scenario(fit.record.scenario)
    preds, _ = batch_predictions(own, thetas, fit.prior, times_min=at)
    where_fit = np.searchsorted(at, fitted_times)
    f = np.concatenate([preds[s][:, where_fit][:, idx] for s, idx in parts], axis=1)[1:]
    z_data = (y - f) / sd
    z_prior = (thetas[1:] - fit.prior.mean_log) / fit.prior.sd_log
    log_post = -0.5 * (fit.data_weight * np.sum(z_data ** 2, axis=1)
                       + np.sum(z_prior ** 2, axis=1))
    dev = thetas[1:] - fit.theta
    log_q = -0.5 * np.einsum("ij,jk,ik->i", dev, np.linalg.pinv(proposal), dev)
    log_w = log_post - log_q
    w = np.exp(log_w - log_w.max())
    w /= w.sum()
    effective = float(1.0 / np.sum(w ** 2))
    where_band = np.searchsorted(at, times_min)
    low, med, high, mode, m_low, m_high = {}, {}, {}, {}, {}, {}
    noise_scale = 1.0 / np.sqrt(fit.data_weight)
    for s, values in preds.items():
        values = values[:, where_band]
        mode[s] = values[0]
        low[s], med[s], high[s] = (_weighted_percentile(values[1:], w, q)
                                   for q in (percentiles[0], 50.0, percentiles[1]))
        gas = "agent" if s.gas == record.agent else s.gas
        noisy = values[1:] + rng.standard_normal(values[1:].shape) * noise_scale * noise_sd(
            gas, values[1:])
        m_low[s], m_high[s] = (_weighted_percentile(noisy, w, q) for q in percentiles)
    return Band(low, med, high, m_low, m_high, mode, effective)


def _weighted_percentile(values: np.ndarray, weights: np.ndarray, q: float) -> np.ndarray:
    """Percentile ``q`` (%) over axis 0 of ``values`` (D, T) with draw weights (D,)."""
    order = np.argsort(values, axis=0)
    sorted_values = np.take_along_axis(values, order, axis=0)
    cum = np.cumsum(weights[order], axis=0)
    cum -= 0.5 * weights[order]  # mid-point rule
    out = np.empty(values.shape[1])
    for j in range(values.shape[1]):
        out[j] = np.interp(q / 100.0, cum[:, j], sorted_values[:, j])
    return out


def forecast_case(record: CaseRecord, until_min: float, *, draws: int = 200,
                  percentiles: tuple[float, float] = (5.0, 95.0), seed: int | None = 0,
                  fit: CaseFit | None = None) -> Forecast:
    """Fit on the measurements up to ``until_min`` and forecast the rest of the record.

    Parameters
    ----------
    record : CaseRecord
    until_min : float, min
        Above 0 and before the record's last measurement.
    draws : int, 20–5000
        Parameter draws for the band.
    percentiles : (float, float), %, each 1–99
        Band limits (default 5 and 95).
    seed : int, optional
    fit : CaseFit, optional
        A fit already made on the same record and ``until_min``.

    Raises
    ------
    InputError
        For an ``until_min`` that leaves nothing to forecast or to fit, or bad band settings.
    """
    check_number("forecast", "draws", draws, Interval(20, 5000))
    for i, p in enumerate(percentiles):
        check_number("forecast", f"percentiles[{i}]", p, Interval(1.0, 99.0, "%"))
    if not percentiles[0] < percentiles[1]:
        raise InputError(f"forecast: percentiles must be (lower, upper) with lower < upper; "
                         f"got {percentiles}.")
    if record.time_min.size == 0 or until_min >= record.time_min[-1]:
        last = record.time_min[-1] if record.time_min.size else 0.0
        raise InputError(f"{record.path or record.name}: until_min ({until_min:g} min) leaves "
                         f"no measurement to forecast (the last is at {last:g} min).")
    fit = fit_case(record, until_min=until_min) if fit is None else fit
    later = record.after(until_min)
    step = min(CHECK_INTERVAL_MIN * 5, record.plan.duration_min / 200.0)
    times = np.union1d(np.arange(0.0, record.plan.duration_min + 1e-9, step), later.time_min)
    band = band_from_fit(fit, record, times, draws=draws, percentiles=percentiles, seed=seed)
    prior_theta = fit.prior.mean_log[None, :]
    prior_preds, _ = batch_predictions(later.with_scenario(fit.record.scenario), prior_theta,
                                       fit.prior)
    held, prior_held, coverage = {}, {}, {}
    idx = np.searchsorted(times, later.time_min)
    for s, measured in later.measured.items():
        floor = floor_percent(s.gas)
        held[s] = performance(later.time_min, measured, band.mode[s][idx], floor)
        prior_held[s] = performance(later.time_min, measured, prior_preds[s][0], floor)
        ok = np.isfinite(measured)
        inside = ((measured[ok] >= band.measured_low[s][idx][ok])
                  & (measured[ok] <= band.measured_high[s][idx][ok]))
        coverage[s] = float(inside.mean()) if ok.any() else float("nan")
    return Forecast(record, fit, until_min, times, band.low, band.median, band.high, band.mode,
                    band.measured_low, band.measured_high, held, prior_held, coverage,
                    percentiles, draws, band.effective_draws)
