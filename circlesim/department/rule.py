"""A department's local flow rule, written as data (TOML) and checked before anything runs.

A rule is a list of fresh-gas steps — e.g. wash-in at 4 L/min until end-tidal agent reaches
80 % of its maintenance level, then 0.5 L/min — with an oxygen policy (fresh-gas O2 at or above
a stated fraction, an FIO2 threshold) and an optional response to warnings (raise the flow when
FIO2 or the bag warn). The keys are documented in ``docs/department-review.md``::

    name = "Minimal flow after wash-in"
    fio2_threshold = 0.30
    min_fresh_o2_fraction = 0.5

    [[steps]]
    o2_l_min = 2.0
    air_l_min = 2.0
    until_end_tidal_fraction = 0.8
    at_most_min = 15

    [[steps]]
    o2_l_min = 0.3
    air_l_min = 0.2

    [respond]
    on = ["fio2_low", "bag_empty"]
    raise_to_l_min = 1.0
    o2_fraction = 0.6

Unknown keys, impossible values (a negative flow, fresh gas with less O2 than air) and
contradictory steps (a middle step with no end, a last step with one, a "raise" to a lower
flow) are refused with the file, the key, the value and what is allowed.
"""

from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, field
from itertools import pairwise
from pathlib import Path
from typing import Any

from circlesim.base.validation import (
    InputError,
    bounded,
    check_fields,
    check_keys,
    optional_bounded,
)
from circlesim.domain.plan import AIR_O2_FRACTION, MAX_TOTAL_FGF_L_MIN, MIN_TOTAL_FGF_L_MIN

__all__ = ["RESPONSE_WARNINGS", "FlowRule", "RuleStep", "WarningResponse", "load_rule",
           "rule_from_dict"]

#: Warnings a rule may respond to (keys of :func:`circlesim.engine.alerts.default_rules`).
RESPONSE_WARNINGS = ("fio2_low", "bag_empty", "fgf_below_uptake")
_RULE_KEYS = ("name", "note", "fio2_threshold", "min_fresh_o2_fraction", "hold_max_fgf_l_min",
              "steps", "respond")
_STEP_KEYS = ("o2_l_min", "air_l_min", "n2o_l_min", "until_end_tidal_fraction", "for_min",
              "at_most_min", "note")
_RESPOND_KEYS = ("on", "raise_to_l_min", "o2_fraction", "after_min", "for_min")


def _fresh_o2_fraction(o2: float, air: float, n2o: float) -> float:
    return (o2 + AIR_O2_FRACTION * air) / (o2 + air + n2o)


