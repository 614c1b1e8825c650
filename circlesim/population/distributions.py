"""Probability distributions for virtual patients, each carrying its source.

Four kinds, all optionally truncated to stated bounds (``low``, ``high``):

* :class:`Normal` — mean and standard deviation;
* :class:`LogNormal` — median and coefficient of variation (for positive quantities and
  multiplicative factors);
* :class:`Uniform` — between ``low`` and ``high``;
* :class:`Fixed` — one value.

Truncated distributions are sampled by the inverse of their cumulative distribution (no values
are clipped or redrawn), so a seed gives the same draws every time. Each distribution names its
``source``: a citation, or "assumption" when the spread is circlesim's choice.
"""

from __future__ import annotations

import math
from dataclasses import MISSING, dataclass, fields
from typing import Any

import numpy as np
from scipy import stats

from circlesim.base.validation import InputError, Interval, check_keys, check_number

__all__ = ["Distribution", "Fixed", "LogNormal", "Normal", "Uniform", "distribution_from_dict"]

_INF = math.inf


def _check_source(owner: str, source: Any) -> None:
    if not isinstance(source, str) or not source.strip():
        raise InputError(f"{owner}.source must name where the distribution comes from (a "
                         f"citation, or 'assumption'); got {source!r}.")


def _check_bounds(owner: str, low: float, high: float) -> None:
    for name, value in (("low", low), ("high", high)):
        if isinstance(value, bool) or not isinstance(value, int | float) or math.isnan(value):
            raise InputError(f"{owner}.{name} must be a number; got {value!r}.")
    if not low < high:
        raise InputError(f"{owner}.high must be larger than low ({low:g}); got {high:g}.")


class Distribution:
    """Interface of the distributions: sampling, median, support and a description."""

    source: str

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """``n`` independent draws, shape (n,)."""
        raise NotImplementedError

    def median(self) -> float:
        """Median of the (truncated) distribution."""
        raise NotImplementedError

    def support(self) -> tuple[float, float]:
        """Smallest and largest value the distribution can give."""
        raise NotImplementedError

    def describe(self) -> str:
        """Short human description, e.g. "normal, mean 175, SD 7.5, within 150–200"."""
        raise NotImplementedError

    def to_dict(self) -> dict:
        """Plain data (the TOML layout), with ``kind``."""
        out: dict[str, Any] = {"kind": _KIND_OF[type(self)]}
        for f in fields(self):  # type: ignore[arg-type]
            value = getattr(self, f.name)
            if isinstance(value, float) and math.isinf(value):
                continue
            out[f.name] = value
        return out


def _within(low: float, high: float) -> str:
    if math.isinf(low) and math.isinf(high):
        return ""
    lo = "−∞" if math.isinf(low) else f"{low:g}"
    hi = "∞" if math.isinf(high) else f"{high:g}"
    return f", within {lo}–{hi}"


@dataclass(frozen=True)
class Normal(Distribution):
    """Normal distribution, optionally truncated to ``[low, high]``.

    Parameters
    ----------
    mean : float
    sd : float, > 0
        Standard deviation.
    low, high : float
        Truncation bounds (default none).
    source : str
    """

    mean: float
    sd: float
    low: float = -_INF
    high: float = _INF
    source: str = "assumption"

    def __post_init__(self) -> None:
        check_number("Normal", "mean", self.mean, Interval(-1e12, 1e12))
        check_number("Normal", "sd", self.sd, Interval(0.0, 1e12, low_open=True))
        _check_bounds("Normal", self.low, self.high)
        _check_source("Normal", self.source)
        if self._cdf(self.high) - self._cdf(self.low) < 1e-9:
            raise InputError(f"Normal.low and high ({self.low:g}–{self.high:g}) leave almost no "
                             f"probability for mean {self.mean:g} and SD {self.sd:g}.")

    def _cdf(self, x: float) -> float:
        return float(stats.norm.cdf(x, self.mean, self.sd))

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        u = rng.uniform(self._cdf(self.low), self._cdf(self.high), n)
        return np.clip(stats.norm.ppf(u, self.mean, self.sd), self.low, self.high)

    def median(self) -> float:
        return float(stats.norm.ppf(0.5 * (self._cdf(self.low) + self._cdf(self.high)),
                                    self.mean, self.sd))

    def support(self) -> tuple[float, float]:
        return (self.low, self.high)

    def describe(self) -> str:
        return f"normal, mean {self.mean:g}, SD {self.sd:g}{_within(self.low, self.high)}"


