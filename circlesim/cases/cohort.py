"""Calibrate a cohort profile over many case records, and check it case by case left out.

Each record is fitted on its own with the population's priors (:func:`fit_case`). The Laplace
approximation of each fit then gives what that case's data alone say about its log
parameters: an information matrix ``L_i = Σ_i⁻¹ − P₀⁻¹`` and vector
``b_i = Σ_i⁻¹ θ_i − P₀⁻¹ μ₀``. The cohort's typical log parameters ``μ`` and their
between-patient variances ``T`` (diagonal) follow by expectation–maximisation of the normal
hierarchical model ``θ_i ~ N(μ, T)``, data ``~ N(θ_i, L_i⁻¹)`` — closed-form steps, no
refitting (a standard two-stage approach with the individual fits' uncertainty kept). The
result is a :class:`~circlesim.domain.physiology.CohortProfile`: medians ``exp(μ)``, spread
``sqrt(T)``.

Leave-one-case-out: for each record, the profile is recalibrated on the others (again
closed-form) and the record is predicted with the profile's typical factors, unfitted; its
Varvel measures are reported beside those of the textbook default model.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from circlesim.base.distributed import map_chunks
from circlesim.base.validation import InputError
from circlesim.cases.check import check_case
from circlesim.cases.columns import MeasuredSeries
from circlesim.cases.fit import IDENTIFIED_SHRINK, FitError, fit_case
from circlesim.cases.performance import Performance, pooled
from circlesim.cases.priors import PARAMETERS, prior_for
from circlesim.cases.record import CaseRecord
from circlesim.domain.physiology import FACTOR_RANGE, CohortProfile, Factors

__all__ = ["Calibration", "CaseFitSummary", "calibrate", "fit_for_cohort", "profile_from_fits"]

#: Smallest between-patient SD of a log parameter the calibration reports.
MIN_SPREAD_LOG = 0.01
#: Whitened information below this (the data narrowed the prior by less than about 2 %) is
#: treated as none: it only passes on the optimiser's tolerance, amplified.
_INFORMATIVE = 0.05
#: EM iterations at most, and the change in μ that counts as converged.
_EM_ITERATIONS = 500
_EM_TOLERANCE = 1e-7


@dataclass(frozen=True)
class CaseFitSummary:
    """What the calibration keeps of one case's fit (all log parameters in PARAMETERS order).

    Attributes
    ----------
    name : str
    theta : ndarray, shape (P,)
    covariance : ndarray, shape (P, P)
    error : str
        Empty when the fit worked; otherwise why the case was left out.
    """

    name: str
    theta: np.ndarray
    covariance: np.ndarray
    error: str = ""


def fit_for_cohort(record: CaseRecord, parallel: bool) -> CaseFitSummary:
    """Fit one record with the population prior on every parameter (worker function)."""
    plain = record.with_scenario(replace(record.scenario, profile=None, fit=None))
    try:
        fit = fit_case(plain, parameters=PARAMETERS)
    except (InputError, FitError) as exc:
        return CaseFitSummary(record.name, np.zeros(0), np.zeros((0, 0)), str(exc))
    return CaseFitSummary(record.name, fit.theta, fit.covariance)


def profile_from_fits(fits: Sequence[CaseFitSummary], name: str, *,
                      description: str = "") -> CohortProfile:
    """The cohort profile of a set of case fits (expectation–maximisation, closed form).

    Raises
    ------
    InputError
        If fewer than two fits worked.
    """
    good = [f for f in fits if not f.error]
    if len(good) < 2:
        raise InputError(f"calibrating a cohort needs at least 2 fitted cases; got "
                         f"{len(good)}.")
    prior = prior_for(PARAMETERS)
    p0 = np.diag(1.0 / prior.sd_log ** 2)
    info, vec = [], []
    root = prior.sd_log  # whitening: z = (θ − μ₀) / sd
    for f in good:
        precision = np.linalg.inv(f.covariance)
        # what the case's data alone say, in prior-whitened coordinates
        lik = (precision - p0) * np.outer(root, root)
        w, v = np.linalg.eigh(0.5 * (lik + lik.T))
        keep = w > _INFORMATIVE  # directions the data informed; the rest carry nothing
        v, w = v[:, keep], w[keep]
        gradient = (precision @ f.theta - p0 @ prior.mean_log) * root
        estimate = v @ ((v.T @ gradient) / w) if w.size else np.zeros_like(root)
        lik_w = (v * w) @ v.T
        info.append(lik_w / np.outer(root, root))
        vec.append((lik_w @ estimate) / root)
    # A parameter the cases could not identify (most fits left it at its prior) keeps the
    # prior's centre and spread: weak, mixed information would otherwise drift it anywhere.
    shrink = np.array([np.sqrt(np.diag(f.covariance)) / prior.sd_log for f in good])
    fixed = np.mean(shrink < IDENTIFIED_SHRINK, axis=0) < 0.5
    mu = prior.mean_log.copy()
    t_var = prior.sd_log ** 2
    for _ in range(_EM_ITERATIONS):
        t_inv = np.diag(1.0 / t_var)
        means, covs = [], []
        for lik, b in zip(info, vec, strict=True):
            cov = np.linalg.inv(t_inv + lik)
            means.append(cov @ (t_inv @ mu + b))
            covs.append(np.diag(cov))
        means_arr, covs_arr = np.array(means), np.array(covs)
        new_mu = means_arr.mean(axis=0)
        new_var = np.mean((means_arr - new_mu) ** 2 + covs_arr, axis=0)
        new_var = np.clip(new_var, MIN_SPREAD_LOG ** 2, 4.0 * prior.sd_log ** 2)
        new_mu[fixed] = prior.mean_log[fixed]
        new_var[fixed] = prior.sd_log[fixed] ** 2
        done = np.max(np.abs(new_mu - mu)) < _EM_TOLERANCE
        mu, t_var = new_mu, new_var
        if done:
            break
    medians = {n: float(math.exp(m)) for n, m in zip(PARAMETERS, mu, strict=True)}
    for n, (lo, hi) in FACTOR_RANGE.items():
        medians[n] = min(max(medians[n], lo), hi)
    spread = {n: float(math.sqrt(v)) for n, v in zip(PARAMETERS, t_var, strict=True)}
    if fixed.any():
        kept = ", ".join(n.replace("_", " ") for n, f in zip(PARAMETERS, fixed, strict=True)
                         if f)
        note = f"not identified by these cases, kept at the population prior: {kept}"
        description = f"{description}; {note}" if description else note
    return CohortProfile(name=name, factors=Factors(**medians), spread_log=spread,
                         description=description,
                         calibrated_on=tuple(f.name for f in good))


@dataclass(frozen=True, eq=False)
class Calibration:
    """A calibrated cohort profile and its leave-one-case-out check.

    Attributes
    ----------
    profile : CohortProfile
    fits : tuple of CaseFitSummary
    default_errors : dict of str to dict of MeasuredSeries to Performance or None
        Per case: the textbook default model's measures.
    held_out_errors : dict of str to dict of MeasuredSeries to Performance or None
        Per case: measures of the profile calibrated without that case (also for cases that
        could not be fitted themselves).
    problems : tuple of (str, str)
        Cases left out, with the reason.
    where : str
        Where the fits ran.
    """

    profile: CohortProfile
    fits: tuple[CaseFitSummary, ...]
    default_errors: dict[str, dict[MeasuredSeries, Performance | None]]
    held_out_errors: dict[str, dict[MeasuredSeries, Performance | None]]
    problems: tuple[tuple[str, str], ...]
    where: str

    def pooled_table(self) -> list[list[object]]:
        """Rows per series: cases, default MDPE/MDAPE %, held-out profile MDPE/MDAPE %."""
        series = sorted({s for errs in self.default_errors.values() for s in errs},
                        key=lambda s: (s.gas, s.site))
        rows: list[list[object]] = []
        for s in series:
            default = pooled([e[s] for e in self.default_errors.values() if e.get(s)])
            held = pooled([e[s] for e in self.held_out_errors.values() if e.get(s)])
            rows.append([s.label, 0 if default is None else default.n,
                         None if default is None else default.mdpe_percent,
                         None if default is None else default.mdape_percent,
                         None if held is None else held.mdpe_percent,
                         None if held is None else held.mdape_percent])
        return rows


def calibrate(records: Sequence[CaseRecord], name: str, *, description: str = "",
              leave_one_out: bool = True, scheduler: Any = None, workers: int | None = None,
              progress: Callable[[int], Any] | None = None) -> Calibration:
    """Calibrate a cohort profile called ``name`` on ``records``.

    Parameters
    ----------
    records : sequence of CaseRecord
        At least two; a record that cannot be fitted is left out and listed.
    name : str
        The profile's name.
    description : str
    leave_one_out : bool
        Also check each case with the profile calibrated without it.
    scheduler, workers :
        Where the fits run (:func:`circlesim.base.distributed.map_chunks`: local processes by
        default, or a Dask scheduler).
    progress : callable, optional
        Called with 1 as each case's fit finishes.

    Raises
    ------
    InputError
        Fewer than two records, or fewer than two that could be fitted.
    """
    records = list(records)
    if len(records) < 2:
        raise InputError(f"calibrating a cohort needs at least 2 case records; got "
                         f"{len(records)}.")
    run = map_chunks(fit_for_cohort, records, scheduler=scheduler, workers=workers,
                     progress=progress)
    fits = tuple(run.results)
    profile = profile_from_fits(fits, name, description=description)
    problems = tuple((f.name, f.error) for f in fits if f.error)
    default_errors, held_out = {}, {}
    if leave_one_out:
        for record, own in zip(records, fits, strict=True):
            plain = record.with_scenario(replace(record.scenario, profile=None, fit=None))
            default_errors[record.name] = check_case(plain).measures
            others = [f for f in fits if f is not own and not f.error]
            if len(others) < 2:
                continue
            loo = profile_from_fits(others, f"{name} without {record.name}")
            held_out[record.name] = check_case(
                record.with_scenario(replace(plain.scenario, profile=loo))).measures
    return Calibration(profile, fits, default_errors, held_out, problems, run.where)
