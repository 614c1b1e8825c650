"""Alert rules as data, and their evaluation on a result.

A rule watches one named series of a :class:`~circlesim.engine.result.Result` and fires while the
series is below (or above) a threshold. The engine attaches the alerts to every result; the
app and the reports show the same alerts. Thresholds are user-set; the defaults and their
sources are listed in :func:`default_rules`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np

from circlesim.base.validation import InputError, Interval, check_number
from circlesim.engine.result import Alert, Result

__all__ = ["SERIES", "AlertRule", "default_rules", "evaluate_alerts", "with_threshold"]


@dataclass(frozen=True)
class AlertRule:
    """One alert rule.

    Parameters
    ----------
    key : str
        Short identifier, e.g. "fio2_low".
    watches : str
        Name of the series it watches (a key of :data:`SERIES`).
    condition : {"below", "above"}
    threshold : float
        In ``unit``.
    unit : str
    message : str
        Text shown; ``{threshold}``, ``{extreme}`` and ``{unit}`` are filled in.
    source : str
        Where the default threshold comes from.
    agents : tuple of str or None
        Only for these agents (None: every agent).
    severity : {"danger", "warning", "caution"}
    """

    key: str
    watches: str
    condition: str
    threshold: float
    unit: str
    message: str
    source: str
    agents: tuple[str, ...] | None = None
    severity: str = "warning"

    def __post_init__(self) -> None:
        if self.condition not in ("below", "above"):
            raise InputError(f"AlertRule.condition must be 'below' or 'above'; got "
                             f"{self.condition!r}.")
        if self.watches not in SERIES:
            raise InputError(f"AlertRule.watches must be one of {', '.join(sorted(SERIES))}; "
                             f"got {self.watches!r}.")
        check_number("AlertRule", "threshold", self.threshold,
                     Interval(-1e12, 1e12, self.unit))


def _inspired(gas: int) -> Callable[[Result], np.ndarray]:
    return lambda r: r.inspired[:, gas]


def _agent_in_use(r: Result) -> np.ndarray:
    return r.end_tidal[:, r.gas_index("agent")] * 100.0 >= 0.1 * r.mac_percent


def _flow_while_agent(r: Result) -> np.ndarray:
    flow = r.flowmeter_total_l_min.copy()
    flow[~_agent_in_use(r)] = np.nan
    return flow


def _mac_hours_at_1_to_2(r: Result) -> np.ndarray:
    flow = r.flowmeter_total_l_min
    in_range = (flow >= 1.0) & (flow < 2.0)
    if not in_range.any():
        return np.zeros(flow.size)
    mac = r.end_tidal[:, r.gas_index("agent")] * 100.0 / r.mac_percent
    rate = np.where(in_range, mac, 0.0) / 60.0
    dt = np.diff(r.time_min, prepend=r.time_min[0])
    return np.cumsum(rate * dt)


def _overfill(r: Result) -> np.ndarray:
    return np.where(r.valve_closed, r.vented_l_min, 0.0)


def _fresh_o2_fraction(r: Result) -> np.ndarray:
    """O2 fraction of the flowmeter gas (vapour from a plenum vaporizer excluded)."""
    agent = r.fresh_gas_by_gas_stpd[:, r.gas_index("agent")]
    return r.fresh_gas_by_gas_stpd[:, 0] / np.maximum(r.fresh_gas_stpd - agent, 1e-12)


def _fresh_gas_surplus(r: Result) -> np.ndarray:
    """O2, air and N2O flows minus the patient's uptake of O2, N2 and N2O, the leak and the lost
    sample gas, L/min at flowmeter conditions; below 0 the circuit loses gas. The agent is left
    out on both sides (vaporizer output or injected liquid replaces what is taken up)."""
    ia = r.gas_index("agent")
    carrier = r.fresh_gas_stpd - r.fresh_gas_by_gas_stpd[:, ia]
    uptake = r.uptake_stpd[:, 0] + r.uptake_stpd[:, 2] + r.uptake_stpd[:, 3]
    return (carrier - uptake - r.leak_stpd - r.sample_lost_stpd) / r.k_circuit


#: Named series that rules can watch: name -> function of a Result giving shape (T,).
SERIES: dict[str, Callable[[Result], np.ndarray]] = {
    "inspired_o2_fraction": _inspired(0),
    "end_tidal_o2_fraction": lambda r: r.end_tidal[:, 0],
    "inspired_co2_kpa": lambda r: r.inspired[:, 1] * r.circuit.ambient_pressure_kpa,
    "bag_volume_l": lambda r: r.bag_volume_l,
    "air_entrained_l_min": lambda r: r.entrained_stpd / r.k_circuit,
    "overfill_vented_l_min": _overfill,
    "fresh_gas_while_agent_l_min": _flow_while_agent,
    "mac_hours_at_1_to_2_l_min": _mac_hours_at_1_to_2,
    "end_tidal_agent_mac": lambda r: r.end_tidal[:, r.gas_index("agent")] * 100.0 / r.mac_percent,
    "fresh_gas_o2_fraction": _fresh_o2_fraction,
    "fresh_gas_surplus_l_min": _fresh_gas_surplus,
}

SEVOFLURANE_LABEL = ("US sevoflurane labelling (secondary and memory; check the current label): "
                     "fresh gas flows below 1 L/min are not recommended; exposure should not "
                     "exceed 2 MAC-hours at 1 to < 2 L/min")


def default_rules(fio2_threshold: float = 0.30, inspired_co2_kpa: float = 0.5,
                  fresh_o2_minimum: float | None = None,
                  fresh_gas_margin_l_min: float = -0.001) -> tuple[AlertRule, ...]:
    """The standard alert rules.

    Parameters
    ----------
    fio2_threshold : float, 0.21–1
        Lowest acceptable inspired O2 fraction (default 0.30, common practice for low-flow
        anaesthesia).
    inspired_co2_kpa : float, kPa, 0.1–5
        Inspired CO2 that signals spent absorbent (default 0.5 kPa, common practice).
    fresh_o2_minimum : float or None, 0.21–1
        The department's lowest O2 fraction of the fresh gas (flowmeter gas). Default: the
        FIO2 threshold, because in steady state the inspired O2 fraction is always below the
        fresh-gas fraction (mass balance, docs/oxygen.md), so fresh gas with less O2 than the
        threshold cannot keep FIO2 above it. Set your local rule (e.g. a higher minimum for
        minimal flow).
    fresh_gas_margin_l_min : float, L/min, −1–5
        Warn when the O2, air and N2O flows minus the patient's uptake of O2, N2O and N2, the
        leak and the lost sample gas fall below this (the agent is left out: its vapour or
        injected liquid replaces its uptake). Default −0.001 L/min: any shortfall larger than
        round-off (1 mL/min, below a flowmeter's resolution), since then the bag empties (mass
        balance).
    """
    check_number("default_rules", "fio2_threshold", fio2_threshold, Interval(0.21, 1.0))
    check_number("default_rules", "inspired_co2_kpa", inspired_co2_kpa, Interval(0.1, 5.0, "kPa"))
    fresh_minimum = fio2_threshold if fresh_o2_minimum is None else fresh_o2_minimum
    check_number("default_rules", "fresh_o2_minimum", fresh_minimum, Interval(0.21, 1.0))
    check_number("default_rules", "fresh_gas_margin_l_min", fresh_gas_margin_l_min,
                 Interval(-1.0, 5.0, "L/min"))
    return _standard_rules(float(fio2_threshold), float(inspired_co2_kpa), float(fresh_minimum),
                           float(fresh_gas_margin_l_min))


@lru_cache(maxsize=16)
def _standard_rules(fio2_threshold: float, inspired_co2_kpa: float, fresh_minimum: float,
                    fresh_gas_margin_l_min: float) -> tuple[AlertRule, ...]:
    """The rules of :func:`default_rules` for checked thresholds, made once per set of
    thresholds: every run asks for them, and frozen rules can be shared."""
    return (
        AlertRule("fio2_low", "inspired_o2_fraction", "below", fio2_threshold, "",
                  "Inspired O2 fraction falls below {threshold:.2f} (lowest {extreme:.3f}). "
                  "Raise the O2 flow or the total fresh gas flow.",
                  "user threshold; default 0.30 (common practice)", severity="danger"),
        AlertRule("inspired_co2", "inspired_co2_kpa", "above", inspired_co2_kpa, "kPa",
                  "Inspired CO2 above {threshold:g} kPa (highest {extreme:.2f} kPa): the "
                  "absorbent is spent. Change the canister or raise the fresh gas flow.",
                  "default 0.5 kPa (common practice)", severity="danger"),
        AlertRule("bag_empty", "air_entrained_l_min", "above", 1e-6, "L/min",
                  "The reservoir bag runs empty: fresh gas is less than uptake and losses. "
                  "From here the prediction assumes room air is drawn in to keep ventilation "
                  "going; a real circuit may fail to ventilate.",
                  "mass balance", severity="danger"),
        AlertRule("bag_overfilled", "overfill_vented_l_min", "above", 1e-6, "L/min",
                  "With the valve closed the bag fills to capacity; the excess is assumed to "
                  "escape through the pressure relief. Reduce the fresh gas flow or open the "
                  "valve.", "mass balance", severity="warning"),
        AlertRule("sevoflurane_low_flow", "fresh_gas_while_agent_l_min", "below", 1.0, "L/min",
                  "Sevoflurane at a fresh gas flow below 1 L/min (lowest {extreme:.2f} L/min): "
                  "outside the US product labelling. Local policy decides.",
                  SEVOFLURANE_LABEL, agents=("sevoflurane",), severity="caution"),
        AlertRule("sevoflurane_mac_hours", "mac_hours_at_1_to_2_l_min", "above", 2.0,
                  "MAC-hours", "More than 2 MAC-hours of sevoflurane at 1 to < 2 L/min "
                  "(reaches {extreme:.1f}): outside the US product labelling.",
                  SEVOFLURANE_LABEL, agents=("sevoflurane",), severity="caution"),
        AlertRule("fresh_o2_low", "fresh_gas_o2_fraction", "below", fresh_minimum, "",
                  "Fresh gas O2 fraction {extreme:.2f} is below the local minimum "
                  "{threshold:.2f}. Raise the O2 share of the fresh gas.",
                  "user's local minimum; default the FIO2 threshold (mass balance: in steady "
                  "state FIO2 stays below the fresh-gas O2 fraction, docs/oxygen.md)",
                  severity="warning"),
        AlertRule("fgf_below_uptake", "fresh_gas_surplus_l_min", "below", fresh_gas_margin_l_min,
                  "L/min", "Fresh gas flow (O2, air, N2O) is less than the patient's estimated "
                  "uptake of O2, N2O and N2 plus leak and lost sample gas (lowest surplus "
                  "{extreme:+.3f} L/min): the bag empties unless the flow is raised.",
                  "mass balance; default margin -0.001 L/min (round-off)", severity="warning"),
    )


def with_threshold(rules: Iterable[AlertRule], key: str, threshold: float) -> tuple[
        AlertRule, ...]:
    """A copy of ``rules`` with the threshold of rule ``key`` changed."""
    rules = tuple(rules)
    if key not in {r.key for r in rules}:
        raise InputError(f"no alert rule {key!r}; rules: {', '.join(r.key for r in rules)}.")
    return tuple(replace(r, threshold=threshold) if r.key == key else r for r in rules)


def evaluate_alerts(result: Result, rules: Iterable[AlertRule]) -> tuple[Alert, ...]:
    """Alerts that fire for ``result``, in order of start time.

    Each stretch of output times during which a rule's condition holds gives one alert.
    """
    out = []
    for rule in rules:
        if rule.agents is not None and result.agent not in rule.agents:
            continue
        values = np.asarray(SERIES[rule.watches](result), dtype=float)
        with np.errstate(invalid="ignore"):
            if rule.condition == "below":
                firing = values < rule.threshold
            else:
                firing = values > rule.threshold
        firing &= np.isfinite(values)
        if not firing.any():
            continue
        edges = np.flatnonzero(np.diff(np.concatenate(([0], firing.astype(np.int8), [0]))))
        for start, stop in zip(edges[::2], edges[1::2], strict=True):
            stretch = values[start:stop]
            extreme = float(stretch.min() if rule.condition == "below" else stretch.max())
            end = None if stop == len(values) else float(result.time_min[stop - 1])
            out.append(Alert(
                key=rule.key, severity=rule.severity, source=rule.source,
                message=rule.message.format(threshold=rule.threshold, extreme=extreme,
                                            unit=rule.unit),
                start_min=float(result.time_min[start]), end_min=end, extreme=extreme))
    return tuple(sorted(out, key=lambda a: (a.start_min, a.key)))
