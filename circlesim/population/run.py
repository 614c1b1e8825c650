"""Virtual-patient populations: run plans over many patients and summarise the spread.

:func:`compare_populations` runs each scenario's plan (with its breathing system, vaporizer and
report settings) over the *same* virtual patients — drawn with
:func:`circlesim.population.virtual_patients.sample_patients` — and returns one
:class:`PopulationResult`
per plan. The patients are cut into chunks; each chunk is one batch integration
(:func:`circlesim.engine.batch.simulate_batch`) and the chunks run on local processes or a Dask
cluster (:func:`circlesim.base.distributed.map_chunks`). The numbers do not depend on where or in
what chunks they ran.

A :class:`PopulationResult` holds every patient's curves (see :data:`SERIES`) on one time grid
and a table of outcomes per patient, and gives the median and 5–95 % band of every curve, the
probability of reaching the end-tidal target by a given time, the probability that FIO2 falls
below a threshold, and the distributions of agent used and CO2-equivalent emissions.

Plans with end-tidal targets (target mode) are run patient by patient with
:func:`circlesim.simulate`, because the controller chooses each patient's dial; their curves
are put on the same time grid by linear interpolation.
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from circlesim.base.distributed import map_chunks
from circlesim.base.files import write_text_atomic
from circlesim.base.units import vapour_l_stpd_to_grams
from circlesim.base.validation import InputError, Interval, check_choice, check_number
from circlesim.domain.patient import Patient
from circlesim.engine.batch import simulate_batch
from circlesim.engine.simulate import output_times
from circlesim.outcomes.emissions import DEFAULT_GWP_HORIZON, check_horizon, co2_equivalent_kg, gwp
from circlesim.outcomes.summary import minutes_below, time_to_reach
from circlesim.population.virtual_patients import VirtualPatients
from circlesim.properties import NITROUS_OXIDE
from circlesim.scenario import Scenario
from circlesim.targets.predict import simulate

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["DEFAULT_SERIES", "OUTCOMES", "SERIES", "PopulationResult", "Series",
           "compare_populations", "outcomes_frame", "probability_table", "run_population",
           "save_outcomes"]


@dataclass(frozen=True)
class Series:
    """A curve kept for every patient.

    Attributes
    ----------
    key : str
    label : str
        Name for display.
    unit : str
    values : callable
        ``values(result)`` gives the curve from a Result (shape (T,)) or a BatchResult
        (shape (B, T)).
    """

    key: str
    label: str
    unit: str
    values: Callable[[Any], np.ndarray]


def _per_mac(r, values: np.ndarray) -> np.ndarray:
    return values / np.asarray(r.mac_percent, dtype=float)[..., None]


def _fa_fi(r, gas: str) -> np.ndarray:
    fi = r.inspired_percent(gas)
    fa = r.end_tidal_percent(gas)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(fi > 1e-6, fa / fi, np.nan)


_SERIES_LIST = (
    Series("end_tidal_agent_percent", "End-tidal agent", "vol%",
           lambda r: r.end_tidal_percent("agent")),
    Series("end_tidal_agent_mac", "End-tidal agent", "× age-adjusted MAC",
           lambda r: _per_mac(r, r.end_tidal_percent("agent"))),
    Series("end_tidal_total_mac", "End-tidal agent + N2O", "× age-adjusted MAC",
           lambda r: _per_mac(r, r.end_tidal_percent("agent")) + r.end_tidal_percent(
               "nitrous_oxide") / np.asarray(r.n2o_mac_percent, dtype=float)[..., None]),
    Series("inspired_agent_percent", "Inspired agent", "vol%",
           lambda r: r.inspired_percent("agent")),
    Series("brain_agent_mac", "Brain (vessel-rich group) agent", "× age-adjusted MAC",
           lambda r: _per_mac(r, r.brain_percent("agent"))),
    Series("fio2", "Inspired O2 (FIO2)", "fraction",
           lambda r: r.inspired[..., r.gas_index("oxygen")]),
    Series("end_tidal_o2", "End-tidal O2", "fraction",
           lambda r: r.end_tidal[..., r.gas_index("oxygen")]),
    Series("inspired_n2o_percent", "Inspired N2O", "vol%",
           lambda r: r.inspired_percent("nitrous_oxide")),
    Series("inspired_n2_percent", "Inspired N2", "vol%",
           lambda r: r.inspired_percent("nitrogen")),
    Series("inspired_co2_percent", "Inspired CO2", "vol%",
           lambda r: r.inspired_percent("carbon_dioxide")),
    Series("bag_volume_l", "Reservoir bag volume", "L", lambda r: r.bag_volume_l),
    Series("vented_l_min", "Vented gas", "L/min", lambda r: r.vented_l_min),
    Series("agent_delivered_ml", "Liquid agent delivered", "mL",
           lambda r: r.agent_delivered_ml),
    Series("agent_uptake_ml", "Agent taken up by the patient", "mL (liquid)",
           lambda r: r.agent_uptake_ml),
    Series("fa_fi_agent", "FA/FI of the agent", "ratio", lambda r: _fa_fi(r, "agent")),
    Series("fa_fi_n2o", "FA/FI of N2O", "ratio", lambda r: _fa_fi(r, "nitrous_oxide")),
)
#: Every curve a population run can keep, by key.
SERIES: dict[str, Series] = {s.key: s for s in _SERIES_LIST}
#: Curves kept unless asked otherwise (FA/FI only means something at constant inspired gas).
DEFAULT_SERIES = tuple(k for k in SERIES if not k.startswith("fa_fi"))
_NEEDED = ("end_tidal_agent_mac", "end_tidal_total_mac", "fio2")

#: Quantities at the end of the plan, per patient (Result or BatchResult).
_END: dict[str, Callable[[Any], Any]] = {
    "agent_delivered_ml": lambda r: r.agent_delivered_ml[..., -1],
    "agent_delivered_g": lambda r: r.grams(
        r.cumulative["delivered"][..., -1, r.gas_index("agent")]),
    "n2o_delivered_g": lambda r: vapour_l_stpd_to_grams(
        r.cumulative["delivered"][..., -1, r.gas_index("nitrous_oxide")],
        NITROUS_OXIDE.molar_mass_g_mol),
    "absorbent_used_percent": lambda r: 100.0 * r.absorbent_used_fraction[..., -1],
}

#: Outcome columns of :attr:`PopulationResult.outcomes`: key -> label with unit.
OUTCOMES = {
    "time_to_target_min": "time to end-tidal target, min",
    "end_tidal_mac_at_end": "end-tidal depth at the end, MAC",
    "lowest_fio2": "lowest FIO2",
    "minutes_below_fio2_threshold": "time with FIO2 below threshold, min",
    "agent_delivered_ml": "liquid agent delivered, mL",
    "agent_delivered_g": "agent delivered, g",
    "n2o_delivered_g": "N2O delivered, g",
    "co2e_agent_kg": "CO2-eq of agent, kg",
    "co2e_n2o_kg": "CO2-eq of N2O, kg",
    "co2e_kg": "CO2-eq total, kg",
    "absorbent_used_percent": "absorbent used, % of canister",
}


@dataclass(frozen=True)
class _Task:
    """One chunk of patients for one scenario (sent to a worker)."""

    scenario_index: int
    scenario: Scenario
    patients: tuple[Patient, ...]
    series: tuple[str, ...]
    output_interval_min: float
    rtol: float
    gwp_horizon: int
    target_basis: str


@dataclass(frozen=True)
class _Chunk:
    time_min: np.ndarray
    curves: dict[str, np.ndarray]
    outcomes: dict[str, np.ndarray]


def _has_targets(plan) -> bool:
    return bool(getattr(plan, "has_targets", False))


def _run_task(task: _Task, parallel: bool) -> _Chunk:
    """Run one chunk: a batch integration (or patient by patient for target-mode plans)."""
    sc = task.scenario
    names = tuple(dict.fromkeys((*task.series, *_NEEDED)))
    if _has_targets(sc.plan):
        t_out = output_times(sc.plan.duration_min, task.output_interval_min, sc.plan.step_times)
        results = [simulate(p, sc.circuit, sc.plan, vaporizer=sc.vaporizer,
                            absorber=sc.absorber, output_interval_min=task.output_interval_min,
                            rtol=task.rtol) for p in task.patients]
        curves = {k: np.stack([np.interp(t_out, r.time_min, SERIES[k].values(r))
                               for r in results]) for k in names}
        ends = {k: np.array([fn(r) for r in results], dtype=float) for k, fn in _END.items()}
    else:
        batch = simulate_batch(task.patients, sc.circuit, sc.plan, vaporizer=sc.vaporizer,
                               absorber=sc.absorber,
                               output_interval_min=task.output_interval_min, rtol=task.rtol,
                               parallel=parallel)
        t_out = batch.time_min
        curves = {k: np.ascontiguousarray(SERIES[k].values(batch), dtype=float) for k in names}
        ends = {k: np.asarray(fn(batch), dtype=float) for k, fn in _END.items()}
    outcomes = _outcomes(t_out, curves, ends, sc, task.gwp_horizon, task.target_basis)
    return _Chunk(t_out, {k: curves[k] for k in task.series}, outcomes)


def _co2e(grams: np.ndarray, gas: str, horizon: int) -> np.ndarray:
    value = gwp(gas, horizon)
    out = [co2_equivalent_kg(float(g), value) for g in grams]
    return np.array([math.nan if v is None else v for v in out])


def _outcomes(t: np.ndarray, curves: dict[str, np.ndarray], ends: dict[str, np.ndarray],
              scenario: Scenario, horizon: int, basis: str) -> dict[str, np.ndarray]:
    depth = curves["end_tidal_total_mac" if basis == "total" else "end_tidal_agent_mac"]
    fio2 = curves["fio2"]
    target = scenario.report.target_end_tidal_mac
    threshold = scenario.report.fio2_threshold
    reached = [time_to_reach(t, depth[b], target) for b in range(depth.shape[0])]
    agent_co2e = _co2e(ends["agent_delivered_g"], scenario.vaporizer.agent, horizon)
    n2o_co2e = _co2e(ends["n2o_delivered_g"], "nitrous_oxide", horizon)
    return {
        "time_to_target_min": np.array([math.nan if r is None else r for r in reached]),
        "end_tidal_mac_at_end": depth[:, -1],
        "lowest_fio2": fio2.min(axis=1),
        "minutes_below_fio2_threshold": np.array(
            [minutes_below(t, fio2[b], threshold) for b in range(fio2.shape[0])]),
        "agent_delivered_ml": ends["agent_delivered_ml"],
        "agent_delivered_g": ends["agent_delivered_g"],
        "n2o_delivered_g": ends["n2o_delivered_g"],
        "co2e_agent_kg": agent_co2e,
        "co2e_n2o_kg": n2o_co2e,
        "co2e_kg": agent_co2e + n2o_co2e,
        "absorbent_used_percent": ends["absorbent_used_percent"],
    }


@dataclass(frozen=True, eq=False)
class PopulationResult:
    """One plan run over a population.

    Attributes
    ----------
    label : str
        Name of the plan in tables and figures.
    scenario : Scenario
        Plan, breathing system, vaporizer and report settings (its patient is not used).
    patients : VirtualPatients
    time_min : ndarray, shape (T,)
    curves : dict of str to ndarray, shape (B, T)
        Every patient's curves, keyed as :data:`SERIES`.
    outcomes : pandas.DataFrame
        One row per patient, columns as :data:`OUTCOMES` (NaN: never reached / no GWP).
    gwp_horizon_years : int
    target_basis : {"total", "agent"}
        Whether the end-tidal target counts N2O with the agent.
    where : str
        Where the run was computed.
    """

    label: str
    scenario: Scenario
    patients: VirtualPatients
    time_min: np.ndarray
    curves: dict[str, np.ndarray]
    outcomes: pd.DataFrame
    gwp_horizon_years: int
    target_basis: str
    where: str

    def __len__(self) -> int:
        return len(self.patients)

    @property
    def agent(self) -> str:
        """The plan's volatile agent."""
        return self.scenario.vaporizer.agent

    @property
    def target_end_tidal_mac(self) -> float:
        """End-tidal target as a multiple of each patient's age-adjusted MAC."""
        return self.scenario.report.target_end_tidal_mac

    @property
    def depth_key(self) -> str:
        """Key of the curve the end-tidal target applies to (agent + N2O, or agent alone)."""
        return "end_tidal_total_mac" if self.target_basis == "total" else "end_tidal_agent_mac"

    @property
    def fio2_threshold(self) -> float:
        """Lowest acceptable FIO2 of the scenario."""
        return self.scenario.report.fio2_threshold

    def band(self, key: str, low: float = 5.0, high: float = 95.0) -> pd.DataFrame:
        """Median and ``low``–``high`` percentile band of a curve over the population.

        Returns
        -------
        pandas.DataFrame
            Columns ``time_min``, ``low``, ``median``, ``high`` (in the curve's unit).
        """
        import pandas as pd

        if key not in self.curves:
            raise KeyError(f"no curve {key!r} in this run; kept: {', '.join(self.curves)}")
        check_number("band", "low", low, Interval(0.0, 50.0, "%"))
        check_number("band", "high", high, Interval(50.0, 100.0, "%"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN times (FA/FI at FI = 0)
            q = np.nanpercentile(self.curves[key], [low, 50.0, high], axis=0)
        return pd.DataFrame({"time_min": self.time_min, "low": q[0], "median": q[1],
                             "high": q[2]})

    def target_reached_fraction(self) -> np.ndarray:
        """Share of patients whose end-tidal agent has reached the target, at each time (T,)."""
        ttt = self.outcomes["time_to_target_min"].to_numpy()
        reached = ttt[:, None] <= self.time_min[None, :]
        return reached.mean(axis=0)

    def probability_target_by(self, time_min: float) -> float:
        """Probability of reaching the end-tidal target by ``time_min`` (min)."""
        check_number("probability_target_by", "time_min", time_min,
                     Interval(0.0, float(self.time_min[-1]), "min"))
        ttt = self.outcomes["time_to_target_min"].to_numpy()
        return float(np.mean(ttt <= time_min))

    def probability_fio2_below(self, threshold: float | None = None) -> float:
        """Probability that FIO2 falls below ``threshold`` (default the scenario's) at any
        output time of the plan."""
        threshold = self.fio2_threshold if threshold is None else threshold
        check_number("probability_fio2_below", "threshold", threshold, Interval(0.0, 1.0))
        return float(np.mean(self.outcomes["lowest_fio2"].to_numpy() < threshold))

    def outcome_summary(self, low: float = 5.0, high: float = 95.0) -> pd.DataFrame:
        """Median, ``low``/``high`` percentiles and mean of every outcome (rows), skipping
        patients for whom the outcome does not exist (target never reached, no GWP)."""
        import pandas as pd

        rows = []
        for key, label in OUTCOMES.items():
            values = self.outcomes[key].to_numpy(dtype=float)
            ok = values[np.isfinite(values)]
            if ok.size:
                q = np.percentile(ok, [low, 50.0, high])
                rows.append({"outcome": label, "median": q[1], f"{low:g} %": q[0],
                             f"{high:g} %": q[2], "mean": ok.mean(), "patients": ok.size})
            else:
                rows.append({"outcome": label, "median": math.nan, f"{low:g} %": math.nan,
                             f"{high:g} %": math.nan, "mean": math.nan, "patients": 0})
        return pd.DataFrame(rows)


def _patients_of(patients: Any) -> VirtualPatients:
    if isinstance(patients, VirtualPatients):
        return patients
    if isinstance(patients, Patient):
        patients = (patients,)
    if isinstance(patients, Iterable) and not isinstance(patients, str | bytes):
        items = tuple(patients)
        if items and all(isinstance(p, Patient) for p in items):
            return VirtualPatients(items)
    raise InputError("patients must be a VirtualPatients draw (sample_patients) or a "
                     f"non-empty sequence of Patient; got {type(patients).__name__}.")


def compare_populations(scenarios: Sequence[Scenario], patients: VirtualPatients | Sequence[
        Patient], *, labels: Sequence[str] | None = None, output_interval_min: float = 0.5,
        series: Iterable[str] = DEFAULT_SERIES, rtol: float = 1e-6,
        gwp_horizon: int = DEFAULT_GWP_HORIZON, target_basis: str = "total",
        scheduler: Any = None, workers: int | None = None, fallback_to_local: bool = False,
        chunk_size: int = 250, progress: Callable[[int], Any] | None = None
        ) -> list[PopulationResult]:
    """Run every scenario's plan over the same patients.

    Parameters
    ----------
    scenarios : sequence of Scenario
        Each gives a plan, breathing system, vaporizer and report settings (target, FIO2
        threshold); the scenario's own patient is not used.
    patients : VirtualPatients or sequence of Patient
    labels : sequence of str, optional
        Names of the plans (default: the plans' names, made unique).
    output_interval_min : float, min, 0.005–10
    series : iterable of str
        Curves to keep for every patient (keys of :data:`SERIES`).
    rtol : float, 1e-12–1e-2
    gwp_horizon : {20, 100}, years
    target_basis : {"total", "agent"}
        Whether the end-tidal target counts N2O's MAC fraction with the agent's ("total", as
        :func:`circlesim.outcomes.summary.summarise`) or the agent alone. Identical without N2O.
    scheduler : str, dask.distributed.Client or None
        None: local processes; a Dask scheduler address or client: that cluster.
    workers : int or None
        Local worker processes (default one per core; 1: in this process).
    fallback_to_local : bool
        Run on local processes, with a warning, if the scheduler cannot be reached.
    chunk_size : int, 1–100,000
        Patients per batch integration.
    progress : callable or None
        Called with 1 after every chunk.

    Returns
    -------
    list of PopulationResult
        One per scenario, in order.
    """
    scenarios = list(scenarios)
    if not scenarios:
        raise InputError("scenarios must hold at least one Scenario; got none.")
    for i, s in enumerate(scenarios):
        if not isinstance(s, Scenario):
            raise InputError(f"scenarios[{i}] must be a Scenario; got {type(s).__name__}.")
    people = _patients_of(patients)
    series = tuple(series)
    unknown = [k for k in series if k not in SERIES]
    if unknown:
        raise InputError(f"series has unknown curve {unknown[0]!r}; known: "
                         f"{', '.join(SERIES)}.")
    check_number("population", "output_interval_min", output_interval_min,
                 Interval(0.005, 10.0, "min"))
    check_number("population", "rtol", rtol, Interval(1e-12, 1e-2))
    horizon = check_horizon(gwp_horizon)
    basis = check_choice("population", "target_basis", target_basis, ("total", "agent"))
    if isinstance(chunk_size, bool) or not isinstance(chunk_size, int) or not \
            1 <= chunk_size <= 100_000:
        raise InputError(f"chunk_size must be a whole number from 1 to 100000; got "
                         f"{chunk_size!r}.")
    labels = _labels(scenarios, labels)
    members = people.patients
    tasks = [_Task(i, s, members[start:start + chunk_size], series, float(output_interval_min),
                   float(rtol), horizon, basis)
             for i, s in enumerate(scenarios) for start in range(0, len(members), chunk_size)]
    run = map_chunks(_run_task, tasks, scheduler=scheduler, workers=workers,
                     fallback_to_local=fallback_to_local, progress=progress)
    return [_gather(i, s, label, people, tasks, run.results, horizon, basis, run.where)
            for i, (s, label) in enumerate(zip(scenarios, labels, strict=True))]


def run_population(scenario: Scenario, patients: VirtualPatients | Sequence[Patient],
                   **kwargs: Any) -> PopulationResult:
    """Run one scenario's plan over a population (see :func:`compare_populations`)."""
    return compare_populations([scenario], patients, **kwargs)[0]


def _labels(scenarios: Sequence[Scenario], labels: Sequence[str] | None) -> list[str]:
    if labels is None:
        names = [s.plan.name or s.title or f"plan {i + 1}" for i, s in enumerate(scenarios)]
    else:
        names = [str(x) for x in labels]
        if len(names) != len(scenarios):
            raise InputError(f"labels must name each of the {len(scenarios)} scenarios; got "
                             f"{len(names)}.")
    out: list[str] = []
    for name in names:
        label, k = name, 2
        while label in out:
            label, k = f"{name} ({k})", k + 1
        out.append(label)
    return out


def _gather(index: int, scenario: Scenario, label: str, people: VirtualPatients,
            tasks: Sequence[_Task], chunks: Sequence[_Chunk], horizon: int, basis: str,
            where: str) -> PopulationResult:
    import pandas as pd

    mine = [c for t, c in zip(tasks, chunks, strict=True) if t.scenario_index == index]
    curves = {k: np.concatenate([c.curves[k] for c in mine]) for k in mine[0].curves}
    outcomes = pd.DataFrame({k: np.concatenate([c.outcomes[k] for c in mine])
                             for k in mine[0].outcomes})
    return PopulationResult(label=label, scenario=scenario, patients=people,
                            time_min=mine[0].time_min, curves=curves, outcomes=outcomes,
                            gwp_horizon_years=horizon, target_basis=basis, where=where)


def probability_table(results: Sequence[PopulationResult],
                      by_min: Iterable[float] = (5.0, 10.0, 20.0, 30.0)) -> pd.DataFrame:
    """One row per plan: the probability of reaching the end-tidal target by each time in
    ``by_min`` (times past a plan's end are left empty), of FIO2 below the threshold, and the
    median (5–95 %) time to target.
    """
    import pandas as pd

    by = [float(t) for t in by_min]
    rows = []
    for r in results:
        basis = "agent + N2O" if r.target_basis == "total" else "agent"
        row: dict[str, Any] = {"plan": r.label, "agent": r.agent, "patients": len(r),
                               "target, MAC": r.target_end_tidal_mac, "target counts": basis}
        for t in by:
            row[f"P(target by {t:g} min)"] = (r.probability_target_by(t)
                                              if t <= r.time_min[-1] else None)
        ttt = r.outcomes["time_to_target_min"].to_numpy()
        reached = ttt[np.isfinite(ttt)]
        row["P(target reached)"] = reached.size / len(r)
        if reached.size:
            q = np.percentile(reached, [5.0, 50.0, 95.0])
            row["time to target, min: median"] = q[1]
            row["5 %"], row["95 %"] = q[0], q[2]
        else:
            row["time to target, min: median"] = row["5 %"] = row["95 %"] = None
        row["FIO2 threshold"] = r.fio2_threshold
        row["P(FIO2 below threshold)"] = r.probability_fio2_below()
        rows.append(row)
    return pd.DataFrame(rows)


def outcomes_frame(results: Sequence[PopulationResult]) -> pd.DataFrame:
    """Every patient's characteristics and outcomes, one row per patient and plan."""
    import pandas as pd

    frames = []
    for r in results:
        frame = pd.concat([r.patients.table(), r.outcomes], axis=1)
        frame.insert(0, "patient", np.arange(len(r)))
        frame.insert(0, "plan", r.label)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def save_outcomes(results: Sequence[PopulationResult], path: str | os.PathLike, *,
                  overwrite: bool = False):
    """Write :func:`outcomes_frame` as CSV, atomically; an existing file is kept unless
    ``overwrite``."""
    text = outcomes_frame(results).to_csv(index=False, float_format="%.6g")
    return write_text_atomic(path, text, overwrite=overwrite)
