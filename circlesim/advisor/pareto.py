"""The trade-off between time to the first target (min) and liquid agent used (mL) (analysis).

:func:`pareto_front` finds the least-agent plan for a spread of deadlines and keeps the
non-dominated points (:attr:`circlesim.advisor.answer.Advice.pareto`).
"""

from __future__ import annotations

import numpy as np

from circlesim.advisor.answer import ParetoPoint
from circlesim.advisor.search import Candidate, Problem, plan_of
from circlesim.outcomes.emissions import co2_equivalent_kg

__all__ = ["PARETO_MARGINS", "pareto_front"]

#: Margins for the plans of the trade-off curve (quicker, a little less tight).
PARETO_MARGINS = (0.012, 0.03)


def _reach_time(prob: Problem, cand: Candidate) -> float:
    """First band time at which the candidate is within the tolerance of the first target."""
    level = prob.levels[0][1] / 100.0
    ok = np.abs(cand.solution.et / level - 1.0) <= prob.targets.tolerance
    return float(cand.solution.time_min[np.argmax(ok)]) if ok.any() else float(cand.t1)


def pareto_front(prob: Problem, deadline: float, best: Candidate, gwp_value
                 ) -> tuple[ParetoPoint, ...]:
    """Least agent for a spread of deadlines; the non-dominated points.

    Parameters
    ----------
    prob : Problem
    deadline : float, min
        Time allowed to reach the first target (the advice's own plan).
    best : Candidate
        The advised plan, one of the points.
    gwp_value : Gwp
        Global-warming potential of the agent, for the CO2-equivalents (kg).

    Returns
    -------
    tuple of ParetoPoint
        Fastest first; each uses less agent than the one before.
    """
    fastest, soonest = prob.fastest(max(deadline, 0.5), PARETO_MARGINS)
    if not fastest.fits:
        return ()
    far = max(3.0 * max(deadline, soonest), 20.0)
    deadlines = sorted({round(x, 1) for x in np.geomspace(soonest, far, 4)[1:]}
                       - {round(deadline, 1)})
    cands = [fastest, best] + [prob.least_agent(d, refine=False, margins=PARETO_MARGINS)
                               for d in deadlines]
    points = []
    for c in cands:
        if not c.fits:
            continue
        c = prob.polish_best(c, tries=1, margins=PARETO_MARGINS)
        if not c.fits:
            continue
        plan = plan_of(prob, c, "agent")
        reach = _reach_time(prob, c)
        grams = c.agent_ml * prob.runner.vaporizer.properties.liquid_density_g_ml
        points.append(ParetoPoint(reach, c.agent_ml, co2_equivalent_kg(grams, gwp_value),
                                  c.washin_fgf, c.t1, c.maintenance_fgf, plan))
    points.sort(key=lambda p: (p.time_to_target_min, p.agent_ml))
    front: list[ParetoPoint] = []
    for p in points:
        if not front or p.agent_ml < front[-1].agent_ml - 1e-6:
            front.append(p)
    return tuple(front)
