"""An invented month of case records, made by the model, for demonstrations and tests.

Everything here is invented: the patients (weight, height, age, sex drawn from broad adult
ranges), their physiology (factors on the default rules drawn around 1), the agents and the
flow habits. Each record is made by :func:`circlesim.cases.synthetic.synthetic_case` — the
target controller plays an anaesthetist aiming at about 1 MAC with one of the habits below —
and carries ``provenance = "invented"`` and an invented source line, so it can never pass for
a measured case.

Habits (invented, typical of what departments describe):

* ``high flow throughout``: 2–3 L/min for the whole case;
* ``late reduction``: 4–6 L/min for 10–15 min, then 1–2 L/min;
* ``early reduction``: 4 L/min for 3–6 min, then 0.5–1 L/min;
* ``minimal flow``: 4 L/min O2/air 50:50 until about 8 min, then 0.5 L/min (O2 0.3, air
  0.2) — close to the example minimal-flow rule.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import replace
from pathlib import Path

import numpy as np

from circlesim.base.files import write_text_atomic
from circlesim.base.validation import InputError, Interval, check_number
from circlesim.cases.record import Monitor
from circlesim.cases.synthetic import synthetic_case, write_case
from circlesim.domain.equipment import Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.physiology import Factors
from circlesim.domain.plan import Plan, Step
from circlesim.scenario import ReportSettings, Scenario

__all__ = ["HABITS", "INVENTED_LABEL", "invented_month", "invented_scenario"]

#: Text every invented record and output carries.
INVENTED_LABEL = "INVENTED DATA: made by circlesim's model for a demonstration, not measured"
HABITS = ("high flow throughout", "late reduction", "early reduction", "minimal flow")
#: Share of each agent in the invented month.
_AGENTS = (("sevoflurane", 0.6), ("desflurane", 0.25), ("isoflurane", 0.15))


def _flows(total: float, o2_fraction: float) -> dict[str, float]:
    """O2 and air flows (L/min, 0.05 L/min steps) giving ``total`` at ``o2_fraction``."""
    air_o2 = 0.20946
    o2 = round(total * (o2_fraction - air_o2) / (1.0 - air_o2) / 0.05) * 0.05
    o2 = min(max(o2, 0.05), total)
    return {"o2_l_min": round(o2, 2), "air_l_min": round(total - o2, 2)}


def _habit_steps(habit: str, rng: np.random.Generator, target_mac: float) -> list[Step]:
    if habit == "high flow throughout":
        total = float(rng.choice([2.0, 2.5, 3.0]))
        return [Step(0.0, target_mac=target_mac, **_flows(total, 0.5))]
    if habit == "late reduction":
        high, low = float(rng.choice([4.0, 5.0, 6.0])), float(rng.choice([1.0, 1.5, 2.0]))
        at = float(rng.choice([10.0, 12.0, 15.0]))
        return [Step(0.0, target_mac=target_mac, **_flows(high, 0.4)),
                Step(at, **_flows(low, 0.5))]
    if habit == "early reduction":
        low = float(rng.choice([0.5, 0.7, 1.0]))
        at = float(rng.choice([3.0, 4.0, 5.0, 6.0]))
        return [Step(0.0, target_mac=target_mac, **_flows(4.0, 0.6)),
                Step(at, **_flows(low, 0.6))]
    if habit == "minimal flow":
        return [Step(0.0, target_mac=target_mac, o2_l_min=2.0, air_l_min=2.0),
                Step(8.0, o2_l_min=0.3, air_l_min=0.2)]
    raise InputError(f"habit must be one of {', '.join(map(repr, HABITS))}; got {habit!r}.")


def invented_scenario(rng: np.random.Generator, index: int) -> tuple[Scenario, Factors, str]:
    """One invented patient, agent, habit and physiology: (scenario, true factors, habit)."""
    sex = str(rng.choice(["female", "male"]))
    height = float(np.clip(rng.normal(165.0 if sex == "female" else 178.0, 7.0), 150, 200))
    bmi = float(np.clip(rng.normal(26.0, 4.0), 19.0, 38.0))
    weight = round(bmi * (height / 100.0) ** 2, 0)
    age = float(np.clip(rng.normal(55.0, 16.0), 18.0, 88.0))
    names = [a for a, _ in _AGENTS]
    agent = str(rng.choice(names, p=[w for _, w in _AGENTS]))
    habit = str(rng.choice(HABITS, p=[0.3, 0.3, 0.25, 0.15]))
    duration = float(rng.choice([45.0, 60.0, 75.0, 90.0, 120.0, 150.0, 180.0]))
    target = round(float(rng.uniform(0.85, 1.15)), 2)
    steps = _habit_steps(habit, rng, target)
    factors = Factors(cardiac_output=float(np.exp(rng.normal(0.0, 0.2))),
                      vo2=float(np.exp(rng.normal(0.0, 0.15))),
                      frc=float(np.exp(rng.normal(0.0, 0.2))),
                      solubility=float(np.exp(rng.normal(0.0, 0.08))),
                      leak_ml_min=float(rng.choice([0.0, 30.0, 100.0])))
    name = f"invented_case_{index:02d}"
    scenario = Scenario(
        plan=Plan(tuple(steps), duration_min=duration, name=habit),
        patient=Patient(weight_kg=weight, height_cm=round(height, 0), age_years=round(age, 0),
                        sex=sex),
        circuit=Circuit(volume_l=3.0, bag_l=2.0, sample_ml_min=200.0, sample_returned=True),
        vaporizer=Vaporizer(agent), report=ReportSettings(fio2_threshold=0.30),
        title=f"{name} ({habit}; invented)",
        question=f"{INVENTED_LABEL}. Invented case with the habit '{habit}'.")
    return scenario, factors, habit


def invented_month(folder: str | os.PathLike | None = None, *, cases: int = 40,
                   seed: int = 2024, broken: int = 1, thin: int = 1,
                   overwrite: bool = False) -> Path:
    """Write an invented month of case records into ``folder``.

    Parameters
    ----------
    folder : path, optional
        Created if missing; existing records are kept unless ``overwrite``. Default: a new
        temporary folder (``circlesim-invented-month-*`` in the system's temporary place).
    cases : int, 1–200
        Records made by the model.
    seed : int
        Same seed, same month.
    broken : int, 0–5
        Extra records with a deliberate fault (a cell that is not a number), to show that a
        broken record is listed with its error while the others run.
    thin : int, 0–5
        Of the ``cases``, how many measure only a few end-tidal values (too few to fit: the
        review uses the population prior for them).
    overwrite : bool

    Returns
    -------
    Path
        The folder.
    """
    check_number("invented_month", "cases", cases, Interval(1, 200))
    check_number("invented_month", "broken", broken, Interval(0, 5))
    check_number("invented_month", "thin", thin, Interval(0, 5))
    rng = np.random.default_rng(seed)
    if folder is None:
        folder = tempfile.mkdtemp(prefix="circlesim-invented-month-")
    folder = Path(folder)
    written = []
    for i in range(cases):
        scenario, factors, habit = invented_scenario(rng, i + 1)
        name = f"invented_case_{i + 1:02d}"
        options = {}
        if i < thin:  # four end-tidal values: too few to fit
            duration = min(scenario.plan.duration_min, 90.0)
            scenario = replace(scenario, plan=replace(scenario.plan, duration_min=duration))
            options = {"series": (("end_tidal", "agent"),), "interval_min": duration / 3.0}
        record, _ = synthetic_case(scenario, factors, name=name,
                                   monitor=Monitor(sampling_delay_s=5.0), noise=1.0,
                                   seed=int(rng.integers(2 ** 31)), **options)
        record = replace(record, note=f"{INVENTED_LABEL}; habit: {habit}; {record.note}")
        written.append(write_case(record, folder, overwrite=overwrite))
    for k in range(broken):
        source = written[k % len(written)]
        name = f"invented_broken_{k + 1:02d}"
        toml_text = source.read_text(encoding="utf-8").replace(
            f'measurements = "{source.stem}.csv"', f'measurements = "{name}.csv"')
        csv_lines = source.with_suffix(".csv").read_text(encoding="utf-8").splitlines()
        cells = csv_lines[3].split(",")
        cells[-1] = "n/a"  # the deliberate fault
        csv_lines[3] = ",".join(cells)
        write_text_atomic(folder / f"{name}.csv", "\n".join(csv_lines) + "\n",
                          overwrite=overwrite)
        written.append(write_text_atomic(folder / f"{name}.toml", toml_text,
                                         overwrite=overwrite))
    return folder
