"""Adjustments of a patient's physiology: factors on the default rules, cohort profiles, and the
uncertainty a fit leaves.

Every patient default comes from a published rule (:data:`circlesim.domain.patient.RULES`).
Measured cases (:mod:`circlesim.cases`) estimate how far one patient, or a cohort, sits from
those rules. This module holds the vocabulary they share:

* :class:`Factors` — multipliers on the default cardiac output, alveolar ventilation, O2
  consumption, FRC and blood/gas solubility, and the circuit's leak in mL/min;
* :class:`CohortProfile` — a named set of population-level factors and their spread, written
  by a calibration over many cases and chosen per scenario (opt-in: without one, the textbook
  model runs unchanged);
* :class:`FitUncertainty` — the covariance of a fitted patient's parameters on the log scale,
  kept with a fitted scenario so that predictions can show a band.

The factors act on the same inputs as the virtual-patient factors of
:mod:`circlesim.population.virtual_patients`; alveolar ventilation acts through the PaCO2 the
default ventilation aims at (the alveolar ventilation equation makes ventilation inversely
proportional to it).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

import numpy as np

from circlesim.base.files import read_toml
from circlesim.base.validation import (
    InputError,
    Interval,
    bounded,
    check_fields,
    check_keys,
    check_number,
    optional_bounded,
)
from circlesim.domain.equipment import Circuit
from circlesim.domain.patient import Patient

__all__ = ["FACTOR_NAMES", "FACTOR_RANGE", "CohortProfile", "Factors", "FitUncertainty",
           "load_profile", "profile_from_dict"]

#: The physiological factors, in the order used for parameter vectors.
FACTOR_NAMES = ("cardiac_output", "alveolar_ventilation", "vo2", "frc", "solubility")


@dataclass(frozen=True)
class Factors:
    """Multipliers on a patient's defaults, and the circuit's leak.

    Parameters
    ----------
    cardiac_output : float, 0.3–3
        × the patient's cardiac output.
    alveolar_ventilation : float, 0.55–1.75
        × the default alveolar ventilation (the PaCO2 target is divided by it; ignored where a
        plan sets tidal volume and rate explicitly).
    vo2 : float, 0.4–2.5
        × the patient's O2 consumption (CO2 production follows, RQ unchanged).
    frc : float, 0.3–3
        × the patient's FRC.
    solubility : float, 0.5–2
        × every blood/gas partition coefficient.
    leak_ml_min : float or None, mL/min, 0–5000
        The circuit's leak; None keeps the circuit's own.
    """

    cardiac_output: float = field(default=1.0, metadata=bounded(0.3, 3.0))
    alveolar_ventilation: float = field(default=1.0, metadata=bounded(0.55, 1.75))
    vo2: float = field(default=1.0, metadata=bounded(0.4, 2.5))
    frc: float = field(default=1.0, metadata=bounded(0.3, 3.0))
    solubility: float = field(default=1.0, metadata=bounded(0.5, 2.0))
    leak_ml_min: float | None = field(default=None,
                                      metadata=optional_bounded(0.0, 5000.0, "mL/min"))

    def __post_init__(self) -> None:
        check_fields(self)

    def apply(self, patient: Patient, circuit: Circuit) -> tuple[Patient, Circuit]:
        """``patient`` and ``circuit`` with these factors applied to their current values.

        Raises
        ------
        InputError
            If a factor takes a patient value outside its allowed range (named).
        """
        adjusted = replace(
            patient,
            cardiac_output_l_min=patient.cardiac_output * self.cardiac_output,
            vo2_ml_min=patient.vo2 * self.vo2,
            vco2_ml_min=patient.vco2 * self.vo2,
            frc_l=patient.frc * self.frc,
            paco2_target_kpa=patient.paco2_target_kpa / self.alveolar_ventilation,
            solubility_scale=patient.solubility_scale * self.solubility)
        if self.leak_ml_min is not None:
            circuit = replace(circuit, leak_ml_min=self.leak_ml_min)
        return adjusted, circuit

    @staticmethod
    def limits_for(patient: Patient) -> dict[str, tuple[float, float]]:
        """The range of each factor that keeps ``patient``'s values within what the patient
        allows (and within the factor's own range)."""
        def allowed(name: str) -> tuple[float, float]:
            c = next(f for f in fields(Patient) if f.name == name).metadata["constraint"]
            return c.low, c.high

        co, vo2, vco2, frc = (patient.cardiac_output, patient.vo2, patient.vco2, patient.frc)
        spans = {
            "cardiac_output": [x / co for x in allowed("cardiac_output_l_min")],
            "vo2": [max(allowed("vo2_ml_min")[0] / vo2, allowed("vco2_ml_min")[0] / vco2),
                    min(allowed("vo2_ml_min")[1] / vo2, allowed("vco2_ml_min")[1] / vco2)],
            "frc": [x / frc for x in allowed("frc_l")],
            "alveolar_ventilation": [patient.paco2_target_kpa / x
                                     for x in reversed(allowed("paco2_target_kpa"))],
            "solubility": [x / patient.solubility_scale for x in allowed("solubility_scale")],
        }
        return {name: (max(FACTOR_RANGE[name][0], lo), min(FACTOR_RANGE[name][1], hi))
                for name, (lo, hi) in spans.items()}

    def to_dict(self) -> dict[str, float]:
        """Plain data (the leak left out when None)."""
        return {f.name: getattr(self, f.name) for f in fields(self)
                if getattr(self, f.name) is not None}


@dataclass(frozen=True)
class CohortProfile:
    """Population-level factors calibrated on a set of measured cases.

    Parameters
    ----------
    name : str
        Shown on every output that uses the profile.
    factors : Factors
        The cohort's typical (median) factors.
    spread_log : dict of str to float
        Between-patient standard deviation of each factor on the natural-log scale (keys of
        :data:`FACTOR_NAMES`, and "leak_ml_min").
    description : str
    calibrated_on : tuple of str
        The case records the profile was calibrated on.
    """

    name: str
    factors: Factors = field(default_factory=Factors)
    spread_log: dict[str, float] = field(default_factory=dict, hash=False)
    description: str = ""
    calibrated_on: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            raise InputError(f"CohortProfile.name must be non-empty text; got {self.name!r}.")
        allowed = (*FACTOR_NAMES, "leak_ml_min")
        check_keys("CohortProfile.spread_log", self.spread_log, allowed)
        for key, value in self.spread_log.items():
            check_number("CohortProfile.spread_log", key, value, Interval(0.0, 2.0))

    def apply(self, patient: Patient, circuit: Circuit) -> tuple[Patient, Circuit]:
        """``patient`` and ``circuit`` with the profile's typical factors applied."""
        return self.factors.apply(patient, circuit)

    def label(self) -> str:
        """One line for outputs: which profile, and that it is opt-in."""
        n = len(self.calibrated_on)
        return (f"parameter profile '{self.name}' (calibrated on {n} case"
                f"{'' if n == 1 else 's'}; opt-in, not the textbook default)")

    def to_dict(self) -> dict[str, Any]:
        """The TOML layout read by :func:`load_profile`."""
        out: dict[str, Any] = {"name": self.name}
        if self.description:
            out["description"] = self.description
        if self.calibrated_on:
            out["calibrated_on"] = list(self.calibrated_on)
        table: dict[str, Any] = {}
        for key, value in self.factors.to_dict().items():
            entry = {"median": float(value)}
            if key in self.spread_log:
                entry["spread_log"] = float(self.spread_log[key])
            table[key] = entry
        out["factors"] = table
        return out


def profile_from_dict(data: dict[str, Any], where: str = "profile") -> CohortProfile:
    """A :class:`CohortProfile` from the TOML layout (see :meth:`CohortProfile.to_dict`).

    Raises
    ------
    InputError
        Naming ``where`` and the key for unknown keys or invalid values.
    """
    check_keys(where, data, ("name", "description", "calibrated_on", "factors"))
    table = data.get("factors", {})
    if not isinstance(table, dict):
        raise InputError(f"{where}: [factors] must be a table; got {table!r}.")
    check_keys(f"{where}: [factors]", table, (*FACTOR_NAMES, "leak_ml_min"))
    medians, spread = {}, {}
    for key, entry in table.items():
        if not isinstance(entry, dict):
            raise InputError(f"{where}: factors.{key} must be a table with median and "
                             f"spread_log; got {entry!r}.")
        check_keys(f"{where}: factors.{key}", entry, ("median", "spread_log"))
        if "median" in entry:
            medians[key] = entry["median"]
        if "spread_log" in entry:
            spread[key] = entry["spread_log"]
    try:
        return CohortProfile(name=data.get("name", ""), factors=Factors(**medians),
                             spread_log=spread, description=data.get("description", ""),
                             calibrated_on=tuple(data.get("calibrated_on", ())))
    except (InputError, TypeError) as exc:
        raise InputError(f"{where}: {exc}") from None


def load_profile(path: str | os.PathLike) -> CohortProfile:
    """Read a cohort profile TOML file.

    Raises
    ------
    InputError
        If the file is missing, is not TOML, or holds unknown keys or invalid values.
    """
    path = Path(path)
    data = read_toml(path, "profile file")
    return profile_from_dict(data, str(path))


@dataclass(frozen=True, eq=False)
class FitUncertainty:
    """How sure a fit is of a patient's parameters: a Gaussian on the log scale.

    The fitted patient itself is the centre; a draw multiplies its values by
    ``exp(z)`` with ``z ~ N(0, covariance_log)``.

    Parameters
    ----------
    names : tuple of str
        Parameters, from :data:`FACTOR_NAMES` and "leak_ml_min".
    covariance_log : ndarray, shape (P, P)
        Covariance of the natural-log parameters.
    source : str
        The case record the fit came from, and how far it reached (e.g. "first 30 min").
    not_identified : tuple of str
        Parameters the data could not identify (their spread is the prior's).
    record : str
        Path of the case record's TOML file, relative to the scenario file that holds this
        fit ("" if unknown), so that a front end can show the measured points.
    """

    names: tuple[str, ...]
    covariance_log: np.ndarray
    source: str = ""
    not_identified: tuple[str, ...] = ()
    record: str = ""

    def __post_init__(self) -> None:
        allowed = (*FACTOR_NAMES, "leak_ml_min")
        for name in self.names:
            if name not in allowed:
                raise InputError(f"FitUncertainty.names: unknown parameter {name!r}; allowed: "
                                 f"{', '.join(allowed)}.")
        cov = np.asarray(self.covariance_log, dtype=float)
        p = len(self.names)
        if cov.shape != (p, p) or not np.all(np.isfinite(cov)):
            raise InputError(f"FitUncertainty.covariance_log must be a finite {p}×{p} matrix; "
                             f"got shape {cov.shape}.")
        if p and np.min(np.linalg.eigvalsh(0.5 * (cov + cov.T))) < -1e-12:
            raise InputError("FitUncertainty.covariance_log must be positive semi-definite.")
        object.__setattr__(self, "covariance_log", 0.5 * (cov + cov.T))

    def sample_factors(self, n: int, seed: int | None = None,
                       base_leak_ml_min: float = 0.0) -> list[Factors]:
        """``n`` draws of factors around the fitted patient (same seed, same draws)."""
        rng = np.random.default_rng(seed)
        z = rng.multivariate_normal(np.zeros(len(self.names)), self.covariance_log, size=n,
                                    method="eigh")
        out = []
        for row in z:
            values: dict[str, float] = {}
            for name, dz in zip(self.names, row, strict=True):
                if name == "leak_ml_min":
                    values[name] = base_leak_ml_min * math.exp(dz)
                else:
                    lo, hi = FACTOR_RANGE[name]
                    values[name] = min(max(math.exp(dz), lo), hi)
            out.append(Factors(**values))
        return out

    def to_dict(self) -> dict[str, Any]:
        """The TOML layout of a scenario's ``[fit]`` section."""
        return {"names": list(self.names),
                "covariance_log": [[float(v) for v in row] for row in self.covariance_log],
                "source": self.source, "not_identified": list(self.not_identified),
                "record": self.record}

    @classmethod
    def from_dict(cls, data: dict[str, Any], where: str = "fit") -> FitUncertainty:
        """Read the ``[fit]`` layout (see :meth:`to_dict`)."""
        check_keys(where, data, ("names", "covariance_log", "source", "not_identified",
                                 "record"))
        try:
            return cls(names=tuple(data.get("names", ())),
                       covariance_log=np.array(data.get("covariance_log", []), dtype=float)
                       .reshape(len(data.get("names", ())), -1),
                       source=str(data.get("source", "")),
                       not_identified=tuple(data.get("not_identified", ())),
                       record=str(data.get("record", "")))
        except (ValueError, TypeError) as exc:
            raise InputError(f"{where}: {exc}") from None


FACTOR_RANGE = {f.name: (f.metadata["constraint"].low, f.metadata["constraint"].high)
                 for f in fields(Factors) if "constraint" in f.metadata}
