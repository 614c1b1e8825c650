"""Case records: what was set and what the gas monitor showed during one real (or published) case.

A case record is two files side by side (``docs/case-records.md``):

* ``NAME.toml`` — a scenario file without ``[plan]`` (the plan comes from the CSV) and with a
  ``[record]`` section: ``measurements`` (the CSV's file name), ``source``, ``provenance``,
  ``patients`` (how many patients a published mean stands for), ``note``, and the monitor's
  ``sampling_delay_s`` and ``rise_time_s``;
* ``NAME.csv`` — ``time_min``, settings columns given when they change (names of
  :class:`~circlesim.domain.plan.Step` fields) and measured columns in vol% (names of
  ``circlesim run``'s CSV, e.g. ``end_tidal_sevoflurane_pct``); empty cells are fine.

:func:`load_case` reads both and refuses anything it cannot trust with the file, row and
column named; nothing is guessed.
"""

from __future__ import annotations

import csv
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from circlesim.base.files import read_toml
from circlesim.base.validation import (
    InputError,
    Interval,
    check_keys,
    check_number,
    check_whole_number,
)
from circlesim.cases.columns import (
    SETTINGS,
    TIME,
    MeasuredSeries,
    parse_measured_column,
)
from circlesim.domain.plan import MAX_PLAN_MIN, Plan, Step
from circlesim.scenario import Scenario, scenario_from_dict

__all__ = ["CaseRecord", "Monitor", "load_case", "load_cases", "record_from_frame"]

_RECORD_KEYS = ("measurements", "source", "provenance", "patients", "note",
                "sampling_delay_s", "rise_time_s", "duration_min")


@dataclass(frozen=True)
class Monitor:
    """How the gas monitor saw the gas: a side-stream delay and a first-order rise.

    Parameters
    ----------
    sampling_delay_s : float, s, 0–120
        Transport delay of the side-stream sample: the monitor shows at time t what was in
        the circuit at t − delay.
    rise_time_s : float, s, 0–60
        10–90 % rise time of the analyser (a first-order lag with time constant
        rise / ln 9). End-tidal values are breath maxima and inspired values breath minima,
        which the model's end-tidal (alveolar) and inspired fractions stand for directly.
    """

    sampling_delay_s: float = 0.0
    rise_time_s: float = 0.0

    def __post_init__(self) -> None:
        check_number("record", "sampling_delay_s", self.sampling_delay_s,
                     Interval(0.0, 120.0, "s"))
        check_number("record", "rise_time_s", self.rise_time_s, Interval(0.0, 60.0, "s"))

    def observe(self, time_min: np.ndarray, values: np.ndarray,
                at_min: np.ndarray) -> np.ndarray:
        """What the monitor shows at ``at_min`` of a series ``values`` on ``time_min``.

        Parameters
        ----------
        time_min : ndarray, shape (T,), min
            Fine, increasing model output times.
        values : ndarray, shape (T,) or (B, T)
            Model values on ``time_min`` (one series, or one per batch member).
        at_min : ndarray, shape (N,), min
            Sample times.

        Returns
        -------
        ndarray, shape (N,) or (B, N)
        """
        values = np.asarray(values, dtype=float)
        seen = values
        if self.rise_time_s > 0.0:
            tau = self.rise_time_s / math.log(9.0) / 60.0
            seen = np.array(values, copy=True)
            decay = np.exp(-np.diff(time_min) / tau)
            for k in range(1, time_min.size):  # exact for a linear ramp between outputs
                seen[..., k] = (seen[..., k - 1] * decay[k - 1]
                                + values[..., k] * (1.0 - decay[k - 1]))
        shifted = np.clip(np.asarray(at_min, dtype=float) - self.sampling_delay_s / 60.0,
                          time_min[0], time_min[-1])
        if seen.ndim == 1:
            return np.interp(shifted, time_min, seen)
        return np.stack([np.interp(shifted, time_min, row) for row in seen])


