"""How sure a prediction is: a percentile band over patients like the one entered.

The planner predicts one patient: the entered age, weight, height and sex with the textbook
rules for everything else. Real patients of that size and age differ in cardiac output, FRC,
O2 consumption and blood/gas solubility. :func:`similar_patients` draws virtual patients who
share the entered body size and age, with those four multiplied by factors drawn from the
population module's sourced distributions (:data:`~circlesim.population.virtual_patients.
DEFAULT_CARDIAC_OUTPUT_FACTOR` and its neighbours). When the scenario holds a patient fitted to
a measured case (``scenario.fit``), the draws come from that fit's uncertainty instead
(:meth:`circlesim.domain.physiology.FitUncertainty.sample_factors`).

:func:`run_band` runs the plan over those patients in one batch integration
(:func:`circlesim.engine.batch.simulate_batch`) and gives, on one time grid, the chosen
percentiles of end-tidal agent, brain (vessel-rich group) partial pressure and FIO2, the range
of the headline outcomes, and the share of patients for whom the plan crosses a threshold.

``spread`` scales every drawn deviation on the log scale (0: everyone is the entered patient
and the band has zero width; 1: the sourced spread).
"""

from __future__ import annotations

import functools
import itertools
import math
from concurrent.futures import Executor
from dataclasses import dataclass, field

import numpy as np

from circlesim.base.validation import (
    InputError,
    Interval,
    bounded,
    check_fields,
    check_whole_number,
)
from circlesim.domain.equipment import Circuit
from circlesim.domain.patient import Patient
from circlesim.domain.physiology import Factors, FitUncertainty
from circlesim.domain.plan import Plan
from circlesim.engine.batch import simulate_batch
from circlesim.outcomes.summary import time_to_reach
from circlesim.population.virtual_patients import (
    DEFAULT_CARDIAC_OUTPUT_FACTOR,
    DEFAULT_FRC_FACTOR,
    DEFAULT_SOLUBILITY_SCALE,
    DEFAULT_VO2_FACTOR,
)
from circlesim.scenario import Scenario

__all__ = ["BAND_RTOL", "BAND_SERIES", "Band", "BandSettings", "run_band", "similar_patients"]

#: The curves that get a band: key -> (label, unit).
BAND_SERIES = {
    "end_tidal_agent_percent": ("End-tidal agent", "vol%"),
    "brain_agent_percent": ("Brain (vessel-rich) agent", "vol%"),
    "fio2": ("Inspired O2 (FIO2)", "fraction"),
}

#: The physiology that varies between similar patients, with the distribution of its factor.
_PHYSIOLOGY = (("cardiac_output", DEFAULT_CARDIAC_OUTPUT_FACTOR), ("frc", DEFAULT_FRC_FACTOR),
               ("vo2", DEFAULT_VO2_FACTOR), ("solubility", DEFAULT_SOLUBILITY_SCALE))


@dataclass(frozen=True)
class BandSettings:
    """What band to draw.

    Parameters
    ----------
    patients : int, 20–2,000
        Similar patients to run.
    low_percentile, high_percentile : float, %, 1–99
        Edges of the band; ``low_percentile`` must be below ``high_percentile``.
    spread : float, 0–3
        Scales the drawn deviations on the log scale (1: the sourced spread; 0: none).
    seed : int, 0–2**32 − 1
        The same seed draws the same patients.
    """

    patients: int = field(default=200, metadata=bounded(20, 2000, "patients", whole=True))
    low_percentile: float = field(default=5.0, metadata=bounded(1.0, 99.0, "%"))
    high_percentile: float = field(default=95.0, metadata=bounded(1.0, 99.0, "%"))
    spread: float = field(default=1.0, metadata=bounded(0.0, 3.0))
    seed: int = field(default=20240501, metadata=bounded(0, 2 ** 32 - 1, whole=True))

    def __post_init__(self) -> None:
        check_fields(self)
        if not self.low_percentile < self.high_percentile:
            raise InputError(f"BandSettings.high_percentile must be above low_percentile "
                             f"({self.low_percentile:g} %); got {self.high_percentile:g}.")

    @property
    def label(self) -> str:
        """E.g. "5–95 %"."""
        return f"{self.low_percentile:g}–{self.high_percentile:g} %"


def similar_patients(scenario: Scenario, settings: BandSettings) -> tuple[list[Patient],
                                                                         list[Circuit], str]:
    """Patients like the scenario's (and their circuits), and where their spread comes from.

    The same patient, circuit, fit and settings give the same draws; the last few are kept, so
    that a planner re-running the band after a change of plan does not draw them again.

    Returns
    -------
    patients, circuits : list, length ``settings.patients`` (draws a patient cannot have
        are left out)
    basis : str
        "similar patients" or "the fit to the measured case".
    """
    patients, circuits, basis = _draw(scenario.model_patient, scenario.model_circuit,
                                      scenario.fit, settings)
    return list(patients), list(circuits), basis


