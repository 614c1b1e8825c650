"""What a plan achieves and uses, computed from a :class:`~circlesim.result.Result`."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .result import Result

__all__ = ["CaseSummary", "minutes_below", "summarise", "time_to_reach"]


def time_to_reach(time_min: np.ndarray, values: np.ndarray, level: float) -> float | None:
    """First time (min) at which ``values`` reaches ``level`` (linear interpolation).

    Returns None if it never does. Rising or falling is decided by the first value: a series
    that starts below ``level`` is watched for reaching it from below, and vice versa.
    """
    values = np.asarray(values, dtype=float)
    above = values >= level if values[0] < level else values <= level
    hits = np.flatnonzero(above)
    if hits.size == 0:
        return None
    i = int(hits[0])
    if i == 0:
        return float(time_min[0])
    v0, v1 = values[i - 1], values[i]
    frac = 0.0 if v1 == v0 else (level - v0) / (v1 - v0)
    return float(time_min[i - 1] + frac * (time_min[i] - time_min[i - 1]))


def minutes_below(time_min: np.ndarray, values: np.ndarray, level: float) -> float:
    """Total time (min) that ``values`` spends below ``level`` (piecewise-linear)."""
    t = np.asarray(time_min, dtype=float)
    v = np.asarray(values, dtype=float)
    fine_t = np.linspace(t[0], t[-1], max(10 * t.size, 2))
    fine_v = np.interp(fine_t, t, v)
    below = (fine_v < level).astype(float)
    return float(np.sum(0.5 * (below[1:] + below[:-1]) * np.diff(fine_t)))


@dataclass(frozen=True)
class CaseSummary:
    """Headline outcomes of one run.

    Attributes
    ----------
    agent : str
    mac_percent : float
        Age-adjusted MAC, vol%.
    target_end_tidal_percent : float
    time_to_target_min : float or None
        First time end-tidal agent reaches the target (None: never).
    end_tidal_at : dict of float to float
        End-tidal agent (vol%) at the report times.
    fio2_at : dict of float to float
        Inspired O2 fraction at the report times.
    lowest_fio2, lowest_fio2_time_min : float
    minutes_below_fio2_threshold : float
    agent_delivered_ml, agent_delivered_g, agent_vented_ml, agent_uptake_ml : float
        Liquid agent (mL) and its mass (g) over the plan.
    absorbent_used_percent : float
    vo2_ml_min : float
        Oxygen consumption the prediction used (mL/min STPD).
    """

    agent: str
    mac_percent: float
    target_end_tidal_percent: float
    time_to_target_min: float | None
    end_tidal_at: dict[float, float]
    fio2_at: dict[float, float]
    lowest_fio2: float
    lowest_fio2_time_min: float
    minutes_below_fio2_threshold: float
    agent_delivered_ml: float
    agent_delivered_g: float
    agent_vented_ml: float
    agent_uptake_ml: float
    absorbent_used_percent: float
    vo2_ml_min: float


def summarise(result: Result, *, target_end_tidal_mac: float = 1.0,
              report_times_min=(5.0, 10.0, 30.0, 60.0), fio2_threshold: float = 0.30
              ) -> CaseSummary:
    """Headline outcomes of ``result`` (times past the end of the plan are skipped)."""
    t = result.time_min
    et = result.end_tidal_percent("agent")
    fio2 = result.inspired[:, result.gas_index("oxygen")]
    target = target_end_tidal_mac * result.mac_percent
    times = [float(x) for x in report_times_min if 0.0 <= x <= t[-1]]
    i_low = int(np.argmin(fio2))
    delivered_l = result.cumulative["delivered"][-1, result.gas_index("agent")]
    return CaseSummary(
        agent=result.agent,
        mac_percent=result.mac_percent,
        target_end_tidal_percent=target,
        time_to_target_min=time_to_reach(t, et, target),
        end_tidal_at={x: result.at(x, et) for x in times},
        fio2_at={x: result.at(x, fio2) for x in times},
        lowest_fio2=float(fio2[i_low]),
        lowest_fio2_time_min=float(t[i_low]),
        minutes_below_fio2_threshold=minutes_below(t, fio2, fio2_threshold),
        agent_delivered_ml=float(result.agent_delivered_ml[-1]),
        agent_delivered_g=float(result.grams(delivered_l)),
        agent_vented_ml=float(result.agent_vented_ml[-1]),
        agent_uptake_ml=float(result.agent_uptake_ml[-1]),
        absorbent_used_percent=float(100.0 * result.absorbent_used_fraction[-1]),
        vo2_ml_min=result.patient.vo2,
    )
