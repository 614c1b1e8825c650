"""The plan advisor's answer: :class:`Advice`, the trade-off points and tables (analysis).

:class:`Advice` is what :func:`circlesim.advisor.advise.advise` returns (the plan, a run of it,
liquid agent in mL, CO2-equivalent in kg, the checks and the explanation); :class:`ParetoPoint`
is one point of the trade-off between time to target (min) and agent used (mL);
:func:`plan_table` and :func:`summary_rows` lay a plan and the advice out for front ends.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from circlesim.domain.plan import Plan
from circlesim.engine.result import Result
from circlesim.scenario import plan_to_toml

__all__ = ["Advice", "ParetoPoint", "plan_table", "summary_rows"]


@dataclass(frozen=True)
class ParetoPoint:
    """One point of the trade-off between time to target and agent used.

    Attributes
    ----------
    time_to_target_min : float, min
        When end-tidal agent first comes within the tolerance of the first target.
    agent_ml : float, mL of liquid agent
    co2e_kg : float or None, kg CO2-equivalent
    washin_fgf_l_min, washin_min, maintenance_fgf_l_min : float
        The plan's flows (L/min) and wash-in length (min).
    plan : Plan
    """

    time_to_target_min: float
    agent_ml: float
    co2e_kg: float | None
    washin_fgf_l_min: float
    washin_min: float
    maintenance_fgf_l_min: float
    plan: Plan


@dataclass(frozen=True, eq=False)
class Advice:
    """The advisor's answer.

    Attributes
    ----------
    feasible : bool
        Whether the plan meets every target and limit (checked on ``result``).
    plan : Plan
        The recommended plan (or, if not feasible, the closest plan found).
    result : Result
        A run of ``plan`` with :func:`circlesim.simulate`.
    objective : str
    agent_ml : float
        Liquid agent delivered, mL.
    co2e_kg : float or None
        CO2-equivalent of the agent delivered, kg (GWP horizon ``gwp_horizon_years``).
    time_to_target_min : float or None
    reference : Result
        A plain high-flow plan holding the same targets (the target controller at
        ``reference_fgf_l_min``), for comparison.
    reference_fgf_l_min : float
    saved_ml, saved_percent : float
        Agent saved against ``reference``.
    pareto : tuple of ParetoPoint
        Least agent for different times to target (non-dominated points, fastest first).
    checks : dict of str to bool
        Each limit, checked on ``result``.
    problems : tuple of str
        What cannot be met, and why (empty when feasible).
    explanation : str
        The advice in words.
    gwp_horizon_years : int
    elapsed_s : float
        Time the advisor took, s.
    evaluations : int
        Runs of the model.
    """

    feasible: bool
    plan: Plan
    result: Result
    objective: str
    agent_ml: float
    co2e_kg: float | None
    time_to_target_min: float | None
    reference: Result
    reference_fgf_l_min: float
    saved_ml: float
    saved_percent: float
    pareto: tuple[ParetoPoint, ...]
    checks: dict[str, bool]
    problems: tuple[str, ...]
    explanation: str
    gwp_horizon_years: int
    elapsed_s: float
    evaluations: int

    @property
    def reference_holds_target(self) -> bool:
        """Whether the plain comparison plan meets every target (a like-for-like yardstick)."""
        control = self.reference.control
        return control is None or all(r.met for r in control.targets)

    def to_toml(self) -> str:
        """The plan as TOML (a ``[plan]`` table with ``[[plan.steps]]``)."""
        return plan_to_toml(self.plan)

    def table(self):
        """The plan's steps as a pandas table (time, flows, dial, note)."""
        return plan_table(self.plan)


def plan_table(plan: Plan):
    """The steps of a plan as a pandas table with every setting filled in."""
    import pandas as pd

    rows = []
    for seg, step in zip(plan.segments(500.0, 12.0), plan.steps, strict=True):
        minutes, seconds = divmod(round(seg.start_min * 60.0), 60)
        rows.append({"time": f"{int(minutes)}:{int(seconds):02d}", "time_min": seg.start_min,
                     "o2_l_min": seg.o2_l_min, "air_l_min": seg.air_l_min,
                     "total_fgf_l_min": round(seg.fgf_l_min, 3),
                     "dial_percent": seg.dial_percent, "note": step.note})
    return pd.DataFrame(rows)


def summary_rows(advice: Advice) -> list[tuple[str, Any]]:
    """Headline figures as (label, value) pairs for front ends."""
    return [("feasible", advice.feasible), ("agent used (mL)", round(advice.agent_ml, 1)),
            ("CO2-equivalent (kg)", None if advice.co2e_kg is None else round(advice.co2e_kg,
                                                                              1)),
            ("time to target (min)", advice.time_to_target_min),
            (f"plain {advice.reference_fgf_l_min:g} L/min plan (mL)",
             round(float(advice.reference.agent_delivered_ml[-1]), 1)),
            ("saved (mL)", round(advice.saved_ml, 1)),
            ("saved (%)", round(advice.saved_percent, 0))]
