"""What a plan achieves and uses, computed from a :class:`~circlesim.engine.result.Result`.

Achieves: time to reach and time within ±10 % of an end-tidal target, settling time, peak and
overshoot, MAC-hours (agent alone and with N2O added, Mapleson 1996), brain partial pressure at
chosen times, lowest FIO2 and minutes below a threshold. Uses: liquid agent (mL and g), agent
sent to the scavenger, N2O, absorbent and the canister life left
(:mod:`circlesim.outcomes.canister`), CO2-equivalent emissions
(:mod:`circlesim.outcomes.emissions`) and cost at user-set prices (:mod:`circlesim.domain.costs`).
Every formula with its source is in ``docs/outcomes.md``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from circlesim.base.units import vapour_l_stpd_to_grams
from circlesim.base.validation import InputError, Interval, check_choice, check_number
from circlesim.domain.costs import CostBreakdown, Prices, cost_of
from circlesim.engine.result import Result
from circlesim.outcomes.canister import CanisterLife, canister_life
from circlesim.outcomes.emissions import (
    DEFAULT_GWP_HORIZON,
    Gwp,
    check_horizon,
    co2_equivalent_kg,
    gwp,
)
from circlesim.outcomes.mac import mac_hours
from circlesim.properties import NITROUS_OXIDE

__all__ = [
    "CaseSummary",
    "minutes_below",
    "minutes_within",
    "overshoot_percent",
    "settling_time",
    "summarise",
    "time_to_reach",
]


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


#: Series handled at once by :func:`minutes_below`.
_BLOCK = 32


def minutes_below(time_min: np.ndarray, values: np.ndarray, level: float) -> float | np.ndarray:
    """Total time (min) that ``values`` spends below ``level`` (piecewise-linear).

    ``values`` has time on its last axis; a 1-D series gives a float, a stack of series
    (shape (..., T)) an array of shape (...). The series is resampled ten times finer by
    linear interpolation (as ``numpy.interp``) and the time below is summed by the trapezoid
    rule.
    """
    t = np.asarray(time_min, dtype=float)
    values = np.asarray(values, dtype=float)
    v = values.reshape(-1, values.shape[-1])  # one row per series: the same sums either way
    fine_t = np.linspace(t[0], t[-1], max(10 * t.size, 2))
    below = np.empty((v.shape[0], fine_t.size), dtype=bool)
    if t.size > 1:
        # numpy.interp's formula (slope of the interval, times the distance into it), for
        # blocks of series small enough to stay in the processor's cache
        j = np.clip(np.searchsorted(t, fine_t, side="right") - 1, 0, t.size - 2)
        offset = fine_t - t[j]
        end = fine_t >= t[-1]
        for start in range(0, v.shape[0], _BLOCK):
            block = v[start:start + _BLOCK]
            slope = np.diff(block, axis=-1) / np.diff(t)
            fine_v = slope[:, j] * offset + block[:, j]
            fine_v[:, end] = block[:, -1:]
            np.less(fine_v, level, out=below[start:start + _BLOCK])
    else:
        below[:] = v[:, :1] < level
    # trapezoid rule on the evenly spaced fine grid: counts are exact whatever the shape
    halves = 2 * np.count_nonzero(below, axis=-1) - below[:, 0] - below[:, -1]
    minutes = 0.5 * halves * ((t[-1] - t[0]) / (fine_t.size - 1))
    return float(minutes[0]) if values.ndim == 1 else minutes.reshape(values.shape[:-1])


def minutes_within(time_min: np.ndarray, values: np.ndarray, low: float, high: float) -> float:
    """Total time (min) with ``low <= values < high`` (piecewise-linear, like
    :func:`minutes_below`)."""
    return minutes_below(time_min, values, high) - minutes_below(time_min, values, low)


def settling_time(time_min: np.ndarray, values: np.ndarray, low: float,
                  high: float) -> float | None:
    """Time (min) from which ``values`` stays within ``[low, high]`` to the end of the series.

    Returns None if the last value lies outside the band. The entry into the band is found
    by linear interpolation.
    """
    t = np.asarray(time_min, dtype=float)
    v = np.asarray(values, dtype=float)
    outside = (v < low) | (v > high)
    if outside[-1]:
        return None
    if not outside.any():
        return float(t[0])
    i = int(np.flatnonzero(outside)[-1])
    edge = low if v[i] < low else high
    v0, v1 = v[i], v[i + 1]
    frac = 0.0 if v1 == v0 else (edge - v0) / (v1 - v0)
    return float(t[i] + frac * (t[i + 1] - t[i]))


def overshoot_percent(time_min: np.ndarray, values: np.ndarray, target: float) -> float | None:
    """How far ``values`` rises above ``target`` after first reaching it, % of ``target``.

    ``100 × (peak after reaching − target) / target``, 0 when it never exceeds the target and
    None when it never reaches it. Meant for a rising wash-in towards a target.
    """
    t = np.asarray(time_min, dtype=float)
    v = np.asarray(values, dtype=float)
    reached = float(t[0]) if v[0] >= target else time_to_reach(t, v, target)
    if reached is None:
        return None
    peak = float(v[t >= reached].max(initial=target))
    return max(0.0, 100.0 * (peak - target) / target)


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
        First time the end-tidal depth (see ``target_basis``) reaches the target (None: never).
    end_tidal_at : dict of float to float
        End-tidal agent (vol%) at the report times.
    fio2_at : dict of float to float
        Inspired O2 fraction at the report times.
    lowest_fio2, lowest_fio2_time_min : float
    minutes_below_fio2_threshold : float
    agent_delivered_ml, agent_delivered_g, agent_vented_ml, agent_uptake_ml : float
        Liquid agent (mL) and its mass (g) over the plan. ``agent_vented_ml`` counts all agent
        that left the circuit (valve, leak and sample gas not returned).
    absorbent_used_percent : float
        Canister used at the end of the plan, % of its capacity.
    vo2_ml_min : float
        Oxygen consumption the prediction used (mL/min STPD).
    target_end_tidal_mac : float
        The target as a multiple of the age-adjusted MAC.
    target_basis : {"total", "agent"}
        What the target, time to target, time within ±10 %, settling time, peak and overshoot
        measure: "total" the end-tidal MAC multiples of agent and N2O added (Mapleson 1996),
        "agent" the agent alone. Without N2O the two are the same.
    fio2_threshold : float
    n2o_mac_percent : float
        Age-adjusted MAC of N2O, vol%.
    minutes_within_10_percent : float
        Time with the end-tidal depth within ±10 % of the target, min.
    settling_time_min : float or None
        Time from which the end-tidal depth stays within ±10 % of the target to the end, min.
    peak_end_tidal_mac : float
        Highest end-tidal depth, MAC.
    overshoot_percent : float or None
        Rise above the target after first reaching it, % of the target.
    mac_hours, total_mac_hours : float
        End-tidal MAC-hours of the agent, and of agent and N2O added.
    brain_kpa_at, brain_mac_at : dict of float to float
        Brain (vessel-rich group) agent partial pressure at the report times, kPa and MAC.
    agent_scavenged_ml, agent_leaked_ml : float
        Liquid-equivalent agent sent to the scavenger (valve and lost sample gas) and leaked
        into the room, mL.
    liquid_density_g_ml : float
    liquid_density_source : str
        Density used for mL, with the temperature it applies at.
    n2o_used_l, n2o_used_g : float
        N2O from the flowmeter, L at the flowmeters' conditions and g.
    co2_absorbed_l : float
        CO2 taken up by the absorbent during the plan, L STPD.
    absorbent_used_g : float
        Absorbent granules used up during the plan, g.
    canister : CanisterLife or None
    gwp_horizon_years : int
    agent_gwp, n2o_gwp : Gwp or None
    agent_co2e_kg, n2o_co2e_kg : float or None
        CO2-equivalent of all agent and N2O delivered (None: no GWP for the agent).
    cost : CostBreakdown or None
        None when no prices were given.
    warnings : int
        Number of alerts raised.
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
    target_end_tidal_mac: float = 1.0
    target_basis: str = "total"
    fio2_threshold: float = 0.30
    n2o_mac_percent: float = float("nan")
    minutes_within_10_percent: float = 0.0
    settling_time_min: float | None = None
    peak_end_tidal_mac: float = float("nan")
    overshoot_percent: float | None = None
    mac_hours: float = 0.0
    total_mac_hours: float = 0.0
    brain_kpa_at: dict[float, float] = field(default_factory=dict)
    brain_mac_at: dict[float, float] = field(default_factory=dict)
    agent_scavenged_ml: float = 0.0
    agent_leaked_ml: float = 0.0
    liquid_density_g_ml: float = float("nan")
    liquid_density_source: str = ""
    n2o_used_l: float = 0.0
    n2o_used_g: float = 0.0
    co2_absorbed_l: float = 0.0
    absorbent_used_g: float = 0.0
    canister: CanisterLife | None = None
    gwp_horizon_years: int = DEFAULT_GWP_HORIZON
    agent_gwp: Gwp | None = None
    n2o_gwp: Gwp | None = None
    agent_co2e_kg: float | None = None
    n2o_co2e_kg: float | None = None
    cost: CostBreakdown | None = None
    warnings: int = 0

    @property
    def total_co2e_kg(self) -> float | None:
        """CO2-equivalent of agent and N2O, kg (None when the agent has no GWP)."""
        if self.agent_co2e_kg is None:
            return None
        return self.agent_co2e_kg + (self.n2o_co2e_kg or 0.0)

    def row(self, currency: str | None = None) -> dict[str, object]:
        """The outcomes as one table row: column label (with unit) -> value.

        Missing values (target never reached, no GWP, no price) are None. ``currency``
        labels the cost columns (default: the currency of :attr:`cost`), so rows of several
        plans line up even when some have no prices.
        """
        h = self.gwp_horizon_years
        if currency is None:
            currency = self.cost.currency if self.cost is not None else ""
        cur = f" ({currency})" if currency else ""
        basis = "agent + N2O" if self.target_basis == "total" else "agent"
        cost = self.cost or CostBreakdown(None, None, None)
        can = self.canister
        out: dict[str, object] = {
            "agent": self.agent,
            f"target, MAC ({basis})": self.target_end_tidal_mac,
            "time to target, min": self.time_to_target_min,
            "within ±10 % of target, min": self.minutes_within_10_percent,
            "stays within ±10 % from, min": self.settling_time_min,
            f"peak end-tidal, MAC ({basis})": self.peak_end_tidal_mac,
            "overshoot, % of target": self.overshoot_percent,
            "MAC-hours (agent)": self.mac_hours,
            "MAC-hours (agent + N2O)": self.total_mac_hours,
        }
        for t, v in self.brain_mac_at.items():
            out[f"brain at {t:g} min, MAC"] = v
        out.update({
            "agent delivered, mL": self.agent_delivered_ml,
            "agent delivered, g": self.agent_delivered_g,
            "agent to scavenger, mL": self.agent_scavenged_ml,
            "agent taken up, mL": self.agent_uptake_ml,
            "N2O used, L": self.n2o_used_l,
            f"CO2-eq agent (GWP{h}), kg": self.agent_co2e_kg,
            f"CO2-eq N2O (GWP{h}), kg": self.n2o_co2e_kg,
            f"CO2-eq total (GWP{h}), kg": self.total_co2e_kg,
            f"cost agent{cur}": cost.agent,
            f"cost N2O{cur}": cost.nitrous_oxide,
            f"cost absorbent{cur}": cost.absorbent,
            f"cost total{cur}": cost.total,
            "absorbent used, g": self.absorbent_used_g,
            "canister used at end, %": self.absorbent_used_percent,
            "canister life left at end-of-plan rate (extrapolated), min":
                None if can is None else can.remaining_min,
            "fresh canister life at end-of-plan rate (extrapolated), min":
                None if can is None else can.fresh_canister_min,
            "lowest FIO2": self.lowest_fio2,
            f"min below FIO2 {self.fio2_threshold:g}": self.minutes_below_fio2_threshold,
            "warnings": self.warnings,
        })
        return out


#: Report times used when none are given, min (those within the plan).
DEFAULT_REPORT_TIMES_MIN = (5.0, 10.0, 30.0, 60.0)


def report_times_within(times_min: Sequence[float] | None, end_min: float) -> list[float]:
    """The report times for a plan of ``end_min`` min.

    Raises
    ------
    InputError
        If a given time lies outside the plan, naming it and the plan's length (default
        times past the end are simply not used: nobody asked for them).
    """
    if times_min is None:
        return [t for t in DEFAULT_REPORT_TIMES_MIN if t <= end_min]
    out = []
    for i, t in enumerate(times_min):
        if not 0.0 <= float(t) <= end_min + 1e-9:
            raise InputError(f"report time {i + 1} ({float(t):g} min) lies outside the plan; "
                             f"report times must be from 0 to the plan's length, "
                             f"{end_min:g} min.")
        out.append(float(t))
    return out


def summarise(result: Result, *, target_end_tidal_mac: float = 1.0,
              report_times_min: Sequence[float] | None = None, fio2_threshold: float = 0.30,
              gwp_horizon: int = DEFAULT_GWP_HORIZON, prices: Prices | None = None,
              target_basis: str = "total") -> CaseSummary:
    """Headline outcomes of ``result``.

    Parameters
    ----------
    result : Result
    target_end_tidal_mac : float, MAC, 0.1–3
        End-tidal target as a multiple of the age-adjusted MAC.
    report_times_min : sequence of float or None, min
        Times for end-tidal agent, FIO2 and brain partial pressure, each within the plan.
        None: :data:`DEFAULT_REPORT_TIMES_MIN`, those within the plan.
    fio2_threshold : float, 0.21–1
    gwp_horizon : {20, 100}, years
    prices : Prices, optional
        Without prices no cost is computed.
    target_basis : {"total", "agent"}
        Whether the target counts N2O's MAC fraction with the agent's ("total", the default)
        or the agent alone. Identical for plans without N2O.
    """
    check_number("summarise", "target_end_tidal_mac", target_end_tidal_mac,
                 Interval(0.1, 3.0, "MAC"))
    check_number("summarise", "fio2_threshold", fio2_threshold, Interval(0.21, 1.0))
    horizon = check_horizon(gwp_horizon)
    basis = check_choice("summarise", "target_basis", target_basis, ("total", "agent"))
    t = result.time_min
    ia = result.gas_index("agent")
    i_n2o = result.gas_index("nitrous_oxide")
    et = result.end_tidal_percent("agent")
    et_mac = et / result.mac_percent
    n2o_mac = result.n2o_mac_percent
    fio2 = result.inspired[:, result.gas_index("oxygen")]
    brain = result.tissue[:, result.tissue_index("brain"), result.soluble_index("agent")]
    target = target_end_tidal_mac * result.mac_percent
    total = et_mac + result.end_tidal_percent("nitrous_oxide") / n2o_mac
    depth = total if basis == "total" else et_mac
    low, high = 0.9 * target_end_tidal_mac, 1.1 * target_end_tidal_mac
    times = report_times_within(report_times_min, float(t[-1]))
    i_low = int(np.argmin(fio2))
    cum = result.cumulative
    delivered_g = float(result.grams(cum["delivered"][-1, ia]))
    n2o_l_stpd = float(cum["delivered"][-1, i_n2o])
    n2o_g = float(vapour_l_stpd_to_grams(n2o_l_stpd, NITROUS_OXIDE.molar_mass_g_mol))
    used = result.absorbent_used_fraction
    absorbent_g = float((used[-1] - used[0]) * result.absorber.granule_mass_g)
    agent_gwp, n2o_gwp = gwp(result.agent, horizon), gwp("nitrous_oxide", horizon)
    delivered_ml = float(result.agent_delivered_ml[-1])
    n2o_l = n2o_l_stpd / result.k_circuit
    density = result.vaporizer.properties.liquid_density_g_ml
    return CaseSummary(
        agent=result.agent,
        mac_percent=result.mac_percent,
        target_end_tidal_percent=target,
        time_to_target_min=time_to_reach(t, depth, target_end_tidal_mac),
        end_tidal_at={x: result.at(x, et) for x in times},
        fio2_at={x: result.at(x, fio2) for x in times},
        lowest_fio2=float(fio2[i_low]),
        lowest_fio2_time_min=float(t[i_low]),
        minutes_below_fio2_threshold=minutes_below(t, fio2, fio2_threshold),
        agent_delivered_ml=delivered_ml,
        agent_delivered_g=delivered_g,
        agent_vented_ml=float(result.agent_vented_ml[-1]),
        agent_uptake_ml=float(result.agent_uptake_ml[-1]),
        absorbent_used_percent=float(100.0 * used[-1]),
        vo2_ml_min=result.patient.vo2,
        target_end_tidal_mac=float(target_end_tidal_mac),
        target_basis=basis,
        fio2_threshold=float(fio2_threshold),
        n2o_mac_percent=n2o_mac,
        minutes_within_10_percent=minutes_within(t, depth, low, high),
        settling_time_min=settling_time(t, depth, low, high),
        peak_end_tidal_mac=float(depth.max()),
        overshoot_percent=overshoot_percent(t, depth, target_end_tidal_mac),
        mac_hours=mac_hours(t, et_mac),
        total_mac_hours=mac_hours(t, total),
        brain_kpa_at={x: result.at(x, result.partial_pressure_kpa(brain)) for x in times},
        brain_mac_at={x: result.at(x, 100.0 * brain / result.mac_percent) for x in times},
        agent_scavenged_ml=float(result.liquid_ml(cum["vented"][-1, ia]
                                                  + cum["sampled"][-1, ia])),
        agent_leaked_ml=float(result.liquid_ml(cum["leaked"][-1, ia])),
        liquid_density_g_ml=float(density),
        liquid_density_source=density.source,
        n2o_used_l=n2o_l,
        n2o_used_g=n2o_g,
        co2_absorbed_l=float(cum["absorbed"][-1, result.gas_index("carbon_dioxide")]),
        absorbent_used_g=absorbent_g,
        canister=canister_life(result),
        gwp_horizon_years=horizon,
        agent_gwp=agent_gwp,
        n2o_gwp=n2o_gwp,
        agent_co2e_kg=co2_equivalent_kg(delivered_g, agent_gwp),
        n2o_co2e_kg=co2_equivalent_kg(n2o_g, n2o_gwp),
        cost=None if prices is None else cost_of(prices, agent_ml=delivered_ml, n2o_l=n2o_l,
                                                 absorbent_g=absorbent_g),
        warnings=len(result.alerts),
    )