@dataclass(frozen=True)
class RuleStep:
    """One stretch of the rule's fresh gas.

    Parameters
    ----------
    o2_l_min, air_l_min, n2o_l_min : float, L/min, 0–15
        Flowmeter settings of the step; their total must be 0.1–20 L/min.
    until_end_tidal_fraction : float or None, fraction, 0.05–1
        The step ends when the measured end-tidal agent first reaches this fraction of the
        case's maintenance level (the median of its measured end-tidal values at or above half
        the highest).
    for_min : float or None, min, above 0 and at most 240
        The step lasts this long (instead of ``until_end_tidal_fraction``).
    at_most_min : float or None, min, above 0 and at most 240
        With ``until_end_tidal_fraction``: the step ends after this long at the latest.
    note : str
        Free text.
    """

    o2_l_min: float = field(default=0.0, metadata=bounded(0.0, 15.0, "L/min"))
    air_l_min: float = field(default=0.0, metadata=bounded(0.0, 15.0, "L/min"))
    n2o_l_min: float = field(default=0.0, metadata=bounded(0.0, 15.0, "L/min"))
    until_end_tidal_fraction: float | None = field(
        default=None, metadata=optional_bounded(0.05, 1.0))
    for_min: float | None = field(
        default=None, metadata=optional_bounded(0.0, 240.0, "min", low_open=True))
    at_most_min: float | None = field(
        default=None, metadata=optional_bounded(0.0, 240.0, "min", low_open=True))
    note: str = ""

    def __post_init__(self) -> None:
        check_fields(self)
        total = self.total_l_min
        if not MIN_TOTAL_FGF_L_MIN <= total <= MAX_TOTAL_FGF_L_MIN:
            raise InputError(f"RuleStep total fresh gas flow (o2 + air + n2o) must be a number "
                             f"from {MIN_TOTAL_FGF_L_MIN:g} to {MAX_TOTAL_FGF_L_MIN:g} L/min; "
                             f"got {total:g}.")
        fraction = self.o2_fraction
        if fraction < AIR_O2_FRACTION - 1e-9:
            raise InputError(f"RuleStep fresh-gas O2 fraction must be at least air's "
                             f"({AIR_O2_FRACTION:g}); got {fraction:.3f} (o2 {self.o2_l_min:g}, "
                             f"air {self.air_l_min:g}, n2o {self.n2o_l_min:g} L/min).")
        if self.for_min is not None and self.until_end_tidal_fraction is not None:
            raise InputError("RuleStep.for_min and RuleStep.until_end_tidal_fraction "
                             f"contradict each other (got {self.for_min:g} min and "
                             f"{self.until_end_tidal_fraction:g}); give one way to end the "
                             "step.")
        if self.at_most_min is not None and self.until_end_tidal_fraction is None:
            raise InputError(f"RuleStep.at_most_min ({self.at_most_min:g} min) caps a step "
                             "that ends at an end-tidal fraction; it needs "
                             "until_end_tidal_fraction on the same step.")
        if not isinstance(self.note, str):
            raise InputError(f"RuleStep.note must be text; got {self.note!r}.")

    @property
    def total_l_min(self) -> float:
        """Total fresh gas flow at the flowmeters, L/min."""
        return self.o2_l_min + self.air_l_min + self.n2o_l_min

    @property
    def o2_fraction(self) -> float:
        """O2 fraction of the step's fresh gas."""
        return _fresh_o2_fraction(self.o2_l_min, self.air_l_min, self.n2o_l_min)

    @property
    def open_ended(self) -> bool:
        """Whether the step lasts to the end of the case."""
        return self.for_min is None and self.until_end_tidal_fraction is None

    def describe(self) -> str:
        """The step in words."""
        gases = [f"{v:g} L/min {k}" for k, v in (("O2", self.o2_l_min), ("air", self.air_l_min),
                                                 ("N2O", self.n2o_l_min)) if v > 0.0]
        text = ", ".join(gases) + f" (total {self.total_l_min:g} L/min)"
        if self.for_min is not None:
            return text + f" for {self.for_min:g} min"
        if self.until_end_tidal_fraction is not None:
            text += (f" until end-tidal agent reaches {100 * self.until_end_tidal_fraction:g} % "
                     "of its maintenance level")
            if self.at_most_min is not None:
                text += f" (at most {self.at_most_min:g} min)"
            return text
        return text + " to the end of the case"


@dataclass(frozen=True)
class WarningResponse:
    """What the rule does when a warning fires: raise the total fresh gas flow.

    Parameters
    ----------
    on : tuple of str
        Warnings that trigger the response, from :data:`RESPONSE_WARNINGS`.
    raise_to_l_min : float, L/min, 0.1–20
        Total fresh gas flow after the response.
    o2_fraction : float or None, fraction, 0.21–1
        O2 fraction of the raised flow (O2 and air); None keeps the step's fraction.
    after_min : float, min, 0–30
        Time from the warning to the raised flow (the person's response time).
    for_min : float or None, min, above 0 and at most 1440
        How long the raised flow is kept; None: to the end of the case.
    """

    on: tuple[str, ...] = ("fio2_low", "bag_empty")
    raise_to_l_min: float = field(default=1.0, metadata=bounded(0.1, 20.0, "L/min"))
    o2_fraction: float | None = field(default=None, metadata=optional_bounded(0.21, 1.0))
    after_min: float = field(default=1.0, metadata=bounded(0.0, 30.0, "min"))
    for_min: float | None = field(
        default=None, metadata=optional_bounded(0.0, 1440.0, "min", low_open=True))

    def __post_init__(self) -> None:
        check_fields(self)
        on = (self.on,) if isinstance(self.on, str) else self.on
        if not isinstance(on, list | tuple) or not on:
            raise InputError(f"respond.on must list one or more of {', '.join(RESPONSE_WARNINGS)}"
                             f"; got {self.on!r}.")
        for item in on:
            if item not in RESPONSE_WARNINGS:
                raise InputError(f"respond.on has unknown warning {item!r}; allowed: "
                                 f"{', '.join(RESPONSE_WARNINGS)}.")
        object.__setattr__(self, "on", tuple(on))


