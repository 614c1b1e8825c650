"""The planner's state: the last good prediction, the reference plan, and the current error.

No widgets here. :class:`Runner` runs the engine on a :class:`~circlesim.scenario.Scenario`;
when the inputs are invalid or the integration fails it keeps the last good prediction and
records the error message instead, so the page never shows a traceback or an empty figure.
"""

from __future__ import annotations

from dataclasses import dataclass

from circlesim.base.validation import InputError
from circlesim.engine.result import Result
from circlesim.engine.simulate import SimulationError
from circlesim.outcomes.summary import CaseSummary, summarise
from circlesim.scenario import Scenario

__all__ = ["Prediction", "Runner", "output_interval_for"]

#: Largest number of output times the app draws per curve (the engine still integrates with
#: its own adaptive steps; this only spaces the points handed to the figure, and keeps the
#: browser's redraw quick). Exports use the command line's 0.1 min spacing.
MAX_POINTS = 600
_NICE_INTERVALS_MIN = (0.1, 0.2, 0.25, 0.5, 1.0, 2.0, 2.5, 5.0)


def output_interval_for(duration_min: float) -> float:
    """Output spacing (min) for a plan of ``duration_min`` minutes.

    The smallest of 0.1, 0.2, 0.25, 0.5, 1, 2, 2.5 and 5 min giving at most :data:`MAX_POINTS`
    points, so a 2-hour plan is drawn every 0.2 min and a 4-hour plan every 0.5 min. Step times are
    always included by the engine.
    """
    for interval in _NICE_INTERVALS_MIN:
        if duration_min / interval <= MAX_POINTS:
            return interval
    return _NICE_INTERVALS_MIN[-1]


@dataclass(frozen=True)
class Prediction:
    """One engine run and its headline outcomes.

    Attributes
    ----------
    scenario : Scenario
        The inputs.
    result : Result
        The engine's output.
    summary : CaseSummary
        From :func:`circlesim.outcomes.summary.summarise` with the scenario's report settings.
    """

    scenario: Scenario
    result: Result
    summary: CaseSummary


def predict(scenario: Scenario) -> Prediction:
    """Run the engine on ``scenario`` and summarise the result.

    Raises
    ------
    InputError, SimulationError
        As :func:`circlesim.simulate` does.
    """
    result = scenario.simulate(output_interval_min=output_interval_for(
        scenario.plan.duration_min))
    report = scenario.report
    summary = summarise(result, target_end_tidal_mac=report.target_end_tidal_mac,
                        report_times_min=report.within(
                            scenario.plan.duration_min).report_times_min,
                        fio2_threshold=report.fio2_threshold)
    return Prediction(scenario, result, summary)


class Runner:
    """Runs the engine and keeps the last good prediction and an optional reference plan.

    Attributes
    ----------
    current : Prediction or None
        The last prediction that ran without error.
    reference : Prediction or None
        A prediction kept for comparison.
    error : str or None
        Why the latest inputs could not be run (None when they ran).
    runs : int
        Successful runs so far.
    """

    def __init__(self) -> None:
        self.current: Prediction | None = None
        self.reference: Prediction | None = None
        self.error: str | None = None
        self.runs = 0

    def fail(self, message: str) -> None:
        """Record an input error found before the engine was called; keep the last prediction."""
        self.error = message

    def run(self, scenario: Scenario) -> bool:
        """Run ``scenario``; on bad input or a solver failure keep the last good prediction.

        Returns
        -------
        bool
            True if the prediction was replaced, False if an error was recorded instead.
        """
        try:
            prediction = predict(scenario)
        except (InputError, SimulationError) as exc:
            self.error = str(exc)
            return False
        self.current = prediction
        self.error = None
        self.runs += 1
        return True

    def keep_reference(self) -> None:
        """Keep the current prediction as the reference plan."""
        self.reference = self.current

    def clear_reference(self) -> None:
        """Drop the reference plan."""
        self.reference = None

    def shown(self) -> tuple[list[Result], list[str]]:
        """Results to draw and their legend labels: the reference first (solid), then the
        current plan (dashed), or the current plan alone."""
        if self.current is None:
            return [], []
        if self.reference is None:
            return [self.current.result], [""]
        return ([self.reference.result, self.current.result], ["reference plan", "current plan"])
