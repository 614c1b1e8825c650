"""A scenario: patient, breathing system, plan and report settings together, in TOML.

Layout of a scenario file::

    title = "..."
    question = "..."            # what the scenario answers
    [patient]                   # Patient fields
    [circuit]                   # Circuit fields
    [absorber]                  # Absorber fields
    [vaporizer]                 # Vaporizer fields
    [plan]                      # name, description, duration_min
    [[plan.steps]]              # Step fields, one table per step
    [report]                    # fio2_threshold, target_end_tidal_mac, report_times_min
    [prices]                    # optional user-set prices (circlesim.domain.costs.Prices)
    profile = "cohort.toml"     # optional cohort profile (a file, relative to this one) ...
    [profile]                   # ... or the profile itself (circlesim.domain.physiology)
    [fit]                       # optional: a fitted patient's uncertainty (FitUncertainty)

A scenario file must have ``[patient]`` and ``[plan]``; other sections may be left out
(defaults apply). Unknown sections or keys are errors that name the key, so a typo never
passes silently. A cohort profile is opt-in: without one the textbook model runs unchanged.
"""

from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

import tomli_w

from circlesim.base.files import write_text_atomic
from circlesim.base.validation import InputError, Interval, check_keys, check_number
from circlesim.domain.costs import Prices
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.physiology import (
    CohortProfile,
    FitUncertainty,
    load_profile,
    profile_from_dict,
)
from circlesim.domain.plan import Plan

__all__ = ["ReportSettings", "Scenario", "load_plan", "load_scenario", "plan_to_toml",
           "save_plan", "save_scenario", "scenario_from_dict", "scenario_from_toml"]


@dataclass(frozen=True)
class ReportSettings:
    """What the summary reports.

    Parameters
    ----------
    fio2_threshold : float, 0.21–1
        Lowest acceptable inspired O2 fraction.
    target_end_tidal_mac : float, MAC, 0.1–3
        End-tidal agent target, as a multiple of the age-adjusted MAC, for time to target.
    report_times_min : tuple of float or None, min, 0–1440
        Times at which the summary lists end-tidal agent and FIO2; each must lie within the
        plan (checked by :class:`Scenario`). None: 5, 10, 30 and 60 min, those within the plan.
    """

    fio2_threshold: float = 0.30
    target_end_tidal_mac: float = 1.0
    report_times_min: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        check_number("report", "fio2_threshold", self.fio2_threshold, Interval(0.21, 1.0))
        check_number("report", "target_end_tidal_mac", self.target_end_tidal_mac,
                     Interval(0.1, 3.0, "MAC"))
        if self.report_times_min is None:
            return
        times = tuple(self.report_times_min)
        for i, t in enumerate(times):
            check_number("report", f"report_times_min[{i}]", t, Interval(0.0, 1440.0, "min"))
        object.__setattr__(self, "report_times_min", tuple(float(t) for t in times))

    def within(self, duration_min: float) -> ReportSettings:
        """These settings for a plan of ``duration_min`` min: report times after its end are
        left out (for a plan whose length the user has just changed on purpose)."""
        if self.report_times_min is None:
            return self
        kept = tuple(t for t in self.report_times_min if t <= duration_min)
        return replace(self, report_times_min=kept or None)