@dataclass(frozen=True)
class FlowRule:
    """A department's flow rule.

    Parameters
    ----------
    steps : tuple of RuleStep
        In order; every step but the last ends (``until_end_tidal_fraction`` or ``for_min``);
        the last lasts to the end of the case.
    name, note : str
    fio2_threshold : float, fraction, 0.21–1
        Inspired O2 fraction the department keeps above (default 0.30, common practice).
    min_fresh_o2_fraction : float, fraction, 0.21–1
        The department's lowest fresh-gas O2 fraction; every step must meet it.
    hold_max_fgf_l_min : float or None, L/min, 0.1–20
        The target controller may raise the total flow up to this to hold the end-tidal course
        when the dial alone cannot; None: it never raises the flow.
    respond : WarningResponse or None
        Response to warnings; None: no response (the warnings are still reported).
    path : Path or None
        The file the rule was read from.
    """

    steps: tuple[RuleStep, ...]
    name: str = "rule"
    note: str = ""
    fio2_threshold: float = field(default=0.30, metadata=bounded(0.21, 1.0))
    min_fresh_o2_fraction: float = field(default=AIR_O2_FRACTION,
                                         metadata=bounded(AIR_O2_FRACTION, 1.0))
    hold_max_fgf_l_min: float | None = field(default=None,
                                             metadata=optional_bounded(0.1, 20.0, "L/min"))
    respond: WarningResponse | None = None
    path: Path | None = None

    def __post_init__(self) -> None:
        check_fields(self)
        steps = tuple(self.steps)
        object.__setattr__(self, "steps", steps)
        if not steps:
            raise InputError("FlowRule.steps must hold at least one step; got none.")
        for i, step in enumerate(steps):
            last = i == len(steps) - 1
            if last and not step.open_ended:
                raise InputError(f"steps[{i}] is the last step, which lasts to the end of the "
                                 "case; it cannot end (remove until_end_tidal_fraction, "
                                 "for_min and at_most_min) — add a step after it instead.")
            if not last and step.open_ended:
                raise InputError(f"steps[{i}] has no end (until_end_tidal_fraction or for_min), "
                                 f"so steps[{i + 1}] would never start; only the last step "
                                 "may last to the end of the case.")
            if step.o2_fraction < self.min_fresh_o2_fraction - 1e-9:
                raise InputError(f"steps[{i}] fresh-gas O2 fraction {step.o2_fraction:.3f} is "
                                 f"below the rule's own min_fresh_o2_fraction "
                                 f"({self.min_fresh_o2_fraction:g}); the step contradicts "
                                 "the rule.")
        fractions = [(i, s.until_end_tidal_fraction) for i, s in enumerate(steps)
                     if s.until_end_tidal_fraction is not None]
        for (i, a), (j, b) in pairwise(fractions):
            if b <= a:
                raise InputError(f"steps[{j}].until_end_tidal_fraction ({b:g}) must be above "
                                 f"that of steps[{i}] ({a:g}): end-tidal agent has already "
                                 "passed it when the step starts.")
        final = steps[-1].total_l_min
        if self.hold_max_fgf_l_min is not None and self.hold_max_fgf_l_min < final - 1e-9:
            raise InputError(f"hold_max_fgf_l_min ({self.hold_max_fgf_l_min:g} L/min) is below "
                             f"the last step's flow ({final:g} L/min); it must be at least "
                             "that.")
        respond = self.respond
        if respond is not None:
            if respond.raise_to_l_min <= final + 1e-9:
                raise InputError(f"respond.raise_to_l_min ({respond.raise_to_l_min:g} L/min) "
                                 f"must be above the last step's flow ({final:g} L/min); a "
                                 "response that does not raise the flow contradicts itself.")
            if respond.o2_fraction is not None and (
                    respond.o2_fraction < self.min_fresh_o2_fraction - 1e-9):
                raise InputError(f"respond.o2_fraction ({respond.o2_fraction:g}) is below the "
                                 f"rule's min_fresh_o2_fraction "
                                 f"({self.min_fresh_o2_fraction:g}).")
        for key in ("name", "note"):
            if not isinstance(getattr(self, key), str):
                raise InputError(f"FlowRule.{key} must be text; got {getattr(self, key)!r}.")

    def describe(self) -> list[str]:
        """The rule in words, one line per part."""
        lines = [f"Step {i + 1}: {s.describe()}." for i, s in enumerate(self.steps)]
        lines.append(f"Fresh-gas O2 at or above {self.min_fresh_o2_fraction:.2f}; FIO2 kept "
                     f"above {self.fio2_threshold:.2f}.")
        if self.respond is not None:
            r = self.respond
            o2 = "" if r.o2_fraction is None else f" with O2 fraction {r.o2_fraction:g}"
            lasting = ("to the end of the case" if r.for_min is None
                       else f"for {r.for_min:g} min")
            lines.append(f"On {' or '.join(r.on)}: raise the flow to {r.raise_to_l_min:g} L/min"
                         f"{o2} {r.after_min:g} min later, {lasting}.")
        if self.hold_max_fgf_l_min is not None:
            lines.append(f"To hold the end-tidal course the flow may rise to "
                         f"{self.hold_max_fgf_l_min:g} L/min.")
        return lines

    def to_dict(self) -> dict[str, Any]:
        """Plain data in the TOML layout."""
        out: dict[str, Any] = {"name": self.name}
        if self.note:
            out["note"] = self.note
        out["fio2_threshold"] = self.fio2_threshold
        out["min_fresh_o2_fraction"] = self.min_fresh_o2_fraction
        if self.hold_max_fgf_l_min is not None:
            out["hold_max_fgf_l_min"] = self.hold_max_fgf_l_min
        out["steps"] = [{k: getattr(s, k) for k in _STEP_KEYS
                         if getattr(s, k) not in (None, "") and not (
                             k.endswith("_l_min") and getattr(s, k) == 0.0)}
                        for s in self.steps]
        if self.respond is not None:
            r = self.respond
            out["respond"] = {k: (list(getattr(r, k)) if k == "on" else getattr(r, k))
                              for k in _RESPOND_KEYS if getattr(r, k) is not None}
        return out


