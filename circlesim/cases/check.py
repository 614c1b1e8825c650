"""Check a case: run the model on the recorded settings and score it against the measurements.

:func:`check_case` predicts the record's plan for the record's patient (the textbook default,
or a cohort profile or a fitted patient if the record's scenario holds one), shows the
prediction through the record's monitor (sampling delay, rise time) at the sample times and
scores every measured series with Varvel's measures (:mod:`circlesim.cases.performance`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from circlesim.cases.columns import MeasuredSeries, floor_percent
from circlesim.cases.performance import Performance, performance, performance_errors
from circlesim.cases.record import CaseRecord
from circlesim.engine.result import Result

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["CaseCheck", "check_case", "predicted_series", "series_values"]

#: Output spacing of the model runs behind a check, min.
CHECK_INTERVAL_MIN = 0.1


def series_values(result: Result, series: MeasuredSeries) -> np.ndarray:
    """The model's values of a measured series on the result's times, vol% (shape (T,))."""
    gas = "agent" if series.gas == result.agent else series.gas
    g = result.gas_index(gas)
    source = result.end_tidal if series.site == "end_tidal" else result.inspired
    return 100.0 * source[:, g]


def predicted_series(record: CaseRecord, result: Result) -> dict[MeasuredSeries, np.ndarray]:
    """What the monitor would have shown of each measured series at the sample times, vol%."""
    return {s: record.monitor.observe(result.time_min, series_values(result, s),
                                      record.time_min)
            for s in record.measured}


@dataclass(frozen=True, eq=False)
class CaseCheck:
    """A record, its prediction and the performance measures of every measured series.

    Attributes
    ----------
    record : CaseRecord
    result : Result
        The model run on the record's settings.
    predicted : dict of MeasuredSeries to ndarray, shape (N,), vol%
        Monitor view of the prediction at the record's sample times.
    measures : dict of MeasuredSeries to Performance or None
        None where no sample could be scored.
    model : str
        Which model made the prediction (textbook default, a profile, a fitted patient).
    """

    record: CaseRecord
    result: Result
    predicted: dict[MeasuredSeries, np.ndarray]
    measures: dict[MeasuredSeries, Performance | None]
    model: str

    def table(self) -> list[list[object]]:
        """Rows: series, samples, MDPE %, MDAPE %, divergence %/h, wobble %."""
        rows: list[list[object]] = []
        for s, m in self.measures.items():
            if m is None:
                rows.append([s.label, 0, None, None, None, None])
            else:
                rows.append([s.label, m.n, *m.row()])
        return rows

    def frame(self) -> pd.DataFrame:
        """Every sample: time, series, measured, predicted, performance error (%)."""
        import pandas as pd

        parts = []
        for s, measured in self.record.measured.items():
            predicted = self.predicted[s]
            pe = np.full(measured.shape, np.nan)
            values, kept = performance_errors(measured, predicted, floor_percent(s.gas))
            pe[kept] = values
            ok = np.isfinite(measured)
            parts.append(pd.DataFrame({
                "time_min": self.record.time_min[ok], "series": s.column,
                "measured_pct": measured[ok], "predicted_pct": predicted[ok],
                "performance_error_pct": pe[ok]}))
        return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()


def check_case(record: CaseRecord, *, rtol: float = 1e-6) -> CaseCheck:
    """Predict ``record``'s settings and score the prediction against its measurements.

    Parameters
    ----------
    record : CaseRecord
    rtol : float, 1e-12–1e-2
        Relative tolerance of the integrator.

    Returns
    -------
    CaseCheck
    """
    result = record.scenario.simulate(output_interval_min=CHECK_INTERVAL_MIN, rtol=rtol)
    predicted = predicted_series(record, result)
    measures = {s: performance(record.time_min, record.measured[s], predicted[s],
                               floor_percent(s.gas))
                for s in record.measured}
    return CaseCheck(record, result, predicted, measures, record.scenario.model_description)
