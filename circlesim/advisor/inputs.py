"""What the plan advisor is asked: end-tidal targets and the limits on its plans (analysis).

:class:`Targets` holds the end-tidal level (vol% or × age-adjusted MAC), the time allowed to
reach it (min), the plan's length (min), later changes and the tolerance; :class:`Constraints`
holds the lowest FIO2, the fresh gas flow range (L/min), the largest dial and its step (vol%),
the changes allowed per hour and whether to follow the agent's labelling. :data:`OBJECTIVES`
lists what :func:`circlesim.advisor.advise.advise` can minimise.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from circlesim.base.validation import (
    InputError,
    Interval,
    bounded,
    check_fields,
    check_number,
    optional_bounded,
)

__all__ = ["OBJECTIVES", "Constraints", "Targets"]

#: What the advisor can minimise.
OBJECTIVES = ("agent", "co2e", "time")


@dataclass(frozen=True)
class Targets:
    """End-tidal targets for the advisor.

    Parameters
    ----------
    end_tidal_mac : float or None, × age-adjusted MAC, 0.1–3
        Target as a multiple of the patient's age-adjusted MAC (default 1 if neither this nor
        ``end_tidal_percent`` is given).
    end_tidal_percent : float or None, vol%, 0.05–20
        Target in vol% instead (not both).
    reach_within_min : float, min, 0–240
        Time allowed to reach the target (and each later change). 0 is accepted and answered
        with an explanation and the fastest plan.
    duration_min : float, min, 5–1440
        Length of the plan.
    changes : tuple of (time_min, level), optional
        Later changes of the target, in the same unit as the first level, at increasing times
        within the plan.
    tolerance : float, fraction, 0.01–0.2
        End-tidal agent must stay within this fraction of the target once it should have been
        reached (default 5 %).
    """

    end_tidal_mac: float | None = field(default=None, metadata=optional_bounded(0.1, 3.0, "MAC"))
    end_tidal_percent: float | None = field(default=None,
                                            metadata=optional_bounded(0.05, 20.0, "vol%"))
    reach_within_min: float = field(default=10.0, metadata=bounded(0.0, 240.0, "min"))
    duration_min: float = field(default=120.0, metadata=bounded(5.0, 1440.0, "min"))
    changes: tuple[tuple[float, float], ...] = ()
    tolerance: float = field(default=0.05, metadata=bounded(0.01, 0.2))

    def __post_init__(self) -> None:
        check_fields(self)
        if self.end_tidal_mac is not None and self.end_tidal_percent is not None:
            raise InputError("Targets takes one of end_tidal_mac and end_tidal_percent, not "
                             f"both; got {self.end_tidal_mac:g} MAC and "
                             f"{self.end_tidal_percent:g} vol%.")
        if self.end_tidal_mac is None and self.end_tidal_percent is None:
            object.__setattr__(self, "end_tidal_mac", 1.0)
        changes = tuple(tuple(c) for c in self.changes)
        last = 0.0
        interval = (Interval(0.1, 3.0, "MAC") if self.end_tidal_mac is not None
                    else Interval(0.05, 20.0, "vol%"))
        for i, change in enumerate(changes):
            if len(change) != 2:
                raise InputError(f"Targets.changes[{i}] must be (time_min, level); got "
                                 f"{change!r}.")
            t = check_number("Targets", f"changes[{i}].time_min", change[0],
                             Interval(0.0, self.duration_min, "min", low_open=True,
                                      high_open=True))
            check_number("Targets", f"changes[{i}].level", change[1], interval)
            if t <= last:
                raise InputError(f"Targets.changes[{i}].time_min must be later than "
                                 f"{last:g} min; got {t:g}.")
            last = t
        object.__setattr__(self, "changes", tuple((float(a), float(b)) for a, b in changes))

    @property
    def unit(self) -> str:
        """"MAC" or "vol%"."""
        return "MAC" if self.end_tidal_mac is not None else "vol%"

    def levels_percent(self, mac_percent: float) -> list[tuple[float, float]]:
        """(start time min, target vol%) of every level, the first at 0."""
        first = self.end_tidal_mac if self.end_tidal_mac is not None else self.end_tidal_percent
        scale = mac_percent if self.end_tidal_mac is not None else 1.0
        return [(0.0, first * scale)] + [(t, v * scale) for t, v in self.changes]


@dataclass(frozen=True)
class Constraints:
    """Limits on the advisor's plans.

    Parameters
    ----------
    min_fio2 : float, 0.21–0.95
        Lowest inspired O2 fraction allowed at any time.
    min_fgf_l_min, max_fgf_l_min : float, L/min, 0.2–20
        Lowest and highest total fresh gas flow.
    max_dial_percent : float or None, vol%, 0.1–25
        Largest dial setting (default: the vaporizer's largest).
    max_changes_per_hour : int, 0–30
        At most this many changes of the knobs in any hour (0: one setting throughout).
    dial_step_percent : float, vol%, 0.1–0.5
        Resolution of the dial settings.
    washin_o2_fraction : float, 0.21–1
        O2 fraction of the fresh gas (O2 with air) during wash-in; raised where needed to keep
        FIO2 above ``min_fio2``.
    follow_labelling : bool
        Keep to the agent's product labelling as circlesim's alert rules state it (for
        sevoflurane: no fresh gas flow below 1 L/min, at most 2 MAC-hours at 1 to < 2 L/min).
    """

    min_fio2: float = field(default=0.30, metadata=bounded(0.21, 0.95))
    min_fgf_l_min: float = field(default=0.5, metadata=bounded(0.2, 20.0, "L/min"))
    max_fgf_l_min: float = field(default=8.0, metadata=bounded(0.2, 20.0, "L/min"))
    max_dial_percent: float | None = field(default=None,
                                           metadata=optional_bounded(0.1, 25.0, "vol%"))
    max_changes_per_hour: int = field(default=6, metadata=bounded(0, 30))
    dial_step_percent: float = field(default=0.1, metadata=bounded(0.1, 0.5, "vol%"))
    washin_o2_fraction: float = field(default=0.5, metadata=bounded(0.21, 1.0))
    follow_labelling: bool = True

    def __post_init__(self) -> None:
        check_fields(self)
        object.__setattr__(self, "max_changes_per_hour", int(self.max_changes_per_hour))
        if not isinstance(self.follow_labelling, bool):
            raise InputError("Constraints.follow_labelling must be true or false; got "
                             f"{self.follow_labelling!r}.")