def _table(where: str, data: Any, allowed: tuple[str, ...], what: str) -> dict:
    if not isinstance(data, dict):
        raise InputError(f"{where}: {what} must be a table; got {data!r}.")
    check_keys(f"{where}: {what}", data, allowed, what="key")
    return data


def rule_from_dict(data: dict[str, Any], where: str = "rule", *,
                   path: Path | None = None) -> FlowRule:
    """Build a :class:`FlowRule` from plain data (the TOML layout); errors name ``where``."""
    data = _table(where, data, _RULE_KEYS, "the rule")
    raw_steps = data.get("steps")
    if not isinstance(raw_steps, list) or not raw_steps:
        raise InputError(f"{where}: the rule needs one or more [[steps]] tables; got "
                         f"{raw_steps!r}.")
    steps = []
    for i, raw in enumerate(raw_steps):
        raw = _table(where, raw, _STEP_KEYS, f"steps[{i}]")
        try:
            steps.append(RuleStep(**raw))
        except InputError as exc:
            raise InputError(f"{where}: steps[{i}]: {exc}") from None
    respond = None
    if "respond" in data:
        raw = _table(where, data["respond"], _RESPOND_KEYS, "[respond]")
        try:
            respond = WarningResponse(**raw)
        except InputError as exc:
            raise InputError(f"{where}: [respond]: {exc}") from None
    options = {k: data[k] for k in ("name", "note", "fio2_threshold", "min_fresh_o2_fraction",
                                    "hold_max_fgf_l_min") if k in data}
    try:
        return FlowRule(steps=tuple(steps), respond=respond, path=path, **options)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None


def load_rule(path: str | os.PathLike) -> FlowRule:
    """Read a flow rule from a TOML file.

    Raises
    ------
    InputError
        Naming the file, the key, the value and what is allowed.
    """
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"rule file {path} does not exist.") from None
    except IsADirectoryError:
        raise InputError(f"rule file {path} is a folder; give the rule's .toml file.") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"rule file {path} cannot be read: {exc}.") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"rule file {path} is not valid TOML: {exc}.") from None
    data.setdefault("name", path.stem)
    return rule_from_dict(data, str(path), path=path)