@functools.lru_cache(maxsize=8)
def _draw(base: Patient, circuit: Circuit, fit: FitUncertainty | None,
          settings: BandSettings) -> tuple[tuple[Patient, ...], tuple[Circuit, ...], str]:
    """:func:`similar_patients` on hashable arguments (a fit is keyed by identity)."""
    n, s = settings.patients, settings.spread
    draws: list[Factors | dict[str, float]] = []
    if fit is not None:
        for f in fit.sample_factors(n, settings.seed, circuit.leak_ml_min):
            draws.append({name: getattr(f, name) ** s for name in
                          ("cardiac_output", "alveolar_ventilation", "vo2", "frc",
                           "solubility")} | ({} if f.leak_ml_min is None or s == 0.0 else
                                             {"leak_ml_min": f.leak_ml_min}))
        basis = "the fit to the measured case"
    else:
        rng = np.random.default_rng(settings.seed)
        columns = {name: dist.sample(rng, n) ** s for name, dist in _PHYSIOLOGY}
        draws = [{name: float(columns[name][i]) for name in columns} for i in range(n)]
        basis = "similar patients"
    limits = Factors.limits_for(base)
    patients, circuits = [], []
    for d in draws:
        values = {k: (min(max(v, limits[k][0]), limits[k][1]) if k in limits else v)
                  for k, v in d.items()}
        try:
            p, c = Factors(**values).apply(base, circuit)
        except InputError:
            continue
        patients.append(p)
        circuits.append(c)
    if not patients:
        raise InputError("no similar patient could be drawn for this patient; check the "
                         "patient's settings.")
    return tuple(patients), tuple(circuits), basis


@dataclass(frozen=True, eq=False)
class Band:
    """Percentiles over similar patients.

    Attributes
    ----------
    settings : BandSettings
    basis : str
        Where the spread comes from ("similar patients" or "the fit to the measured case").
    n : int
        Patients run.
    time_min : ndarray, shape (T,), min
    low, median, high : dict of str -> ndarray, shape (T,)
        Per :data:`BAND_SERIES` key: vol% for agent, fraction for FIO2.
    outcomes : dict of str -> (float, float)
        Low and high percentile of "time_to_target_min" (min; NaN for patients who never
        reach it, counted in ``share_not_reaching_target``), "lowest_fio2", "end_tidal_at_end"
        (vol%) and "agent_delivered_ml" (mL liquid).
    share_below_fio2 : float, 0–1
        Share of patients whose FIO2 falls below ``fio2_threshold`` at some time.
    share_not_reaching_target : float, 0–1
        Share of patients whose end-tidal agent never reaches the target.
    fio2_threshold : float, fraction
    target_percent : float, vol%
        End-tidal target of the outcomes (the scenario's × the entered patient's MAC).
    """

    settings: BandSettings
    basis: str
    n: int
    time_min: np.ndarray
    low: dict[str, np.ndarray]
    median: dict[str, np.ndarray]
    high: dict[str, np.ndarray]
    outcomes: dict[str, tuple[float, float]]
    share_below_fio2: float
    share_not_reaching_target: float
    fio2_threshold: float
    target_percent: float

    def warnings(self) -> list[str]:
        """Plain sentences for the share of patients crossing a threshold (none if none)."""
        out = []
        who = ("of draws from the fit" if self.basis.startswith("the fit")
               else "of similar patients")
        if self.share_below_fio2 > 0.0:
            out.append(f"In {_share(self.share_below_fio2)} {who} FIO2 falls below "
                       f"{self.fio2_threshold:.2f}.")
        if self.share_not_reaching_target > 0.0:
            out.append(f"In {_share(self.share_not_reaching_target)} {who} end-tidal agent "
                       f"never reaches the target ({self.target_percent:.2f} vol%).")
        return out


def _share(x: float) -> str:
    return "under 1 %" if 100.0 * x < 1.0 else f"{100.0 * x:.0f} %"


def _interval(duration_min: float) -> float:
    """Output spacing of the band (min): about 240 points, at least every 0.5 min."""
    return max(0.5, math.ceil(duration_min / 240.0 * 2.0) / 2.0)