@dataclass(frozen=True)
class Scenario:
    """Everything needed to run and report one plan."""

    plan: Plan
    patient: Patient = field(default_factory=Patient)
    circuit: Circuit = field(default_factory=Circuit)
    absorber: Absorber = field(default_factory=Absorber)
    vaporizer: Vaporizer = field(default_factory=Vaporizer)
    report: ReportSettings = field(default_factory=ReportSettings)
    title: str = ""
    question: str = ""
    prices: Prices | None = None
    profile: CohortProfile | None = None
    fit: FitUncertainty | None = None

    @property
    def model_patient(self) -> Patient:
        """The patient the model runs: as entered, with the cohort profile's factors if the
        scenario chose one."""
        return self.profile.apply(self.patient, self.circuit)[0] if self.profile else self.patient

    @property
    def model_circuit(self) -> Circuit:
        """The circuit the model runs (a profile may set its leak)."""
        return self.profile.apply(self.patient, self.circuit)[1] if self.profile else self.circuit

    @property
    def model_description(self) -> str:
        """Which model a prediction for this scenario uses, for every output that shows one."""
        if self.fit is not None:
            return f"patient fitted to {self.fit.source or 'a measured case'}"
        if self.profile is not None:
            return self.profile.label()
        return "textbook default model"

    def simulate(self, **kwargs: Any):
        """Run :func:`circlesim.simulate` on this scenario (with its profile, if any)."""
        from circlesim.targets.predict import simulate

        kwargs.setdefault("fio2_threshold", self.report.fio2_threshold)
        return simulate(self.model_patient, self.model_circuit, self.plan,
                        vaporizer=self.vaporizer, absorber=self.absorber, **kwargs)

    def to_dict(self) -> dict:
        """Plain data in the TOML layout (defaults and unset values left out)."""
        out: dict[str, Any] = {}
        if self.title:
            out["title"] = self.title
        if self.question:
            out["question"] = self.question
        for name in ("patient", "circuit", "absorber", "vaporizer", "report"):
            obj = getattr(self, name)
            table = {}
            for f in fields(obj):
                value = getattr(obj, f.name)
                if value is None:
                    continue
                table[f.name] = list(value) if isinstance(value, tuple) else value
            out[name] = table
        if self.prices is not None:
            out["prices"] = {f.name: getattr(self.prices, f.name) for f in fields(self.prices)
                             if getattr(self.prices, f.name) not in (None, "")}
        if self.profile is not None:
            out["profile"] = self.profile.to_dict()
        if self.fit is not None:
            out["fit"] = self.fit.to_dict()
        out["plan"] = self.plan.to_dict()
        return out


_SECTIONS = {"patient": Patient, "circuit": Circuit, "absorber": Absorber,
             "vaporizer": Vaporizer, "report": ReportSettings, "prices": Prices}


def _build(kind: type, section: str, data: Any, where: str):
    if not isinstance(data, dict):
        raise InputError(f"{where}: [{section}] must be a table; got {data!r}.")
    check_keys(f"{where}: [{section}]", data, (f.name for f in fields(kind)))
    try:
        return kind(**data)
    except InputError as exc:
        raise InputError(f"{where}: [{section}] {exc}") from None
    except TypeError as exc:
        raise InputError(f"{where}: [{section}] {exc}") from None