@dataclass(frozen=True, eq=False)
class CaseRecord:
    """One recorded case: the scenario it ran in, its settings as a plan, and the measurements.

    Attributes
    ----------
    name : str
        The record's file stem.
    scenario : Scenario
        Patient, breathing system and vaporizer of the record, and the plan read from the CSV.
    time_min : ndarray, shape (N,), min
        Times of the CSV rows with at least one measurement.
    measured : dict of MeasuredSeries to ndarray, shape (N,), vol%
        Measured series; NaN where a row has no value.
    monitor : Monitor
    source, provenance, note : str
        Where the data come from ("from the abstract", "read from a figure", "invented", ...).
    patients : int
        How many patients a row stands for (1 for an individual case, more for a study mean).
    path : Path or None
        The TOML file the record was read from.
    """

    name: str
    scenario: Scenario
    time_min: np.ndarray
    measured: dict[MeasuredSeries, np.ndarray]
    monitor: Monitor = field(default_factory=Monitor)
    source: str = ""
    provenance: str = ""
    note: str = ""
    patients: int = 1
    path: Path | None = None

    @property
    def agent(self) -> str:
        """The record's volatile agent."""
        return self.scenario.vaporizer.agent

    @property
    def plan(self) -> Plan:
        """The settings of the record as a plan."""
        return self.scenario.plan

    def count(self) -> int:
        """Number of measured values (all series)."""
        return int(sum(np.isfinite(v).sum() for v in self.measured.values()))

    def until(self, end_min: float) -> CaseRecord:
        """The record's measurements up to ``end_min`` (the plan is kept whole)."""
        keep = self.time_min <= end_min + 1e-9
        return CaseRecord(self.name, self.scenario, self.time_min[keep],
                          {s: v[keep] for s, v in self.measured.items()}, self.monitor,
                          self.source, self.provenance, self.note, self.patients, self.path)

    def after(self, start_min: float) -> CaseRecord:
        """The record's measurements after ``start_min``."""
        keep = self.time_min > start_min + 1e-9
        return CaseRecord(self.name, self.scenario, self.time_min[keep],
                          {s: v[keep] for s, v in self.measured.items()}, self.monitor,
                          self.source, self.provenance, self.note, self.patients, self.path)

    def with_scenario(self, scenario: Scenario) -> CaseRecord:
        """The same measurements in another scenario (e.g. with a fitted patient)."""
        return CaseRecord(self.name, scenario, self.time_min, self.measured, self.monitor,
                          self.source, self.provenance, self.note, self.patients, self.path)


def _where(path: Path, row: int | None = None, column: str | None = None) -> str:
    out = str(path)
    if row is not None:
        out += f", row {row}"
    if column is not None:
        out += f", column {column!r}"
    return out


def _read_csv(path: Path) -> tuple[list[str], list[tuple[int, list[str]]]]:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"measurements file {path} does not exist.") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"measurements file {path} cannot be read: {exc}.") from None
    try:
        rows = list(csv.reader(text.splitlines()))
    except csv.Error as exc:
        raise InputError(f"{path} is not a readable CSV file: {exc}.") from None
    rows = [(i + 1, r) for i, r in enumerate(rows) if any(c.strip() for c in r)]
    if not rows:
        raise InputError(f"{path} is empty; it needs a header row and data rows.")
    (_, header), body = rows[0], rows[1:]
    header = [h.strip() for h in header]
    for line, cells in body:
        if len(cells) != len(header):
            raise InputError(f"{_where(path, line)}: {len(cells)} cells, but the header has "
                             f"{len(header)} columns; the file is malformed.")
    return header, body


