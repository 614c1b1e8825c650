"""Fit the patient to a measured case: maximum a posteriori estimates with their uncertainty.

The parameters are the logarithms of the physiological factors (cardiac output, alveolar
ventilation, O2 consumption, FRC, blood/gas solubility) and of the circuit's leak, with the
population's priors (:mod:`circlesim.cases.priors`). The posterior is

    −log p(θ | y) = ½ Σ ((y − f(θ)) / σ)² + ½ Σ ((θ − μ₀) / s₀)² + const,

with the monitor noise σ of :data:`circlesim.cases.priors.NOISE`. It is minimised by L-BFGS-B
(a bounded quasi-Newton method) with the gradient from a forward-difference Jacobian, each
evaluation one batch run of the compiled engine. The uncertainty is the Laplace
approximation: the inverse of the Gauss–Newton Hessian at the optimum. Where the residuals are
larger than the noise model says (a model that cannot follow the data), the data's weight is
scaled down by the residual variance, so the intervals widen rather than claim certainty the
fit does not have. A parameter whose interval the data narrowed by less than 10 % from the
prior's is reported as "not identified by these data", not as a number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import minimize

from circlesim.base.validation import InputError, Interval, check_whole_number
from circlesim.cases.check import CHECK_INTERVAL_MIN
from circlesim.cases.columns import MeasuredSeries
from circlesim.cases.priors import PARAMETERS, Prior, noise_sd, prior_for
from circlesim.cases.record import CaseRecord
from circlesim.domain.physiology import FitUncertainty
from circlesim.engine.batch import simulate_batch
from circlesim.engine.batch_result import BatchResult
from circlesim.scenario import Scenario

__all__ = ["CaseFit", "Estimate", "FitError", "batch_predictions", "data_points", "fit_case",
           "fit_parameters", "noise_of_values"]

#: Forward-difference step on the log scale.
_STEP = 1e-3
#: Fewest measured values a fit accepts (the priors carry the rest; what the data cannot
#: identify is reported as such).
MIN_POINTS = 2
#: A parameter is "not identified" when the data narrow its prior SD by less than this.
IDENTIFIED_SHRINK = 0.9
#: Integrator tolerance of the fit's model runs.
FIT_RTOL = 1e-7


class FitError(RuntimeError):
    """The fit did not converge; the message names the record and what went wrong."""


@dataclass(frozen=True)
class Estimate:
    """One fitted parameter.

    Attributes
    ----------
    name : str
    value : float
        Factor (× the patient's default) or leak in mL/min, at the posterior mode.
    low, high : float
        5 % and 95 % limits of the Laplace approximation.
    prior_value : float
        The prior's median.
    shrink : float
        Posterior SD / prior SD of the log parameter (1: the data said nothing).
    identified : bool
        Whether the data narrowed the prior by at least 10 %.
    """

    name: str
    value: float
    low: float
    high: float
    prior_value: float
    shrink: float
    identified: bool

    def describe(self) -> str:
        """One line for people."""
        unit = " mL/min" if self.name == "leak_ml_min" else " ×"
        label = self.name.replace("_", " ")
        if not self.identified:
            return (f"{label}: not identified by these data (kept near the prior, "
                    f"{self.prior_value:.3g}{unit})")
        return (f"{label}: {self.value:.3g}{unit} (90 % interval {self.low:.3g}–"
                f"{self.high:.3g}{unit}; prior {self.prior_value:.3g}{unit})")


def data_points(record: CaseRecord) -> tuple[list[tuple[MeasuredSeries, np.ndarray]],
                                               np.ndarray, np.ndarray]:
    """(series and their kept indices, measured values, noise SD), flattened in series order."""
    parts, ys, sds = [], [], []
    for s, values in record.measured.items():
        ok = np.flatnonzero(np.isfinite(values))
        if ok.size == 0:
            continue
        gas = "agent" if s.gas == record.agent else s.gas
        parts.append((s, ok))
        ys.append(values[ok])
        sds.append(noise_sd(gas, values[ok]))
    if not parts:
        return [], np.zeros(0), np.zeros(0)
    return parts, np.concatenate(ys), np.concatenate(sds)


def noise_of_values(parts: list[tuple[MeasuredSeries, np.ndarray]], agent: str,
                    values: np.ndarray) -> np.ndarray:
    """Monitor noise SD (vol%) of flattened ``values`` laid out as :func:`data_points`."""
    out, start = [], 0
    for s, idx in parts:
        gas = "agent" if s.gas == agent else s.gas
        out.append(noise_sd(gas, values[start:start + idx.size]))
        start += idx.size
    return np.concatenate(out) if out else np.zeros(0)


def batch_predictions(record: CaseRecord, thetas: np.ndarray, prior: Prior, *,
                      rtol: float = FIT_RTOL, times_min: np.ndarray | None = None,
                      ) -> tuple[dict[MeasuredSeries, np.ndarray], BatchResult]:
    """Monitor view of each measured series for a batch of log-parameter vectors.

    Parameters
    ----------
    record : CaseRecord
    thetas : ndarray, shape (B, P)
        Log parameters in the order of ``prior.names``.
    prior : Prior
    rtol : float
    times_min : ndarray, shape (N,), optional
        Times to show the series at (default: the record's sample times).

    Returns
    -------
    predictions : dict of MeasuredSeries to ndarray, shape (B, N), vol%
    batch : BatchResult
    """
    sc = record.scenario
    patients, circuits = [], []
    for theta in np.atleast_2d(thetas):
        p, c = prior.factors(theta).apply(sc.patient, sc.circuit)
        patients.append(p)
        circuits.append(c)
    batch = simulate_batch(patients, circuits, sc.plan, vaporizer=sc.vaporizer,
                           absorber=sc.absorber, output_interval_min=CHECK_INTERVAL_MIN,
                           rtol=rtol)
    at = record.time_min if times_min is None else times_min
    out = {}
    for s in record.measured:
        gas = "agent" if s.gas == record.agent else s.gas
        g = batch.gas_index(gas)
        values = 100.0 * (batch.end_tidal if s.site == "end_tidal" else batch.inspired)[:, :, g]
        out[s] = record.monitor.observe(batch.time_min, values, at)
    return out, batch


@dataclass(frozen=True, eq=False)
class CaseFit:
    """A fitted patient: estimates, their uncertainty and the fitted scenario.

    Attributes
    ----------
    record : CaseRecord
        The record fitted (its measurements up to ``until_min``).
    prior : Prior
    theta : ndarray, shape (P,)
        Posterior mode of the log parameters.
    covariance : ndarray, shape (P, P)
        Laplace covariance of the log parameters.
    estimates : tuple of Estimate
    until_min : float or None, min
        Last measurement time used (None: the whole record).
    noise_scale : float
        Root mean square of the standardised residuals at the optimum (about 1 when the
        model follows the data to within the monitor's noise).
    data_weight : float, 0–1
        Weight of the data in the posterior: 1, or less when the residuals exceed the noise
        model (1 / residual variance).
    noise_sd : ndarray, shape (M,), vol%
        Noise SD of each fitted value (in :func:`data_points` order), from the fitted curve.
    evaluations : int
        Batch runs of the model.
    message : str
        The optimiser's message.
    """

    record: CaseRecord
    prior: Prior
    theta: np.ndarray
    covariance: np.ndarray
    estimates: tuple[Estimate, ...]
    until_min: float | None
    noise_scale: float
    data_weight: float
    noise_sd: np.ndarray
    evaluations: int
    message: str

    @property
    def not_identified(self) -> tuple[str, ...]:
        """Parameters the data could not identify."""
        return tuple(e.name for e in self.estimates if not e.identified)

    @property
    def factors(self):
        """The fitted :class:`~circlesim.domain.physiology.Factors`."""
        return self.prior.factors(self.theta)

    def scenario(self) -> Scenario:
        """The record's scenario with the fitted patient and circuit, and the fit's
        uncertainty (``[fit]``), ready for ``circlesim run``, ``advise`` and the planner."""
        sc = self.record.scenario
        patient, circuit = self.factors.apply(sc.patient, sc.circuit)
        reach = ("the whole record" if self.until_min is None
                 else f"its first {self.until_min:g} min")
        source = f"{self.record.name} ({reach})"
        uncertainty = FitUncertainty(self.prior.names, self.covariance, source,
                                     self.not_identified)
        return Scenario(plan=sc.plan, patient=patient, circuit=circuit, absorber=sc.absorber,
                        vaporizer=sc.vaporizer, report=sc.report,
                        title=f"{sc.title or self.record.name} (fitted patient)",
                        question=sc.question, prices=sc.prices, fit=uncertainty)

    def summary(self) -> str:
        """Lines for people: each estimate or "not identified"."""
        lines = [f"Fit of {self.record.name} ({self.record.count()} measured values"
                 + ("" if self.until_min is None else f" up to {self.until_min:g} min")
                 + f"); residuals {self.noise_scale:.2f} × the monitor's noise:"]
        lines.extend(f" - {e.describe()}" for e in self.estimates)
        return "\n".join(lines)


def fit_parameters(record: CaseRecord) -> tuple[str, ...]:
    """The parameters a record can inform: all of them, except alveolar ventilation when the
    plan sets tidal volume and rate itself (the factor acts through the default ventilation)."""
    steps = record.plan.steps
    explicit = any(s.tidal_volume_ml is not None for s in steps) and any(
        s.rate_per_min is not None for s in steps)
    return tuple(p for p in PARAMETERS if not (explicit and p == "alveolar_ventilation"))


def fit_case(record: CaseRecord, *, until_min: float | None = None,
             parameters: tuple[str, ...] | None = None, max_iterations: int = 100) -> CaseFit:
    """Fit the patient (and the circuit's leak) to a case record.

    Parameters
    ----------
    record : CaseRecord
        If its scenario names a cohort profile, the profile is the prior.
    until_min : float, optional, min
        Use only the measurements up to this time ("fit on the first N minutes").
    parameters : tuple of str, optional
        Which of :data:`circlesim.cases.priors.PARAMETERS` to fit (default
        :func:`fit_parameters`).
    max_iterations : int, 5–1000

    Returns
    -------
    CaseFit

    Raises
    ------
    InputError
        For too few measured values, or an unknown parameter.
    FitError
        If the optimiser fails.
    """
    where = str(record.path or record.name)
    max_iterations = check_whole_number("max_iterations", max_iterations, Interval(5, 1000))
    data = record
    if until_min is not None:
        if not 0.0 < until_min <= record.plan.duration_min:
            raise InputError(f"{where}: until_min must be above 0 and at most the record's "
                             f"length, {record.plan.duration_min:g} min; got {until_min:g}.")
        data = record.until(until_min)
    parts, y, sd = data_points(data)  # sd: noise of each reading, replaced in stage 2
    if y.size < MIN_POINTS:
        raise InputError(f"{where}: {y.size} measured value(s)"
                         + ("" if until_min is None else f" up to {until_min:g} min")
                         + f"; a fit needs at least {MIN_POINTS}.")
    names = fit_parameters(record) if parameters is None else tuple(parameters)
    prior = prior_for(names, record.scenario.profile)
    scenario_free = record.with_scenario(_without_profile(record.scenario))
    data = data.with_scenario(scenario_free.scenario)
    n_par = len(names)
    evaluations = 0

    def predict(thetas: np.ndarray) -> np.ndarray:
        nonlocal evaluations
        evaluations += 1
        preds, _ = batch_predictions(data, thetas, prior)
        return np.concatenate([preds[s][:, idx] for s, idx in parts], axis=1)

    bounds = prior.bounds(record.scenario.patient)
    upper = np.array([b[1] for b in bounds])

    def residuals_and_jacobian(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        # forward differences, backward at the upper bound
        step = np.where(theta + _STEP <= upper, _STEP, -_STEP)
        thetas = np.vstack([theta, theta + np.diag(step)])
        f = predict(thetas)
        r = (y - f[0]) / sd
        jac = -(f[1:] - f[0]) / step[:, None] / sd  # (P, M): d r / d theta
        return r, jac.T

    cache: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}

    def objective(theta: np.ndarray) -> tuple[float, np.ndarray]:
        key = theta.tobytes()
        if key not in cache:
            cache.clear()
            cache[key] = residuals_and_jacobian(theta)
        r, jac = cache[key]
        z = (theta - prior.mean_log) / prior.sd_log
        value = 0.5 * float(r @ r + z @ z)
        grad = jac.T @ r + z / prior.sd_log
        if not np.all(np.isfinite(grad)) or not math.isfinite(value):
            raise FitError(f"{where}: the model gave no finite prediction at "
                           f"{prior.factors(theta)}.")
        return value, grad

    def minimise(start: np.ndarray):
        try:
            opt = minimize(objective, start, jac=True, method="L-BFGS-B", bounds=bounds,
                           options={"maxiter": max_iterations, "ftol": 1e-10, "gtol": 1e-6})
        except (InputError, FloatingPointError) as exc:
            raise FitError(f"{where}: the fit failed: {exc}") from None
        if not opt.success and opt.nit >= max_iterations:
            raise FitError(f"{where}: the fit did not converge in {max_iterations} iterations "
                           f"({opt.message}); try fewer parameters or more data.")
        return opt

    # Stage 1 weighs each value by the noise of its own reading; stage 2 by the noise of the
    # predicted value (the readings' own noise would favour low readings, which biases the
    # fit when the noise grows with the value), starting from stage 1.
    opt = minimise(np.clip(prior.mean_log, [b[0] for b in bounds], [b[1] for b in bounds]))
    sd = noise_of_values(parts, data.agent, predict(opt.x[None, :])[0])
    cache.clear()
    opt = minimise(np.asarray(opt.x, dtype=float))
    theta = np.asarray(opt.x, dtype=float)
    r, jac = residuals_and_jacobian(theta)
    dof = max(y.size - n_par, 1)
    scale2 = max(float(r @ r) / dof, 1.0)
    precision = jac.T @ jac / scale2 + np.diag(1.0 / prior.sd_log ** 2)
    covariance = np.linalg.inv(precision)
    covariance = 0.5 * (covariance + covariance.T)
    estimates = []
    z90 = 1.6448536269514722
    for i, name in enumerate(names):
        sd_i = math.sqrt(max(covariance[i, i], 0.0))
        shrink = sd_i / prior.sd_log[i]
        estimates.append(Estimate(
            name=name, value=math.exp(theta[i]), low=math.exp(theta[i] - z90 * sd_i),
            high=math.exp(theta[i] + z90 * sd_i), prior_value=math.exp(prior.mean_log[i]),
            shrink=shrink, identified=shrink < IDENTIFIED_SHRINK))
    return CaseFit(record=data, prior=prior, theta=theta, covariance=covariance,
                   estimates=tuple(estimates), until_min=until_min,
                   noise_scale=math.sqrt(float(r @ r) / max(y.size, 1)),
                   data_weight=1.0 / scale2, noise_sd=sd, evaluations=evaluations,
                   message=str(opt.message))


def _without_profile(scenario: Scenario) -> Scenario:
    """The scenario's own patient: a profile acts through the prior, not twice."""
    return replace(scenario, profile=None)
