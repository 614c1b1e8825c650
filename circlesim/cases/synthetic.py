"""Case records made by the model itself, and case records written to files.

:func:`synthetic_case` runs a scenario for a patient whose physiology differs from the
default by known factors, shows it through a monitor (delay, rise time), samples it at a
given interval and adds monitor noise: a record whose truth is known, for tests, demos and
the invented examples. Everything it makes is invented data and says so in its source.

:func:`write_case` writes any record as the two files of the record format
(``docs/case-records.md``), atomically, never replacing a file unless asked.
"""

from __future__ import annotations

import io
import math
import os
from dataclasses import dataclass, fields, replace
from pathlib import Path

import numpy as np
import tomli_w

from circlesim.base.files import write_text_atomic
from circlesim.base.validation import InputError, Interval, check_number
from circlesim.cases.check import CHECK_INTERVAL_MIN, series_values
from circlesim.cases.columns import SETTINGS, TIME, MeasuredSeries
from circlesim.cases.priors import noise_sd
from circlesim.cases.record import CaseRecord, Monitor
from circlesim.domain.physiology import Factors
from circlesim.scenario import Scenario

__all__ = ["DEFAULT_SERIES", "SyntheticTruth", "synthetic_case", "write_case"]

#: Series a synthetic record measures by default (the agent's name filled in).
DEFAULT_SERIES = (("inspired", "agent"), ("end_tidal", "agent"), ("inspired", "oxygen"),
                  ("end_tidal", "oxygen"), ("inspired", "nitrous_oxide"),
                  ("end_tidal", "nitrous_oxide"), ("end_tidal", "carbon_dioxide"))


@dataclass(frozen=True, eq=False)
class SyntheticTruth:
    """What a synthetic record was made from: the true factors and the noise-free view."""

    factors: Factors
    noise_free: dict[MeasuredSeries, np.ndarray]


def synthetic_case(scenario: Scenario, factors: Factors | None = None, *,
                   name: str = "synthetic", interval_min: float = 1.0,
                   monitor: Monitor | None = None, noise: float = 1.0,
                   series: tuple[tuple[str, str], ...] = DEFAULT_SERIES,
                   seed: int | None = None) -> tuple[CaseRecord, SyntheticTruth]:
    """A record made by the model for a patient ``factors`` away from the scenario's.

    Parameters
    ----------
    scenario : Scenario
        Patient, breathing system, vaporizer and plan (dial plan, or targets).
    factors : Factors, optional
        True factors on the scenario's patient (default: none).
    name : str
    interval_min : float, min, 0.05–30
        Sampling interval of the monitor export.
    monitor : Monitor, optional
        Sampling delay and rise time the record is seen through.
    noise : float, 0–5
        Monitor noise as a multiple of :data:`circlesim.cases.priors.NOISE` (0: none).
    series : tuple of (site, gas)
        Which series are measured; gas "agent" means the scenario's agent; a gas the plan
        never delivers (N2O without N2O) is left out.
    seed : int, optional
        Same seed, same noise.

    Returns
    -------
    record : CaseRecord
        With the true plan (a target plan becomes the dial plan the controller chose).
    truth : SyntheticTruth
    """
    check_number("synthetic_case", "interval_min", interval_min, Interval(0.05, 30.0, "min"))
    check_number("synthetic_case", "noise", noise, Interval(0.0, 5.0))
    factors = Factors() if factors is None else factors
    monitor = Monitor() if monitor is None else monitor
    patient, circuit = factors.apply(scenario.patient, scenario.circuit)
    true_scenario = replace(scenario, patient=patient, circuit=circuit)
    result = true_scenario.simulate(output_interval_min=CHECK_INTERVAL_MIN, rtol=1e-8)
    plan = result.control.plan if result.control is not None else scenario.plan
    times = np.round(np.arange(0.0, plan.duration_min + 1e-9, interval_min), 9)
    rng = np.random.default_rng(seed)
    measured, noise_free = {}, {}
    agent = scenario.vaporizer.agent
    for site, gas in series:
        s = MeasuredSeries(site, agent if gas == "agent" else gas)
        clean = monitor.observe(result.time_min, series_values(result, s), times)
        if gas == "nitrous_oxide" and np.max(clean) < 0.5:
            continue
        sd = noise * noise_sd("agent" if gas == "agent" else gas, clean)
        noisy = np.clip(clean + rng.normal(0.0, 1.0, clean.shape) * sd, 0.0, 100.0)
        measured[s] = np.round(noisy, 3)
        noise_free[s] = clean
    own = replace(scenario, plan=plan.with_steps(plan.steps))
    record = CaseRecord(
        name=name, scenario=replace(own, title=own.title or name), time_min=times,
        measured=measured, monitor=monitor,
        source="invented: made by circlesim's model with known factors and monitor noise",
        provenance="invented", note=f"true factors {factors.to_dict()}", patients=1)
    return record, SyntheticTruth(factors, noise_free)


def _settings_rows(record: CaseRecord) -> dict[float, dict[str, float]]:
    rows: dict[float, dict[str, float]] = {}
    for step in record.plan.steps:
        cells = {}
        for col in SETTINGS:
            value = getattr(step, col)
            if value is not None and not (col == "inject_ml" and value == 0.0):
                cells[col] = value
        rows[round(step.time_min, 9)] = cells
    return rows


def write_case(record: CaseRecord, folder: str | os.PathLike, *, name: str | None = None,
               overwrite: bool = False) -> Path:
    """Write ``record`` as ``NAME.toml`` and ``NAME.csv`` in ``folder``; return the TOML path.

    Both files are written atomically; an existing file is kept (FileExistsError) unless
    ``overwrite``.
    """
    name = name or record.name
    if not name or any(c in name for c in "/\\"):
        raise InputError(f"a case record's name must be a plain file name; got {name!r}.")
    folder = Path(folder)
    toml_path, csv_path = folder / f"{name}.toml", folder / f"{name}.csv"
    if not overwrite:
        for path in (toml_path, csv_path):
            if path.exists():
                raise FileExistsError(f"{path} exists; pass overwrite=True to replace it.")
    settings = _settings_rows(record)
    times = sorted(set(settings) | {round(float(t), 9) for t in record.time_min})
    index = {round(float(t), 9): i for i, t in enumerate(record.time_min)}
    used = [c for c in SETTINGS if any(c in row for row in settings.values())]
    columns = [TIME, *used, *(s.column for s in record.measured)]
    buf = io.StringIO()
    buf.write(",".join(columns) + "\n")
    for t in times:
        cells = [f"{t:g}"]
        row = settings.get(t, {})
        cells += [f"{row[c]:g}" if c in row else "" for c in used]
        i = index.get(t)
        for values in record.measured.values():
            v = values[i] if i is not None else math.nan
            cells.append("" if not math.isfinite(v) else f"{v:.6g}")
        buf.write(",".join(cells) + "\n")
    data = record.scenario.to_dict()
    data.pop("plan", None)
    data["record"] = {"measurements": csv_path.name, "source": record.source,
                      "provenance": record.provenance, "patients": record.patients,
                      "duration_min": record.plan.duration_min}
    if record.note:
        data["record"]["note"] = record.note
    for f in fields(record.monitor):
        value = getattr(record.monitor, f.name)
        if value:
            data["record"][f.name] = value
    folder.mkdir(parents=True, exist_ok=True)
    write_text_atomic(csv_path, buf.getvalue(), overwrite=overwrite)
    return write_text_atomic(toml_path, tomli_w.dumps(data), overwrite=overwrite)
