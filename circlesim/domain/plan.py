"""A plan: an ordered list of steps, each changing some settings at a given time.

A step sets fresh gas flows (O2, air, N2O in L/min at the flowmeters), the vaporizer dial,
ventilation, and may inject liquid agent into the circuit. A setting a step leaves out keeps
its previous value (flows and dial start at zero; ventilation starts at the patient's
default). Injection happens once, at the step's time.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field, fields, replace

from circlesim.base.validation import (
    InputError,
    bounded,
    check_choice,
    check_fields,
    check_keys,
    optional_bounded,
)

__all__ = [
    "AIR_O2_FRACTION",
    "MAX_TOTAL_FGF_L_MIN",
    "MIN_TOTAL_FGF_L_MIN",
    "Plan",
    "Segment",
    "Step",
]

#: O2 fraction of air used for the fresh-gas check.
AIR_O2_FRACTION = 0.20946
MIN_TOTAL_FGF_L_MIN = 0.1
MAX_TOTAL_FGF_L_MIN = 20.0
MAX_PLAN_MIN = 24 * 60.0


@dataclass(frozen=True)
class Step:
    """One change of settings.

    Parameters
    ----------
    time_min : float, min, 0–1440
        When the change is made, from the start of the plan.
    o2_l_min, air_l_min, n2o_l_min : float or None, L/min, 0–15
        Fresh gas flows at the flowmeters; None keeps the previous value.
    dial_percent : float or None, vol%, 0–25
        Vaporizer setting (checked against the vaporizer's range when simulated).
    inject_ml : float, mL, 0–20
        Liquid agent injected into the circuit at ``time_min``.
    tidal_volume_ml : float or None, mL BTPS, 10–2000
    rate_per_min : float or None, breaths/min, 4–60
    valve : {"open", "closed"} or None
        Pressure-limiting valve from this step on; None keeps the previous setting (the
        circuit's own setting at the start).
    note : str
        Free text shown with the step.
    target_end_tidal_percent : float or None, vol%, 0.05–20
        Target mode: hold end-tidal agent at this concentration instead of setting the dial.
        A feedback controller (:mod:`circlesim.targets`) chooses the dial. The target holds
        until a later step sets a dial or another target.
    target_mac : float or None, × age-adjusted MAC, 0.05–3
        Target mode with the target as a multiple of the patient's age-adjusted MAC.
    target_within_min : float or None, min, above 0 and at most 240
        Time allowed, from this step, to reach the target; None: as fast as the dial allows.
    """

    time_min: float = field(metadata=bounded(0.0, MAX_PLAN_MIN, "min"))
    o2_l_min: float | None = field(default=None, metadata=optional_bounded(0.0, 15.0, "L/min"))
    air_l_min: float | None = field(default=None, metadata=optional_bounded(0.0, 15.0, "L/min"))
    n2o_l_min: float | None = field(default=None, metadata=optional_bounded(0.0, 15.0, "L/min"))
    dial_percent: float | None = field(default=None,
                                       metadata=optional_bounded(0.0, 25.0, "vol%"))
    inject_ml: float = field(default=0.0, metadata=bounded(0.0, 20.0, "mL"))
    tidal_volume_ml: float | None = field(default=None,
                                          metadata=optional_bounded(10.0, 2000.0, "mL"))
    rate_per_min: float | None = field(default=None,
                                       metadata=optional_bounded(4.0, 60.0, "breaths/min"))
    valve: str | None = None
    note: str = ""
    target_end_tidal_percent: float | None = field(
        default=None, metadata=optional_bounded(0.05, 20.0, "vol%"))
    target_mac: float | None = field(default=None,
                                     metadata=optional_bounded(0.05, 3.0, "MAC"))
    target_within_min: float | None = field(
        default=None, metadata=optional_bounded(0.0, 240.0, "min", low_open=True))

    def __post_init__(self) -> None:
        check_fields(self)
        if self.valve is not None:
            object.__setattr__(self, "valve", check_choice("Step", "valve", self.valve,
                                                           ("open", "closed")))
        if not isinstance(self.note, str):
            raise InputError(f"Step.note must be text; got {self.note!r}.")
        if self.target_end_tidal_percent is not None and self.target_mac is not None:
            raise InputError("Step.target_end_tidal_percent and Step.target_mac cannot both be "
                             f"set (got {self.target_end_tidal_percent:g} vol% and "
                             f"{self.target_mac:g} MAC); give the target one way.")
        if self.has_target and self.dial_percent is not None:
            raise InputError(f"Step.dial_percent ({self.dial_percent:g}) cannot be set together "
                             "with an end-tidal target: in target mode the controller chooses "
                             "the dial. Give either the dial or the target.")
        if self.target_within_min is not None and not self.has_target:
            raise InputError(f"Step.target_within_min ({self.target_within_min:g} min) needs a "
                             "target on the same step (target_end_tidal_percent or "
                             "target_mac).")

    @property
    def has_target(self) -> bool:
        """Whether this step sets an end-tidal target (target mode)."""
        return self.target_end_tidal_percent is not None or self.target_mac is not None

    def to_dict(self) -> dict:
        """The step as a plain dict without the settings it leaves unchanged."""
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if value is None or (f.name == "inject_ml" and value == 0.0) or (
                    f.name == "note" and not value):
                continue
            out[f.name] = value
        return out


@dataclass(frozen=True)
class Segment:
    """Settings in force from ``start_min`` to ``end_min`` (all resolved, none missing)."""

    start_min: float
    end_min: float
    o2_l_min: float
    air_l_min: float
    n2o_l_min: float
    dial_percent: float
    inject_ml: float
    tidal_volume_ml: float
    rate_per_min: float
    valve: str
    target_end_tidal_percent: float | None = None
    target_mac: float | None = None
    target_by_min: float | None = None

    @property
    def has_target(self) -> bool:
        """Whether the controller chooses the dial in this segment (target mode)."""
        return self.target_end_tidal_percent is not None or self.target_mac is not None

    @property
    def fgf_l_min(self) -> float:
        """Total fresh gas flow at the flowmeters (before vapour is added), L/min."""
        return self.o2_l_min + self.air_l_min + self.n2o_l_min

    @property
    def fresh_o2_fraction(self) -> float:
        """O2 fraction of the fresh gas from the flowmeters."""
        return (self.o2_l_min + AIR_O2_FRACTION * self.air_l_min) / self.fgf_l_min


@dataclass(frozen=True)
class Plan:
    """A timeline of steps.

    Parameters
    ----------
    steps : sequence of Step
        In strictly increasing time order; the first at time 0.
    duration_min : float, min, 1–1440
        Length of the plan; every step must come before it.
    name : str
    description : str
    """

    steps: tuple[Step, ...]
    duration_min: float = field(default=60.0, metadata=bounded(1.0, MAX_PLAN_MIN, "min"))
    name: str = "plan"
    description: str = ""

    def __post_init__(self) -> None:
        steps = tuple(self.steps) if isinstance(self.steps, Iterable) else self.steps
        if not isinstance(steps, tuple) or not steps:
            raise InputError("Plan.steps must hold at least one step; got none.")
        for i, step in enumerate(steps):
            if not isinstance(step, Step):
                raise InputError(f"Plan.steps[{i}] must be a Step; got {step!r}.")
        object.__setattr__(self, "steps", steps)
        check_fields(self)
        if steps[0].time_min != 0.0:
            raise InputError(f"Plan.steps[0].time_min must be 0 (the plan starts with its "
                             f"first step); got {steps[0].time_min:g}.")
        for i in range(1, len(steps)):
            if not steps[i].time_min > steps[i - 1].time_min:
                raise InputError(
                    f"Plan.steps[{i}].time_min must be later than the previous step "
                    f"({steps[i - 1].time_min:g} min); got {steps[i].time_min:g}.")
        last = steps[-1].time_min
        if not last < self.duration_min:
            raise InputError(f"Plan.steps[{len(steps) - 1}].time_min must be before the end "
                             f"of the plan ({self.duration_min:g} min); got {last:g}.")
        self.segments(tidal_volume_ml=500.0, rate_per_min=12.0)  # checks the flows

    def segments(self, tidal_volume_ml: float, rate_per_min: float,
                 valve: str = "open") -> tuple[Segment, ...]:
        """Resolve the steps into segments with every setting filled in.

        Parameters
        ----------
        tidal_volume_ml, rate_per_min : float
            Ventilation before any step changes it (the patient's defaults).
        valve : {"open", "closed"}
            Valve setting before any step changes it (the circuit's).

        A target (target mode) holds from its step until a step sets a dial or another
        target; a target segment's ``dial_percent`` is 0 (the controller chooses the dial) and
        its ``target_by_min`` is the absolute time by which the target should be reached.

        Raises
        ------
        InputError
            If a segment's fresh gas flow is outside 0.1–20 L/min or has less O2 than air.
        """
        cache_key = (tidal_volume_ml, rate_per_min, valve)
        cache = self.__dict__.setdefault("_segments_cache", {})
        if cache_key in cache:
            return cache[cache_key]
        state = {"o2_l_min": 0.0, "air_l_min": 0.0, "n2o_l_min": 0.0, "dial_percent": 0.0,
                 "tidal_volume_ml": tidal_volume_ml, "rate_per_min": rate_per_min,
                 "valve": valve, "target_end_tidal_percent": None, "target_mac": None,
                 "target_by_min": None}
        settings = ("o2_l_min", "air_l_min", "n2o_l_min", "dial_percent", "tidal_volume_ml",
                    "rate_per_min", "valve")
        out = []
        for i, step in enumerate(self.steps):
            for key in settings:
                value = getattr(step, key)
                if value is not None:
                    state[key] = value
            if step.dial_percent is not None or step.has_target:  # a new dial or target
                state["target_end_tidal_percent"] = step.target_end_tidal_percent
                state["target_mac"] = step.target_mac
                state["target_by_min"] = (None if step.target_within_min is None
                                          else step.time_min + step.target_within_min)
            if step.has_target:
                state["dial_percent"] = 0.0
            end = self.steps[i + 1].time_min if i + 1 < len(self.steps) else self.duration_min
            segment = Segment(start_min=step.time_min, end_min=end, inject_ml=step.inject_ml,
                              **state)
            total = segment.fgf_l_min
            if not MIN_TOTAL_FGF_L_MIN <= total <= MAX_TOTAL_FGF_L_MIN:
                raise InputError(
                    f"Plan.steps[{i}] total fresh gas flow (O2 + air + N2O) must be a number "
                    f"from {MIN_TOTAL_FGF_L_MIN:g} to {MAX_TOTAL_FGF_L_MIN:g} L/min; got "
                    f"{total:g}.")
            if segment.fresh_o2_fraction < AIR_O2_FRACTION - 1e-12:
                raise InputError(
                    f"Plan.steps[{i}] fresh gas O2 fraction must be at least that of air "
                    f"(21 %); got {100 * segment.fresh_o2_fraction:.1f} % "
                    f"(O2 {segment.o2_l_min:g}, air {segment.air_l_min:g}, "
                    f"N2O {segment.n2o_l_min:g} L/min).")
            out.append(segment)
        # a plan is immutable: keep the last resolution (the engine, the alerts and the
        # outcomes each ask for the same one)
        if len(cache) > 8:
            cache.clear()
        cache[cache_key] = tuple(out)
        return cache[cache_key]

    def with_steps(self, steps: Iterable[Step]) -> Plan:
        """A copy with other steps."""
        return replace(self, steps=tuple(steps))

    def to_dict(self) -> dict:
        """The plan as plain data (the TOML layout)."""
        return {
            "name": self.name,
            "description": self.description,
            "duration_min": self.duration_min,
            "steps": [s.to_dict() for s in self.steps],
        }

    @classmethod
    def from_dict(cls, data: dict) -> Plan:
        """Build a plan from plain data (the TOML layout), naming any unknown key."""
        data = dict(data)
        known = {"name", "description", "duration_min", "steps"}
        check_keys("plan", data, known)
        raw_steps = data.pop("steps", None)
        if not isinstance(raw_steps, list) or not raw_steps:
            raise InputError("plan.steps must be a list of at least one step "
                             "([[plan.steps]] tables in TOML); got none.")
        step_keys = {f.name for f in fields(Step)}
        steps = []
        for i, raw in enumerate(raw_steps):
            if not isinstance(raw, dict):
                raise InputError(f"plan.steps[{i}] must be a table; got {raw!r}.")
            check_keys(f"plan.steps[{i}]", raw, step_keys)
            if "time_min" not in raw:
                raise InputError(f"plan.steps[{i}].time_min is missing (minutes from the "
                                 "start of the plan).")
            steps.append(Step(**raw))
        return cls(steps=tuple(steps), **data)

    @property
    def has_targets(self) -> bool:
        """Whether any step is in target mode (the controller then chooses the dial)."""
        return any(s.has_target for s in self.steps)

    @property
    def step_times(self) -> tuple[float, ...]:
        """Times of the steps, min."""
        return tuple(s.time_min for s in self.steps)