#: Relative tolerance of the band's integration. The band's edges differ from those at the
#: engine's default 1e-6 by under 1e-4 of their peak (tests/test_band.py), far below the
#: spread between patients, for a fifth less computation (200 patients, 2 h: 78 against 97 ms
#: of CPU); looser tolerances save nothing more, as the step is then limited by stability.
BAND_RTOL = 1e-5


def run_band(scenario: Scenario, settings: BandSettings | None = None, *,
             plan: Plan | None = None, parallel: bool = True, pool: Executor | None = None,
             chunks: int = 2, rtol: float = BAND_RTOL) -> Band:
    """Run ``scenario``'s plan over similar patients and summarise the spread.

    Parameters
    ----------
    scenario : Scenario
    settings : BandSettings, optional
    plan : Plan, optional
        A dial plan to run instead of the scenario's (for a plan in target mode, the dials the
        controller chose for the entered patient).
    parallel : bool
        Use numba's threads for the batch (ignored with ``pool``).
    pool : concurrent.futures.Executor, optional
        Integrate the patients in ``chunks`` parts on this pool's threads, each part on one
        thread (the integration releases the GIL), e.g. on a front end's low-priority threads.
    chunks : int, 1–64
        Parts for ``pool``.
    rtol : float, 1e-12–1e-2
        Relative tolerance of the integration.

    Raises
    ------
    InputError
        If the plan holds end-tidal targets (pass the controller's plan) or no patient can be
        drawn.
    """
    settings = BandSettings() if settings is None else settings
    plan = scenario.plan if plan is None else plan
    if plan.has_targets:
        raise InputError("the band runs a dial plan: pass the target controller's plan for a "
                         "plan with end-tidal targets.")
    chunks = check_whole_number("run_band.chunks", chunks, Interval(1, 64))
    patients, circuits, basis = similar_patients(scenario, settings)
    threshold = scenario.report.fio2_threshold

    def integrate(members: range) -> _Curves:
        batch = simulate_batch(patients[members.start:members.stop],
                               circuits[members.start:members.stop], plan,
                               vaporizer=scenario.vaporizer, absorber=scenario.absorber,
                               output_interval_min=_interval(plan.duration_min),
                               rtol=rtol, fio2_threshold=threshold,
                               parallel=parallel and pool is None)
        return _Curves(batch.time_min, {
            "end_tidal_agent_percent": batch.end_tidal_percent("agent"),
            "brain_agent_percent": batch.brain_percent("agent"),
            "fio2": batch.inspired[:, :, batch.gas_index("oxygen")]},
            batch.agent_delivered_ml[:, -1])

    parts_of = 1 if pool is None else min(chunks, len(patients))
    cuts = np.linspace(0, len(patients), parts_of + 1).astype(int)
    parts = list((map if pool is None else pool.map)(
        integrate, [range(a, b) for a, b in itertools.pairwise(cuts)]))
    t = parts[0].time_min
    curves = {key: np.concatenate([part.curves[key] for part in parts]) for key in BAND_SERIES}
    delivered = np.concatenate([part.delivered_ml for part in parts])
    q = (settings.low_percentile, 50.0, settings.high_percentile)
    low, median, high = {}, {}, {}
    for key, values in curves.items():
        low[key], median[key], high[key] = np.percentile(values, q, axis=0)
    target = (scenario.report.target_end_tidal_mac
              * scenario.vaporizer.properties.mac_percent(scenario.patient.age_years))
    reach = np.array([np.nan if (v := time_to_reach(t, et, target)) is None else v
                      for et in curves["end_tidal_agent_percent"]])
    lowest = curves["fio2"].min(axis=1)

    def edges(values: np.ndarray) -> tuple[float, float]:
        finite = values[np.isfinite(values)]
        if finite.size == 0:
            return (math.nan, math.nan)
        lo, hi = np.percentile(finite, (settings.low_percentile, settings.high_percentile))
        return float(lo), float(hi)

    return Band(
        settings=settings, basis=basis, n=len(patients), time_min=t, low=low, median=median,
        high=high,
        outcomes={"time_to_target_min": edges(reach), "lowest_fio2": edges(lowest),
                  "end_tidal_at_end": edges(curves["end_tidal_agent_percent"][:, -1]),
                  "agent_delivered_ml": edges(delivered)},
        share_below_fio2=float(np.mean(lowest < threshold)),
        share_not_reaching_target=float(np.mean(~np.isfinite(reach))),
        fio2_threshold=threshold, target_percent=float(target))


@dataclass(frozen=True)
class _Curves:
    """The band's series for some of the patients: ``curves[key]`` has shape (B, T)."""

    time_min: np.ndarray
    curves: dict[str, np.ndarray]
    delivered_ml: np.ndarray