def scenario_from_toml(text: str, where: str = "scenario", *,
                       require_patient: bool = False, folder: Path | None = None) -> Scenario:
    """Parse a scenario from TOML text.

    Parameters
    ----------
    text : str
        TOML.
    where : str
        Name of the file (or other origin) for error messages.
    require_patient : bool
        Refuse text without a ``[patient]`` section (scenario files, see
        :func:`load_scenario`); when False, a plan-only text gets the default adult.
    folder : Path, optional
        Folder that a ``profile = "file.toml"`` path is relative to (default: the current
        folder).

    Raises
    ------
    InputError
        For malformed TOML, a missing ``[plan]`` (or ``[patient]`` if required), unknown
        sections or keys, invalid values or report times after the end of the plan.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{where} is not valid TOML: {exc}.") from None
    return scenario_from_dict(data, where, require_patient=require_patient, folder=folder)


def scenario_from_dict(data: dict[str, Any], where: str = "scenario", *,
                       require_patient: bool = False, folder: Path | None = None,
                       extra_keys: tuple[str, ...] = ()) -> Scenario:
    """A scenario from the TOML layout already parsed into ``data``.

    ``extra_keys`` are top-level keys another reader handles (e.g. a case record's
    ``[record]``); they are ignored here. Other parameters and errors as
    :func:`scenario_from_toml`.
    """
    allowed = set(_SECTIONS) | {"plan", "title", "question", "profile", "fit"}
    unknown = sorted(set(data) - allowed - set(extra_keys))
    if unknown:
        raise InputError(f"{where}: unknown section or key {unknown[0]!r}; allowed: "
                         f"{', '.join(sorted(allowed))}.")
    if "plan" not in data:
        raise InputError(f"{where}: the [plan] section is missing (it needs duration_min and "
                         "at least one [[plan.steps]] table).")
    if not isinstance(data["plan"], dict):
        raise InputError(f"{where}: [plan] must be a table; got {data['plan']!r}.")
    try:
        plan = Plan.from_dict(data["plan"])
    except (InputError, TypeError) as exc:
        raise InputError(f"{where}: {exc}") from None
    parts = {name: _build(kind, name, data[name], where)
             for name, kind in _SECTIONS.items() if name in data}
    for key in ("title", "question"):
        if key in data and not isinstance(data[key], str):
            raise InputError(f"{where}: {key} must be text; got {data[key]!r}.")
    if require_patient and "patient" not in data:
        raise InputError(f"{where}: the [patient] section is missing; circlesim does not assume "
                         "a patient. Add [patient] with weight_kg, height_cm, age_years and "
                         "sex.")
    if "profile" in data:
        parts["profile"] = _profile(data["profile"], where, folder)
    if "fit" in data:
        if not isinstance(data["fit"], dict):
            raise InputError(f"{where}: [fit] must be a table; got {data['fit']!r}.")
        parts["fit"] = FitUncertainty.from_dict(data["fit"], f"{where}: [fit]")
    report = parts.get("report")
    for i, t in enumerate(report.report_times_min or () if report else ()):
        if t > plan.duration_min:
            raise InputError(f"{where}: report.report_times_min[{i}] = {t:g} min lies after the "
                             f"end of the plan; it must be from 0 to the plan's length, "
                             f"{plan.duration_min:g} min.")
    return Scenario(plan=plan, title=data.get("title", ""), question=data.get("question", ""),
                    **parts)


def _profile(value: Any, where: str, folder: Path | None) -> CohortProfile:
    if isinstance(value, str):
        path = Path(value)
        if not path.is_absolute():
            path = (folder or Path.cwd()) / path
        try:
            return load_profile(path)
        except InputError as exc:
            raise InputError(f"{where}: profile: {exc}") from None
    if isinstance(value, dict):
        return profile_from_dict(value, f"{where}: [profile]")
    raise InputError(f"{where}: profile must be a file name or a [profile] table; got "
                     f"{value!r}.")


def load_scenario(path: str | os.PathLike, *, require_patient: bool = True) -> Scenario:
    """Read a scenario TOML file.

    A scenario file must name its patient (a ``[patient]`` section): circlesim never runs a
    default adult in place of a patient the file forgot. ``require_patient=False`` reads
    plan-only files (:func:`load_plan`).

    Raises
    ------
    InputError
        If the path is missing, is a folder, cannot be read or is not UTF-8, and for every
        problem :func:`scenario_from_toml` finds.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(f"scenario file {path} is a folder; give the path of a scenario "
                         ".toml file.")
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"scenario file {path} does not exist.") from None
    except UnicodeDecodeError:
        raise InputError(f"scenario file {path} is not UTF-8 text.") from None
    except OSError as exc:
        raise InputError(f"scenario file {path} cannot be read: {exc.strerror or exc}.") from None
    return scenario_from_toml(text, str(path), require_patient=require_patient,
                              folder=path.parent)


def save_scenario(scenario: Scenario, path: str | os.PathLike, *,
                  overwrite: bool = False) -> Path:
    """Write a scenario as TOML, atomically; an existing file is kept unless ``overwrite``."""
    return write_text_atomic(path, tomli_w.dumps(scenario.to_dict()), overwrite=overwrite)


def plan_to_toml(plan: Plan) -> str:
    """A plan as TOML text (a ``[plan]`` table with ``[[plan.steps]]``)."""
    return tomli_w.dumps({"plan": plan.to_dict()})


def load_plan(path: str | os.PathLike) -> Plan:
    """Read the plan from a TOML file (a scenario file or a plan-only file)."""
    return load_scenario(path, require_patient=False).plan


def save_plan(plan: Plan, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write a plan as TOML, atomically; an existing file is kept unless ``overwrite``."""
    return write_text_atomic(path, plan_to_toml(plan), overwrite=overwrite)
