"""Input checking at the public boundary: declared constraints and one wording for every failure.

Each numeric field of a domain object declares its allowed range once, as field metadata::

    weight_kg: float = field(metadata=bounded(2.0, 250.0, "kg"))

:func:`check_fields` then checks every declared field at construction, and the tests build
invalid values from the same declarations, so a new field is covered without anyone having to
remember it. Failures raise :class:`InputError` (a ``ValueError``) whose message names the
field, the value given and the allowed range, e.g.::

    Step.o2_l_min must be a number from 0 to 15 L/min; got -1.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, fields
from typing import Any

import numpy as np

__all__ = [
    "InputError",
    "Interval",
    "OneOf",
    "bounded",
    "check_choice",
    "check_fields",
    "check_keys",
    "check_number",
    "check_whole_number",
    "optional_bounded",
]


class InputError(ValueError):
    """A value given to circlesim is outside what the field allows."""


@dataclass(frozen=True)
class Interval:
    """A closed or half-open range of allowed numbers, with its unit for messages.

    Parameters
    ----------
    low, high : float
        Bounds of the range, in ``unit``.
    unit : str
        Unit shown in messages ("" for a plain number).
    low_open, high_open : bool
        When true the bound itself is not allowed.
    optional : bool
        When true ``None`` is allowed and means "use the default".
    whole : bool
        When true only whole numbers are allowed (:func:`check_fields` stores them as int).
    """

    low: float
    high: float
    unit: str = ""
    low_open: bool = False
    high_open: bool = False
    optional: bool = False
    whole: bool = False

    def describe(self) -> str:
        """Human wording of the range, e.g. "a number from 0 to 15 L/min"."""
        unit = f" {self.unit}" if self.unit else ""
        if math.isinf(self.high):
            op = "above" if self.low_open else "at least"
            return f"a number {op} {self.low:g}{unit}"
        if self.low_open and not self.high_open:
            return f"a number above {self.low:g} and at most {self.high:g}{unit}"
        if self.high_open and not self.low_open:
            return f"a number from {self.low:g} up to (not including) {self.high:g}{unit}"
        if self.low_open and self.high_open:
            return f"a number between {self.low:g} and {self.high:g}{unit}, both excluded"
        return f"a number from {self.low:g} to {self.high:g}{unit}"

    def contains(self, value: float) -> bool:
        """Whether ``value`` lies in the range."""
        above = value > self.low if self.low_open else value >= self.low
        below = value < self.high if self.high_open else value <= self.high
        return above and below

    def invalid_examples(self) -> list[float]:
        """Values just outside the range (and not-a-number), for generated tests."""
        out = [math.nan]
        span = 1.0 if math.isinf(self.high) else max(self.high - self.low, 1e-6)
        out.append(self.low if self.low_open else self.low - 0.01 * span - 1e-9)
        if not math.isinf(self.high):
            out.append(self.high if self.high_open else self.high + 0.01 * span + 1e-9)
        return out


@dataclass(frozen=True)
class OneOf:
    """A field that takes one of a fixed set of words."""

    choices: tuple[str, ...]

    def describe(self) -> str:
        return "one of " + ", ".join(repr(c) for c in self.choices)


def bounded(low: float, high: float, unit: str = "", **kwargs: Any) -> dict[str, Interval]:
    """Field metadata declaring an allowed range (see :class:`Interval`)."""
    return {"constraint": Interval(low, high, unit, **kwargs)}


def optional_bounded(low: float, high: float, unit: str = "", **kwargs: Any) -> dict:
    """Like :func:`bounded`, but ``None`` is allowed and means "derive a default"."""
    return {"constraint": Interval(low, high, unit, optional=True, **kwargs)}


def check_number(owner: str, name: str, value: Any, interval: Interval) -> float | None:
    """Check one number against its range and return it as a float.

    Raises
    ------
    InputError
        If ``value`` is not a real number or lies outside ``interval``.
    """
    if value is None and interval.optional:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float):
        try:
            if isinstance(value, np.generic) and np.isreal(value):
                value = float(value)
            else:
                raise TypeError
        except TypeError:
            raise InputError(
                f"{owner}.{name} must be {interval.describe()}; got {value!r}."
            ) from None
    value = float(value)
    if not math.isfinite(value) or not interval.contains(value):
        raise InputError(f"{owner}.{name} must be {interval.describe()}; got {value:g}.")
    return value


def check_whole_number(name: str, value: Any, interval: Interval) -> int:
    """Check that ``value`` is a whole number within ``interval`` (closed, its bounds whole
    numbers; ``high`` may be infinite) and return it as an int.

    Integers (Python or numpy) and floats without a fractional part pass; booleans, text and
    non-finite numbers do not.

    Raises
    ------
    InputError
        ``"{name} must be a whole number from 1 to 64; got 2.5."``
    """
    whole = not isinstance(value, bool) and (isinstance(value, int | np.integer) or (
        isinstance(value, float | np.floating) and float(value).is_integer()))
    if not whole or not interval.contains(float(value)):
        shown = f"{value:g}" if isinstance(value, float) else repr(value)
        unit = f" {interval.unit}" if interval.unit else ""
        wording = (f"of at least {interval.low:.0f}{unit}" if math.isinf(interval.high)
                   else f"from {interval.low:.0f} to {interval.high:.0f}{unit}")
        raise InputError(f"{name} must be a whole number {wording}; got {shown}.")
    return int(value)


def check_choice(owner: str, name: str, value: Any, choices: Iterable[str]) -> str:
    """Check that ``value`` is one of ``choices`` (case-insensitive) and return it in lower case."""
    choices = tuple(choices)
    if isinstance(value, str) and value.strip().lower() in choices:
        return value.strip().lower()
    wording = ", ".join(repr(c) for c in choices)
    raise InputError(f"{owner}.{name} must be one of {wording}; got {value!r}.")


def check_keys(where: str, data: dict, allowed: Iterable[str], *, what: str = "setting",
               allowed_words: str = "allowed:") -> None:
    """Refuse keys of ``data`` that are not in ``allowed``, naming the first one.

    The message reads ``"{where} has unknown {what} 'key'; {allowed_words} a, b, c."``, so a
    typo in a file never passes silently.
    """
    allowed = sorted(allowed)
    unknown = sorted(set(data) - set(allowed))
    if unknown:
        raise InputError(f"{where} has unknown {what} {unknown[0]!r}; {allowed_words} "
                         f"{', '.join(allowed)}.")


def check_fields(obj: Any) -> None:
    """Check every dataclass field of ``obj`` that declares a constraint.

    Numbers are stored back as floats (through ``object.__setattr__`` so frozen dataclasses
    work) and words in lower case.
    """
    owner = type(obj).__name__
    for f in fields(obj):
        constraint = f.metadata.get("constraint")
        if constraint is None:
            continue
        value = getattr(obj, f.name)
        if isinstance(constraint, Interval) and constraint.whole:
            checked = (None if value is None and constraint.optional
                       else check_whole_number(f"{owner}.{f.name}", value, constraint))
        elif isinstance(constraint, Interval):
            checked = check_number(owner, f.name, value, constraint)
        else:
            checked = check_choice(owner, f.name, value, constraint.choices)
        object.__setattr__(obj, f.name, checked)
