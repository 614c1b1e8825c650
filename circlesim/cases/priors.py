"""Priors of a case fit and the monitor's noise, each with its source.

The fitted parameters are the natural logarithms of the factors of
:class:`circlesim.domain.physiology.Factors` (and of the leak in mL/min). Their priors are the
between-patient distributions the virtual-patient module draws from
(:mod:`circlesim.population.virtual_patients`), so a fit and a population agree on what is
plausible. A cohort profile (:class:`~circlesim.domain.physiology.CohortProfile`) replaces the
prior's centre and spread with the cohort's.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from circlesim.base.validation import InputError
from circlesim.domain.patient import Patient
from circlesim.domain.physiology import FACTOR_NAMES, FACTOR_RANGE, CohortProfile, Factors
from circlesim.population.distributions import LogNormal, Normal
from circlesim.population.virtual_patients import (
    DEFAULT_CARDIAC_OUTPUT_FACTOR,
    DEFAULT_FRC_FACTOR,
    DEFAULT_PACO2,
    DEFAULT_SOLUBILITY_SCALE,
    DEFAULT_VO2_FACTOR,
)

__all__ = ["LEAK_PRIOR", "NOISE", "PARAMETERS", "Prior", "noise_sd", "prior_for"]

_INSIDE = 1e-6

#: Every parameter a fit can estimate, in vector order.
PARAMETERS = (*FACTOR_NAMES, "leak_ml_min")

#: Leak prior: log-normal, median 20 mL/min, SD of log 0.8, so 95 % below about 75 mL/min
#: (assumption: a workstation that passed its leak test loses well under 150 mL/min at test
#: pressure — common practice — and less at working pressure).
LEAK_PRIOR = (math.log(20.0), 0.8, "assumption: median 20 mL/min, log SD 0.8 (leak tests pass "
                                   "below about 150 mL/min at test pressure; common practice)")

#: Monitor noise (SD) as (absolute vol%, fraction of the reading) per gas: assumption, about
#: half the accuracy limits a multigas monitor must meet (ISO 80601-2-55: halogenated agents
#: ±(0.15 vol% + 15 %), O2 ±(2.5 vol% + 2.5 %), N2O ±(2 vol% + 8 %), CO2 ±(0.43 vol% + 8 %);
#: from memory).
NOISE = {"agent": (0.08, 0.05), "oxygen": (1.0, 0.02), "nitrous_oxide": (1.0, 0.04),
         "carbon_dioxide": (0.2, 0.04), "nitrogen": (1.0, 0.05)}


def _log_sd(dist) -> tuple[float, float, str]:
    if isinstance(dist, LogNormal):
        return math.log(dist.median_value), math.sqrt(math.log1p(dist.cv ** 2)), dist.source
    raise InputError(f"a prior must be log-normal; got {type(dist).__name__}.")


def _ventilation(dist: Normal) -> tuple[float, float, str]:
    # alveolar ventilation ∝ 1 / PaCO2 (alveolar ventilation equation): factor = 5.3 / PaCO2
    return 0.0, dist.sd / dist.mean, dist.source + " (alveolar ventilation ∝ 1/PaCO2)"


_DEFAULT = {
    "cardiac_output": _log_sd(DEFAULT_CARDIAC_OUTPUT_FACTOR),
    "alveolar_ventilation": _ventilation(DEFAULT_PACO2),
    "vo2": _log_sd(DEFAULT_VO2_FACTOR),
    "frc": _log_sd(DEFAULT_FRC_FACTOR),
    "solubility": _log_sd(DEFAULT_SOLUBILITY_SCALE),
}


@dataclass(frozen=True)
class Prior:
    """Independent normal priors on the log parameters.

    Attributes
    ----------
    names : tuple of str
    mean_log, sd_log : ndarray, shape (P,)
    sources : tuple of str
    """

    names: tuple[str, ...]
    mean_log: np.ndarray
    sd_log: np.ndarray
    sources: tuple[str, ...]

    def factors(self, theta: np.ndarray) -> Factors:
        """The :class:`Factors` of a log-parameter vector (leak in mL/min)."""
        values = {n: float(math.exp(v)) for n, v in zip(self.names, theta, strict=True)}
        return Factors(**values)

    def bounds(self, patient: Patient | None = None) -> list[tuple[float, float]]:
        """Bounds of each log parameter: the factor's allowed range, narrowed to what keeps
        ``patient``'s values allowed (leak 0.1–5000 mL/min)."""
        limits = FACTOR_RANGE if patient is None else Factors.limits_for(patient)
        out = []
        for name in self.names:
            lo, hi = (0.1, 5000.0) if name == "leak_ml_min" else limits[name]
            # a hair inside, so exp(log(x)) never rounds past the allowed range
            out.append((math.log(lo) + _INSIDE, math.log(hi) - _INSIDE))
        return out


def prior_for(names: tuple[str, ...] = PARAMETERS,
              profile: CohortProfile | None = None) -> Prior:
    """The prior of a fit of ``names``: the population's, or a cohort profile's.

    Raises
    ------
    InputError
        For an unknown parameter name.
    """
    for n in names:
        if n not in PARAMETERS:
            raise InputError(f"unknown fit parameter {n!r}; allowed: {', '.join(PARAMETERS)}.")
    means, sds, sources = [], [], []
    for n in names:
        mean, sd, source = LEAK_PRIOR if n == "leak_ml_min" else _DEFAULT[n]
        if profile is not None:
            median = getattr(profile.factors, n)
            if median is not None and median > 0:
                mean = math.log(median)
            if n in profile.spread_log:
                sd = max(profile.spread_log[n], 1e-3)
            source = f"cohort profile '{profile.name}'"
        means.append(mean)
        sds.append(sd)
        sources.append(source)
    return Prior(tuple(names), np.array(means), np.array(sds), tuple(sources))


def noise_sd(gas: str, values: np.ndarray) -> np.ndarray:
    """Monitor noise SD (vol%) of readings ``values`` (vol%) of ``gas`` (an agent: "agent")."""
    absolute, relative = NOISE.get(gas, NOISE["agent"])
    return absolute + relative * np.abs(np.asarray(values, dtype=float))