def _check_header(path: Path, header: list[str], agent: str) -> dict[str, MeasuredSeries]:
    seen: set[str] = set()
    measured: dict[str, MeasuredSeries] = {}
    for name in header:
        if name in seen:
            raise InputError(f"{path}: column {name!r} appears twice in the header.")
        seen.add(name)
        if name == TIME or name in SETTINGS:
            continue
        series = parse_measured_column(name)
        if series is None:
            raise InputError(
                f"{path}: unknown column {name!r}; allowed: {TIME}, "
                f"{', '.join(SETTINGS)}, and inspired_<gas>_pct or end_tidal_<gas>_pct for "
                f"oxygen, carbon_dioxide, nitrogen, nitrous_oxide or the agent ({agent}).")
        if series.gas not in ("oxygen", "carbon_dioxide", "nitrogen", "nitrous_oxide") and (
                series.gas != agent):
            raise InputError(f"{_where(path, 1, name)}: the record's scenario uses {agent}, "
                             f"but this column measures {series.gas}; a record holds one "
                             "agent.")
        measured[name] = series
    if TIME not in seen:
        raise InputError(f"{path}: the column {TIME!r} is missing.")
    return measured


def _number(path: Path, line: int, column: str, text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{_where(path, line, column)}: {text!r} is not a number.") from None
    if not math.isfinite(value):
        raise InputError(f"{_where(path, line, column)}: {text!r} is not a finite number.")
    return value


def record_from_frame(name: str, scenario_data: dict[str, Any], header: list[str],
                      body: list[tuple[int, list[str]]], path: Path, *,
                      folder: Path | None = None) -> CaseRecord:
    """Build a :class:`CaseRecord` from a parsed TOML table and CSV rows.

    ``body`` holds (line number, cells) pairs; ``path`` names the CSV in messages.
    """
    record = scenario_data.get("record")
    if not isinstance(record, dict):
        raise InputError(f"{name}: the [record] section is missing (it names the measurements "
                         "CSV and the source).")
    check_keys(f"{name}: [record]", record, _RECORD_KEYS)
    if "plan" in scenario_data:
        raise InputError(f"{name}: a case record takes its plan from the CSV's settings "
                         "columns; remove the [plan] section.")
    agent = scenario_data.get("vaporizer", {}).get("agent", "sevoflurane") if isinstance(
        scenario_data.get("vaporizer", {}), dict) else "sevoflurane"
    measured_cols = _check_header(path, header, str(agent).lower())
    index = {c: i for i, c in enumerate(header)}
    steps: list[Step] = []
    times: list[float] = []
    values: dict[str, list[float]] = {c: [] for c in measured_cols}
    last = -math.inf
    for line, cells in body:
        t_text = cells[index[TIME]].strip()
        if not t_text:
            raise InputError(f"{_where(path, line, TIME)}: the time is empty.")
        t = _number(path, line, TIME, t_text)
        if not 0.0 <= t <= MAX_PLAN_MIN:
            raise InputError(f"{_where(path, line, TIME)}: {t:g} min is outside 0 to "
                             f"{MAX_PLAN_MIN:g} min.")
        if t <= last:
            raise InputError(f"{_where(path, line, TIME)}: time goes backwards or repeats "
                             f"({t:g} min after {last:g} min); rows must be in time order.")
        last = t
        settings = {}
        for col in SETTINGS:
            if col in index and cells[index[col]].strip():
                v = _number(path, line, col, cells[index[col]].strip())
                unit, lo, hi = SETTINGS[col]
                if not lo <= v <= hi:
                    raise InputError(f"{_where(path, line, col)}: {v:g} {unit} is outside "
                                     f"{lo:g} to {hi:g} {unit}.")
                settings[col] = v
        if settings or not steps:
            if not steps and not any(k in settings for k in ("o2_l_min", "air_l_min",
                                                             "n2o_l_min")):
                raise InputError(f"{_where(path, line)}: the first row must give the fresh "
                                 "gas flows (o2_l_min, air_l_min or n2o_l_min).")
            try:
                steps.append(Step(time_min=t, **settings))
            except InputError as exc:
                raise InputError(f"{_where(path, line)}: {exc}") from None
        row_values = {}
        for col in measured_cols:
            text = cells[index[col]].strip()
            if not text:
                row_values[col] = math.nan
                continue
            v = _number(path, line, col, text)
            if not 0.0 <= v <= 100.0:
                raise InputError(f"{_where(path, line, col)}: {v:g} vol% is outside 0 to 100 "
                                 "vol%.")
            row_values[col] = v
        if any(math.isfinite(v) for v in row_values.values()):
            times.append(t)
            for col, v in row_values.items():
                values[col].append(v)
    if not steps:
        raise InputError(f"{path}: no data rows.")
    if steps[0].time_min != 0.0:
        raise InputError(f"{_where(path, body[0][0], TIME)}: the first row must be at 0 min "
                         f"(the start of the record); got {steps[0].time_min:g} min.")
    duration = record.get("duration_min", last)
    if duration <= steps[-1].time_min:
        duration = steps[-1].time_min + 1.0
    plan_dict = Plan(tuple(steps), duration_min=float(duration), name=name).to_dict()
    data = {k: v for k, v in scenario_data.items() if k != "record"}
    data["plan"] = plan_dict
    scenario: Scenario = scenario_from_dict(data, name, require_patient=True, folder=folder,
                                            extra_keys=())
    try:
        monitor = Monitor(float(record.get("sampling_delay_s", 0.0)),
                          float(record.get("rise_time_s", 0.0)))
    except (TypeError, ValueError):
        raise InputError(f"{name}: [record] sampling_delay_s and rise_time_s must be "
                         "numbers.") from None
    patients = check_whole_number(f"{name}: [record] patients", record.get("patients", 1),
                                  Interval(1, math.inf))
    for key in ("source", "provenance", "note"):
        if not isinstance(record.get(key, ""), str):
            raise InputError(f"{name}: [record] {key} must be text; got {record[key]!r}.")
    measured = {measured_cols[c]: np.array(v, dtype=float) for c, v in values.items()}
    return CaseRecord(name=Path(name).stem, scenario=scenario,
                      time_min=np.array(times, dtype=float), measured=measured,
                      monitor=monitor, source=record.get("source", ""),
                      provenance=record.get("provenance", ""), note=record.get("note", ""),
                      patients=patients)


def load_case(path: str | os.PathLike) -> CaseRecord:
    """Read a case record (its TOML file; the CSV is named in ``[record] measurements``).

    Raises
    ------
    InputError
        Naming the file, and for the CSV the row and column, for anything malformed: unknown
        or duplicated columns, non-numeric cells, time going backwards, measured values
        outside 0–100 %, a column for another agent than the scenario's, settings out of
        range.
    """
    path = Path(path)
    data = read_toml(path, "case record")
    record = data.get("record")
    if not isinstance(record, dict) or not isinstance(record.get("measurements"), str):
        raise InputError(f"{path}: [record] measurements must name the CSV file of the "
                         "record.")
    csv_path = path.parent / record["measurements"]
    header, body = _read_csv(csv_path)
    case = record_from_frame(str(path), data, header, body, csv_path, folder=path.parent)
    return CaseRecord(case.name, case.scenario, case.time_min, case.measured, case.monitor,
                      case.source, case.provenance, case.note, case.patients, path)


def load_cases(folder: str | os.PathLike) -> tuple[list[CaseRecord], list[tuple[Path, str]]]:
    """Every case record in ``folder`` (its ``*.toml`` files with a ``[record]`` section).

    Returns
    -------
    records : list of CaseRecord
        The records that could be read, in file-name order.
    problems : list of (Path, str)
        Each record that could not be read, with its error; the others are still returned.

    Raises
    ------
    InputError
        If ``folder`` is not a folder or holds no case records.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder} is not a folder of case records.")
    records, problems = [], []
    files = sorted(folder.glob("*.toml"))
    for f in files:
        try:
            text = f.read_text(encoding="utf-8")
        except OSError as exc:
            problems.append((f, str(exc)))
            continue
        if "[record]" not in text:
            continue
        try:
            records.append(load_case(f))
        except InputError as exc:
            problems.append((f, str(exc)))
    if not records and not problems:
        raise InputError(f"{folder} holds no case records (TOML files with a [record] "
                         "section).")
    return records, problems
