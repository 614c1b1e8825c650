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
    [prices]                    # optional user-set prices (circlesim.costs.Prices)

Every section but ``[plan]`` may be left out (defaults apply). Unknown sections or keys are
errors that name the key, so a typo never passes silently.
"""

from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

import tomli_w

from .costs import Prices
from .equipment import Absorber, Circuit, Vaporizer
from .files import write_text_atomic
from .patient import Patient
from .plan import Plan
from .validation import InputError, Interval, check_keys, check_number

__all__ = ["ReportSettings", "Scenario", "load_plan", "load_scenario", "plan_to_toml",
           "save_plan", "save_scenario", "scenario_from_toml"]


@dataclass(frozen=True)
class ReportSettings:
    """What the summary reports.

    Parameters
    ----------
    fio2_threshold : float, 0.21–1
        Lowest acceptable inspired O2 fraction.
    target_end_tidal_mac : float, MAC, 0.1–3
        End-tidal agent target, as a multiple of the age-adjusted MAC, for time to target.
    report_times_min : tuple of float, min
        Times at which the summary lists end-tidal agent and FIO2.
    """

    fio2_threshold: float = 0.30
    target_end_tidal_mac: float = 1.0
    report_times_min: tuple[float, ...] = (5.0, 10.0, 30.0, 60.0)

    def __post_init__(self) -> None:
        check_number("report", "fio2_threshold", self.fio2_threshold, Interval(0.21, 1.0))
        check_number("report", "target_end_tidal_mac", self.target_end_tidal_mac,
                     Interval(0.1, 3.0, "MAC"))
        times = tuple(self.report_times_min)
        for i, t in enumerate(times):
            check_number("report", f"report_times_min[{i}]", t, Interval(0.0, 1440.0, "min"))
        object.__setattr__(self, "report_times_min", tuple(float(t) for t in times))


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

    def simulate(self, **kwargs: Any):
        """Run :func:`circlesim.simulate` on this scenario."""
        from .simulate import simulate

        kwargs.setdefault("fio2_threshold", self.report.fio2_threshold)
        return simulate(self.patient, self.circuit, self.plan, vaporizer=self.vaporizer,
                        absorber=self.absorber, **kwargs)

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


def scenario_from_toml(text: str, where: str = "scenario") -> Scenario:
    """Parse a scenario from TOML text.

    Raises
    ------
    InputError
        For malformed TOML, a missing ``[plan]``, unknown sections or keys, or invalid values.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{where} is not valid TOML: {exc}.") from None
    allowed = set(_SECTIONS) | {"plan", "title", "question"}
    unknown = sorted(set(data) - allowed)
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
    return Scenario(plan=plan, title=data.get("title", ""), question=data.get("question", ""),
                    **parts)


def load_scenario(path: str | os.PathLike) -> Scenario:
    """Read a scenario TOML file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"scenario file {path} does not exist.") from None
    except UnicodeDecodeError:
        raise InputError(f"scenario file {path} is not UTF-8 text.") from None
    return scenario_from_toml(text, str(path))


def save_scenario(scenario: Scenario, path: str | os.PathLike, *,
                  overwrite: bool = False) -> Path:
    """Write a scenario as TOML, atomically; an existing file is kept unless ``overwrite``."""
    return write_text_atomic(path, tomli_w.dumps(scenario.to_dict()), overwrite=overwrite)


def plan_to_toml(plan: Plan) -> str:
    """A plan as TOML text (a ``[plan]`` table with ``[[plan.steps]]``)."""
    return tomli_w.dumps({"plan": plan.to_dict()})


def load_plan(path: str | os.PathLike) -> Plan:
    """Read the plan from a TOML file (a scenario file or a plan-only file)."""
    return load_scenario(path).plan


def save_plan(plan: Plan, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write a plan as TOML, atomically; an existing file is kept unless ``overwrite``."""
    return write_text_atomic(path, plan_to_toml(plan), overwrite=overwrite)