@dataclass(frozen=True)
class LogNormal(Distribution):
    """Log-normal distribution given by its median and coefficient of variation.

    ``log(x)`` is normal with mean ``log(median)`` and SD ``sqrt(log(1 + cv²))``.

    Parameters
    ----------
    median_value : float, > 0
    cv : float, 0–3
        Coefficient of variation (SD / mean of x).
    low, high : float
        Truncation bounds, ``low`` ≥ 0 (default none).
    source : str
    """

    median_value: float
    cv: float
    low: float = 0.0
    high: float = _INF
    source: str = "assumption"

    def __post_init__(self) -> None:
        check_number("LogNormal", "median_value", self.median_value,
                     Interval(0.0, 1e12, low_open=True))
        check_number("LogNormal", "cv", self.cv, Interval(0.0, 3.0, low_open=True))
        _check_bounds("LogNormal", self.low, self.high)
        if self.low < 0.0:
            raise InputError(f"LogNormal.low must be at least 0; got {self.low:g}.")
        _check_source("LogNormal", self.source)
        if self._cdf(self.high) - self._cdf(self.low) < 1e-9:
            raise InputError(f"LogNormal.low and high ({self.low:g}–{self.high:g}) leave almost "
                             f"no probability for median {self.median_value:g}.")

    @property
    def sigma(self) -> float:
        """SD of ``log(x)``."""
        return math.sqrt(math.log1p(self.cv ** 2))

    def _cdf(self, x: float) -> float:
        if x <= 0.0:
            return 0.0
        return float(stats.norm.cdf(math.log(x), math.log(self.median_value), self.sigma))

    def _ppf(self, u):
        return np.exp(stats.norm.ppf(u, math.log(self.median_value), self.sigma))

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        u = rng.uniform(self._cdf(self.low), self._cdf(self.high), n)
        return np.clip(self._ppf(u), self.low, self.high)

    def median(self) -> float:
        return float(self._ppf(0.5 * (self._cdf(self.low) + self._cdf(self.high))))

    def support(self) -> tuple[float, float]:
        return (self.low, self.high)

    def describe(self) -> str:
        return (f"log-normal, median {self.median_value:g}, CV {100 * self.cv:g} %"
                f"{_within(self.low, self.high)}")


@dataclass(frozen=True)
class Uniform(Distribution):
    """Uniform distribution on ``[low, high]``."""

    low: float
    high: float
    source: str = "assumption"

    def __post_init__(self) -> None:
        _check_bounds("Uniform", self.low, self.high)
        if math.isinf(self.low) or math.isinf(self.high):
            raise InputError(f"Uniform.low and high must be finite; got {self.low:g} and "
                             f"{self.high:g}.")
        _check_source("Uniform", self.source)

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        return rng.uniform(self.low, self.high, n)

    def median(self) -> float:
        return 0.5 * (self.low + self.high)

    def support(self) -> tuple[float, float]:
        return (self.low, self.high)

    def describe(self) -> str:
        return f"uniform, {self.low:g}–{self.high:g}"


@dataclass(frozen=True)
class Fixed(Distribution):
    """One value for every virtual patient."""

    value: float
    source: str = "assumption"

    def __post_init__(self) -> None:
        check_number("Fixed", "value", self.value, Interval(-1e12, 1e12))
        _check_source("Fixed", self.source)

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        return np.full(n, float(self.value))

    def median(self) -> float:
        return float(self.value)

    def support(self) -> tuple[float, float]:
        return (float(self.value), float(self.value))

    def describe(self) -> str:
        return f"fixed at {self.value:g}"


_KINDS: dict[str, type[Distribution]] = {"normal": Normal, "lognormal": LogNormal,
                                         "uniform": Uniform, "fixed": Fixed}
_KIND_OF = {v: k for k, v in _KINDS.items()}


def distribution_from_dict(data: Any, where: str = "distribution") -> Distribution:
    """A distribution from plain data, e.g. ``{"kind": "normal", "mean": 70, "sd": 12}``.

    Raises
    ------
    InputError
        For a missing or unknown ``kind``, unknown or missing keys, or invalid values.
    """
    if not isinstance(data, dict):
        raise InputError(f"{where} must be a table with a 'kind' ({', '.join(_KINDS)}); got "
                         f"{data!r}.")
    data = dict(data)
    kind = data.pop("kind", None)
    if kind not in _KINDS:
        raise InputError(f"{where}.kind must be one of {', '.join(map(repr, _KINDS))}; got "
                         f"{kind!r}.")
    cls = _KINDS[kind]
    check_keys(where, data, (f.name for f in fields(cls)),  # type: ignore[arg-type]
               allowed_words=f"a {kind} distribution takes")
    try:
        return cls(**data)
    except TypeError:
        required = [f.name for f in fields(cls) if f.default is MISSING]  # type: ignore
        raise InputError(f"{where}: a {kind} distribution needs {', '.join(required)}; got "
                         f"{', '.join(sorted(data)) or 'nothing'}.") from None
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
