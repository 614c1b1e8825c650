"""The counterfactual of one recorded case: what it would have used under the rule, with intervals.

:func:`review_case` fits the patient to the record (:func:`circlesim.cases.fit.fit_case`; the
population prior where the record is too thin to fit), runs the case for the fitted patient
(:func:`circlesim.department.arms.run_arms`) and repeats the two held runs for patients drawn
from the fit's Laplace approximation, so that every saving comes as a 5–95 % interval from the
fitted patient's uncertainty. The saving of a quantity is what the course held at the
recorded flows uses minus what the same course held under the rule uses.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from circlesim.base.validation import InputError, Interval, check_number
from circlesim.cases.fit import FitError, fit_case, fit_parameters
from circlesim.cases.priors import prior_for
from circlesim.cases.record import CaseRecord
from circlesim.department.arms import Arms, run_arms
from circlesim.department.course import EndTidalCourse, end_tidal_course, recorded_flows, rule_flows
from circlesim.department.rule import FlowRule
from circlesim.department.usage import USAGE_FIELDS, Usage
from circlesim.domain.costs import Prices

__all__ = ["FLOW_TOLERANCE_L_MIN", "CaseReview", "follows_rule", "review_case"]

#: Recorded flows within this of the rule's count as following it (half a flowmeter step).
FLOW_TOLERANCE_L_MIN = 0.05
#: Share of drawn patients with a risk at or above which a case is flagged.
RISK_SHARE_FLAG = 0.1


@dataclass(frozen=True, eq=False)
class CaseReview:
    """One case under the rule.

    Attributes
    ----------
    name, agent : str
    path : Path or None
    basis : str
        "fitted" or "prior".
    basis_note : str
        What the fit said (or why the prior was used).
    duration_min : float, min
    recorded, held, rule : Usage
        The record's own settings; the measured course held at the recorded flows; the same
        course held under the rule — all for the fitted patient.
    saving : dict of str to float or None
        ``held − rule`` of each of :data:`~circlesim.department.usage.USAGE_FIELDS`.
    saving_low, saving_high : dict of str to float or None
        5 % and 95 % of the saving over the drawn patients (equal to ``saving`` with no draws).
    saving_draws : dict of str to ndarray, shape (D,)
        The saving for each drawn patient (NaN where a quantity has no value).
    risk_share : float, fraction
        Share of drawn patients for whom FIO2 fell below the threshold or the bag ran dry under
        the rule.
    follows_rule : bool
        Whether the recorded flows already follow the rule (within 0.05 L/min).
    arms : Arms
        The fitted patient's runs (hold quality, responses).
    maintenance_percent : float, vol%
        The case's maintenance end-tidal level.
    draws : int
    provenance : str
        The record's provenance ("invented" for made-up records).
    """

    name: str
    agent: str
    path: Path | None
    basis: str
    basis_note: str
    duration_min: float
    recorded: Usage
    held: Usage
    rule: Usage
    saving: dict[str, float | None]
    saving_low: dict[str, float | None]
    saving_high: dict[str, float | None]
    saving_draws: dict[str, np.ndarray]
    risk_share: float
    follows_rule: bool
    arms: Arms
    maintenance_percent: float
    draws: int
    provenance: str = ""

    @property
    def fio2_risk(self) -> bool:
        """FIO2 fell below the rule's threshold for the fitted patient."""
        return self.rule.minutes_below_fio2 > 0.0

    @property
    def bag_risk(self) -> bool:
        """The bag ran dry under the rule for the fitted patient."""
        return self.rule.bag_empty

    @property
    def flagged(self) -> bool:
        """The rule would have risked low FIO2 or a dry bag for this case (for the fitted
        patient, or for at least 10 % of the drawn patients)."""
        return self.fio2_risk or self.bag_risk or self.risk_share >= RISK_SHARE_FLAG

    def risks(self) -> str:
        """The risks in words ("" when none)."""
        parts = []
        if self.fio2_risk:
            parts.append(f"FIO2 down to {self.rule.lowest_fio2:.2f}, "
                         f"{self.rule.minutes_below_fio2:.1f} min below the threshold")
        if self.bag_risk:
            parts.append("the bag runs dry")
        if not parts and self.risk_share >= RISK_SHARE_FLAG:
            parts.append(f"low FIO2 or a dry bag for {100 * self.risk_share:.0f} % of "
                         "plausible patients")
        return "; ".join(parts)


