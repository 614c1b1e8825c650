"""Virtual-patient populations: run plans over many patients.

:func:`compare_populations` runs each scenario's plan (with its breathing system, vaporizer and
report settings) over the *same* virtual patients — drawn with
:func:`circlesim.population.virtual_patients.sample_patients` — and returns one
:class:`~circlesim.population.result.PopulationResult`
per plan. The patients are cut into chunks; each chunk is one batch integration
(:func:`circlesim.engine.batch.simulate_batch`) and the chunks run on local processes or a Dask
cluster (:func:`circlesim.base.distributed.map_chunks`). The numbers do not depend on where or in
what chunks they ran.

The curves kept for every patient (:data:`~circlesim.population.result.SERIES`), the outcomes
computed per patient and what a result gives (bands, probabilities, tables) are in
:mod:`circlesim.population.result`.

Plans with end-tidal targets (target mode) are run patient by patient with
:func:`circlesim.simulate`, because the controller chooses each patient's dial; their curves
are put on the same time grid by linear interpolation.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from circlesim.base.distributed import map_chunks
from circlesim.base.units import vapour_l_stpd_to_grams
from circlesim.base.validation import (
    InputError,
    Interval,
    check_choice,
    check_number,
    check_whole_number,
)
from circlesim.domain.patient import Patient
from circlesim.engine.batch import simulate_batch
from circlesim.engine.simulate import output_times
from circlesim.outcomes.emissions import DEFAULT_GWP_HORIZON, check_horizon, co2_equivalent_kg, gwp
from circlesim.outcomes.summary import minutes_below, time_to_reach
from circlesim.population.result import DEFAULT_SERIES, SERIES, PopulationResult
from circlesim.population.virtual_patients import VirtualPatients
from circlesim.properties import NITROUS_OXIDE
from circlesim.scenario import Scenario
from circlesim.targets.predict import simulate

__all__ = ["compare_populations", "run_population"]

#: Curves every run needs for its outcomes, whether kept or not.
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
        "minutes_below_fio2_threshold": minutes_below(t, fio2, threshold),
        "agent_delivered_ml": ends["agent_delivered_ml"],
        "agent_delivered_g": ends["agent_delivered_g"],
        "n2o_delivered_g": ends["n2o_delivered_g"],
        "co2e_agent_kg": agent_co2e,
        "co2e_n2o_kg": n2o_co2e,
        "co2e_kg": agent_co2e + n2o_co2e,
        "absorbent_used_percent": ends["absorbent_used_percent"],
    }


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
        Curves to keep for every patient (keys of :data:`~circlesim.population.result.SERIES`).
    rtol : float, 1e-12–1e-2
    gwp_horizon : {20, 100}, years
    target_basis : {"total", "agent"}
        Whether the end-tidal target counts N2O's MAC fraction with the agent's ("total", as
        :func:`circlesim.outcomes.summary.summarise`) or the agent alone. Identical without N2O.
    scheduler : str, dask.distributed.Client or None
        None: local processes; a Dask scheduler address or client: that cluster.
    workers : int or None
        Local worker processes (default one per core; 1: in this process, on a thread per
        core).
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
    chunk_size = check_whole_number("chunk_size", chunk_size, Interval(1, 100_000))
    labels = _labels(scenarios, labels)
    members = people.patients
    tasks = [_Task(i, s, members[start:start + chunk_size], series, float(output_interval_min),
                   float(rtol), horizon, basis)
             for i, s in enumerate(scenarios) for start in range(0, len(members), chunk_size)]
    run = map_chunks(_run_task, tasks, scheduler=scheduler, workers=workers,
                     fallback_to_local=fallback_to_local, progress=progress, threads=True)
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
