"""Target mode's settings and reports: how the controller works and how well each target was met.

A plan step may ask for an end-tidal concentration (``target_end_tidal_percent``) or a
multiple of the age-adjusted MAC (``target_mac``) instead of a dial setting; the controller
(:mod:`circlesim.targets.controller`) then chooses the dial. This module holds what the user
sets (:class:`ControllerSettings`) and what a result reports (:class:`ControlReport`, one
:class:`TargetReport` per target).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from circlesim.base.validation import InputError, bounded, check_fields, optional_bounded
from circlesim.domain.plan import Plan, Segment

__all__ = ["EPS", "ControlReport", "ControllerSettings", "TargetReport", "concrete_plan",
           "dial_series", "target_percent"]

#: Times closer than this are the same time, min.
EPS = 1e-9

@dataclass(frozen=True)
class ControllerSettings:
    """How the controller works.

    Parameters
    ----------
    decision_interval_min : float, min, 0.05–2
        How often the controller looks at the patient (default 10 s).
    dial_step_percent : float, vol%, 0.1–0.5
        Smallest dial change, as on the vaporizer's scale.
    min_dwell_min : float, min, 0.1–30
        Shortest time between two changes of the knobs.
    tolerance : float, fraction, 0.01–0.2
        A target counts as reached and held while end-tidal agent is within this fraction of
        it (default 5 %).
    aim : float, fraction, 0.005–0.1
        The controller leaves the dial alone while the look-ahead stays within this fraction
        of the target (default 2 %); must be below ``tolerance``.
    max_fgf_l_min : float or None, L/min, 0.1–20
        Highest total fresh gas flow the controller may raise the flow to when the dial alone
        cannot reach or hold the target; None: the controller never changes the flows.
    horizon_min : float or None, min, 2–60
        Look-ahead; default three circuit time constants (circuit and bag volume over the
        fresh gas flow), 4–30 min.
    """

    decision_interval_min: float = field(default=1.0 / 6.0,
                                         metadata=bounded(0.05, 2.0, "min"))
    dial_step_percent: float = field(default=0.1, metadata=bounded(0.1, 0.5, "vol%"))
    min_dwell_min: float = field(default=1.0, metadata=bounded(0.1, 30.0, "min"))
    tolerance: float = field(default=0.05, metadata=bounded(0.01, 0.2))
    aim: float = field(default=0.02, metadata=bounded(0.005, 0.1))
    max_fgf_l_min: float | None = field(default=None,
                                        metadata=optional_bounded(0.1, 20.0, "L/min"))
    horizon_min: float | None = field(default=None, metadata=optional_bounded(2.0, 60.0,
                                                                              "min"))

    def __post_init__(self) -> None:
        check_fields(self)
        if self.aim >= self.tolerance:
            raise InputError(f"ControllerSettings.aim must be below the tolerance "
                             f"({self.tolerance:g}); got {self.aim:g}.")


@dataclass(frozen=True)
class TargetReport:
    """How well one target was met (judged on the re-run of the controller's plan).

    Attributes
    ----------
    start_min, end_min : float, min
        The stretch of the plan in which the target applies.
    target_percent : float, vol%
        End-tidal target.
    target_mac : float
        The target as a multiple of the age-adjusted MAC.
    deadline_min : float or None, min
        Time by which the target should be reached (None: as fast as the dial allows).
    reached_min : float or None, min
        First time end-tidal agent is within the tolerance of the target (None: never).
    settled_min : float or None, min
        First time, from ``reached_min`` on, that it is within half the tolerance.
    met : bool
        Reached (by the deadline, if any) and held within the tolerance to ``end_min``.
    largest_below_percent, largest_above_percent : float, %
        Largest deviation below and above the target from the time it was reached (or
        should have been, whichever is earlier) to ``end_min``, as a percentage of the
        target (0 when none). If it was never reached: how far short it stayed.
    hold_deviation_percent : float or None, %
        Largest deviation either way from ``settled_min`` to ``end_min``.
    limited_by : str
        "" when met; otherwise what stopped it: "dial range" (the vaporizer was at its limit),
        "flow" (the dial could not be turned down far enough to lower it in time),
        or "controller" (the dial range would have allowed it).
    message : str
        One sentence for people.
    """

    start_min: float
    end_min: float
    target_percent: float
    target_mac: float
    deadline_min: float | None
    reached_min: float | None
    settled_min: float | None
    met: bool
    largest_below_percent: float
    largest_above_percent: float
    hold_deviation_percent: float | None
    limited_by: str
    message: str


@dataclass(frozen=True, eq=False)
class ControlReport:
    """What the controller did, attached to a result as ``result.control``.

    Attributes
    ----------
    requested_plan : Plan
        The plan with targets as given.
    plan : Plan
        The controller's output as a plan with dial (and flow) settings only; the result is a
        run of this plan.
    targets : tuple of TargetReport
    settings : ControllerSettings
    decisions : int
        How many times the controller looked ahead.
    """

    requested_plan: Plan
    plan: Plan
    targets: tuple[TargetReport, ...]
    settings: ControllerSettings
    decisions: int

    @property
    def met(self) -> bool:
        """Whether every target was met."""
        return all(t.met for t in self.targets)

    def target_series(self, time_min: np.ndarray) -> np.ndarray:
        """End-tidal target (vol%) at ``time_min``; NaN where no target applies."""
        t = np.asarray(time_min, dtype=float)
        out = np.full(t.shape, np.nan)
        for rep in self.targets:
            last = rep is self.targets[-1] and rep.end_min >= self.plan.duration_min - EPS
            inside = (t >= rep.start_min) & ((t <= rep.end_min) if last else
                                             (t < rep.end_min))
            out[inside] = rep.target_percent
        return out

    def dial_series(self, time_min: np.ndarray) -> np.ndarray:
        """Dial setting (vol%) of the controller's plan at ``time_min``."""
        return dial_series(self.plan, np.asarray(time_min, dtype=float))

    def summary(self) -> str:
        """One line per target."""
        return "\n".join(t.message for t in self.targets)


def target_percent(segment: Segment, mac_percent: float) -> float:
    """End-tidal target of a target segment in vol% (``target_mac`` × age-adjusted MAC)."""
    if segment.target_end_tidal_percent is not None:
        return float(segment.target_end_tidal_percent)
    return float(segment.target_mac) * mac_percent


def concrete_plan(plan: Plan) -> Plan:
    """``plan`` with every target replaced by the dial off (the flows and the rest kept)."""
    steps = [replace(s, target_end_tidal_percent=None, target_mac=None,
                     target_within_min=None, dial_percent=0.0) if s.has_target else s
             for s in plan.steps]
    return plan.with_steps(steps)


def dial_series(plan: Plan, time_min: np.ndarray) -> np.ndarray:
    """Dial (vol%) of a plan without targets at ``time_min`` (the dial is independent of the
    ventilation, so any defaults resolve it)."""
    segments = plan.segments(500.0, 12.0)
    starts = np.array([s.start_min for s in segments])
    index = np.clip(np.searchsorted(starts, time_min + EPS, side="right") - 1, 0,
                    len(segments) - 1)
    return np.array([s.dial_percent for s in segments])[index]