def follows_rule(record: CaseRecord, rule: FlowRule, course: EndTidalCourse) -> bool:
    """Whether the record's flows equal the rule's at every minute (within 0.05 L/min)."""
    recorded, ruled = recorded_flows(record), rule_flows(rule, course)
    for t in np.arange(0.0, record.plan.duration_min, 0.5):
        a = [f for f in recorded if f.time_min <= t + 1e-9][-1]
        b = [f for f in ruled if f.time_min <= t + 1e-9][-1]
        if max(abs(a.o2_l_min - b.o2_l_min), abs(a.air_l_min - b.air_l_min),
               abs(a.n2o_l_min - b.n2o_l_min)) > FLOW_TOLERANCE_L_MIN + 1e-9:
            return False
    return True


def _difference(a: Usage, b: Usage) -> dict[str, float | None]:
    out = {}
    for key in USAGE_FIELDS:
        x, y = getattr(a, key), getattr(b, key)
        out[key] = None if x is None or y is None else x - y
    return out


def _patient_basis(record: CaseRecord):
    """(theta, covariance, prior, basis, note) of the record's patient."""
    where = str(record.path or record.name)
    try:
        fit = fit_case(record)
    except (InputError, FitError) as exc:
        prior = prior_for(fit_parameters(record), record.scenario.profile)
        note = f"population prior used: {exc}".replace(f"{where}: ", "")
        return prior.mean_log, np.diag(prior.sd_log ** 2), prior, "prior", note
    identified = [e.name for e in fit.estimates if e.identified]
    note = (f"fitted to {record.count()} measured values; identified: "
            f"{', '.join(identified) or 'none'}; residuals {fit.noise_scale:.2f} × the "
            "monitor's noise")
    return fit.theta, fit.covariance, fit.prior, "fitted", note


def review_case(record: CaseRecord, rule: FlowRule, *, prices: Prices | None = None,
                draws: int = 20, seed: int = 0, every_min: float = 5.0,
                window_min: float = 5.0, keep_results: bool = False) -> CaseReview:
    """Predict ``record`` under ``rule``, holding its measured end-tidal course.

    Parameters
    ----------
    record : CaseRecord
        Must measure end-tidal agent.
    rule : FlowRule
    prices : Prices, optional
        Prices for the record's agent (default: the record's own ``[prices]``, if any).
    draws : int, 0–500
        Patients drawn from the fit's uncertainty for the intervals (0: none).
    seed : int
        Seed of the draws.
    every_min : float, min, 1–30
        Spacing of the end-tidal targets.
    window_min : float, min, 0–30
        Running-median window that smooths the measured course.
    keep_results : bool
        Keep the fitted patient's held and rule runs (``review.arms.rule_result``).

    Returns
    -------
    CaseReview

    Raises
    ------
    InputError
        If the record cannot be reviewed (no end-tidal agent, an impossible plan).
    """
    check_number("review_case", "draws", draws, Interval(0, 500))
    prices = record.scenario.prices if prices is None else prices
    course = end_tidal_course(record, window_min=window_min)
    theta, cov, prior, basis, note = _patient_basis(record)
    sc = replace(record.scenario, profile=None)

    def patient_of(t: np.ndarray):
        return prior.factors(t).apply(sc.patient, sc.circuit)

    patient, circuit = patient_of(theta)
    arms = run_arms(record, rule, course, patient, circuit, prices, every_min=every_min,
                    keep_results=keep_results)
    saving = _difference(arms.held, arms.rule)
    rng = np.random.default_rng(seed)
    bounds = np.array(prior.bounds(sc.patient))
    samples = rng.multivariate_normal(theta, cov, size=draws, method="eigh") if draws else []
    per_draw: dict[str, list[float]] = {k: [] for k in USAGE_FIELDS}
    risky = 0
    for t in samples:
        p, c = patient_of(np.clip(t, bounds[:, 0], bounds[:, 1]))
        drawn = run_arms(record, rule, course, p, c, prices, every_min=every_min,
                         with_recorded=False)
        risky += drawn.rule.minutes_below_fio2 > 0.0 or drawn.rule.bag_empty
        for k, v in _difference(drawn.held, drawn.rule).items():
            per_draw[k].append(math.nan if v is None else v)
    arrays = {k: np.array(v, dtype=float) for k, v in per_draw.items()}
    low, high = {}, {}
    for k, v in saving.items():
        values = arrays[k]
        if v is None or values.size == 0 or not np.isfinite(values).all():
            low[k] = high[k] = v
        else:
            low[k] = float(min(np.percentile(values, 5.0), v))
            high[k] = float(max(np.percentile(values, 95.0), v))
    return CaseReview(
        name=record.name, agent=record.agent, path=record.path, basis=basis, basis_note=note,
        duration_min=record.plan.duration_min, recorded=arms.recorded, held=arms.held,
        rule=arms.rule, saving=saving, saving_low=low, saving_high=high,
        saving_draws=arrays, risk_share=risky / draws if draws else 0.0,
        follows_rule=follows_rule(record, rule, course), arms=arms,
        maintenance_percent=course.maintenance_percent, draws=draws,
        provenance=record.provenance)
