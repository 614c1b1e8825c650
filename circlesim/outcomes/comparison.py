"""A comparison: several plans for one patient and breathing system, run and summarised alike.

Every plan is simulated with the same output interval and alert threshold, summarised with the
same end-tidal target, report times, GWP horizon and prices, and gathered in one outcome table
(one row per plan). Plans for different patients or circuits are refused, naming what differs:
a comparison is only fair when the plan is the one thing that changes. The vaporizer (and so
the agent), the absorber and the prices may differ between plans.
"""

from __future__ import annotations

import glob
import os
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, fields
from pathlib import Path
from typing import TYPE_CHECKING

import tomli_w

from circlesim.base.validation import InputError
from circlesim.domain.costs import Prices
from circlesim.engine.result import Result
from circlesim.outcomes.emissions import DEFAULT_GWP_HORIZON, check_horizon
from circlesim.outcomes.summary import CaseSummary, summarise
from circlesim.scenario import ReportSettings, Scenario, load_scenario

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["Comparison", "PlanRun", "check_same_setup", "compare", "compare_files",
           "find_scenario_files"]

_GLOB_CHARS = set("*?[")


def find_scenario_files(specs: Iterable[str | os.PathLike]) -> list[Path]:
    """Scenario files named by ``specs``: files, folders (their ``*.toml``) or glob patterns.

    Raises
    ------
    InputError
        If nothing is given, a file does not exist, or a folder or pattern holds no TOML file.
    """
    out: list[Path] = []
    specs = list(specs)
    if not specs:
        raise InputError("compare needs at least one scenario file, folder or pattern; got none.")
    for spec in specs:
        path = Path(spec)
        if path.is_dir():
            found = sorted(path.glob("*.toml"))
            if not found:
                raise InputError(f"the folder {path} holds no scenario files (*.toml).")
            out.extend(found)
        elif path.is_file():
            out.append(path)
        elif _GLOB_CHARS & set(str(spec)):
            found = sorted(Path(p) for p in glob.glob(str(spec)) if Path(p).is_file())
            if not found:
                raise InputError(f"the pattern {str(spec)!r} matches no scenario file.")
            out.extend(found)
        else:
            raise InputError(f"scenario file {path} does not exist.")
    return out


def _differences(kind: str, a, b) -> list[str]:
    return [f"{kind}.{f.name} ({getattr(b, f.name)!r} instead of {getattr(a, f.name)!r})"
            for f in fields(a) if getattr(a, f.name) != getattr(b, f.name)]


def check_same_setup(scenarios: Sequence[Scenario], labels: Sequence[str]) -> None:
    """Raise :class:`InputError` naming the differences if the scenarios' patient or circuit
    differ from the first one's."""
    first = scenarios[0]
    problems = []
    for scenario, label in zip(scenarios[1:], labels[1:], strict=True):
        diffs = (_differences("patient", first.patient, scenario.patient)
                 + _differences("circuit", first.circuit, scenario.circuit))
        if diffs:
            problems.append(f"{label} has {', '.join(diffs)}")
    if problems:
        raise InputError(f"plans in one comparison must be for the same patient and circuit as "
                         f"the first ({labels[0]}); " + "; ".join(problems) + ".")


@dataclass(frozen=True)
class PlanRun:
    """One plan of a comparison.

    Attributes
    ----------
    label : str
        Short name (the file name without ``.toml``, made unique).
    path : Path or None
        File the scenario came from.
    scenario : Scenario
    result : Result
    summary : CaseSummary
    prices : Prices or None
        Prices the summary used.
    """

    label: str
    path: Path | None
    scenario: Scenario
    result: Result
    summary: CaseSummary
    prices: Prices | None


@dataclass(frozen=True)
class Comparison:
    """Several plans for one patient and circuit, with their outcomes.

    Attributes
    ----------
    plans : tuple of PlanRun
    report : ReportSettings
        Target, FIO2 threshold and report times used for every plan (the first file's).
    gwp_horizon_years : int
    prices_override : Prices or None
        Prices given for the whole comparison (otherwise each scenario's own ``[prices]``).
    currency : str
    notes : tuple of str
        Things the reader should know (e.g. report settings taken from the first file).
    """

    plans: tuple[PlanRun, ...]
    report: ReportSettings
    gwp_horizon_years: int
    prices_override: Prices | None
    currency: str
    notes: tuple[str, ...] = ()

    @property
    def labels(self) -> list[str]:
        """Plan labels in order."""
        return [p.label for p in self.plans]

    @property
    def results(self) -> list[Result]:
        """Results in order."""
        return [p.result for p in self.plans]

    def rows(self) -> list[dict[str, object]]:
        """One dict per plan: ``plan`` then the outcome columns of :meth:`CaseSummary.row`."""
        return [{"plan": p.label, **p.summary.row(currency=self.currency)} for p in self.plans]

    def table(self) -> pd.DataFrame:
        """The outcome table, one row per plan (missing values are None)."""
        import pandas as pd

        return pd.DataFrame(self.rows()).astype(object)

    def inputs_toml(self, command: str = "") -> str:
        """Every input as TOML text, one block per scenario file, to reproduce the comparison."""
        head = ["# Inputs of this comparison. Save each block as its own .toml file and run",
                f"#   {command or 'circlesim compare ' + ' '.join(self.labels)}",
                f"# GWP horizon: {self.gwp_horizon_years} years."]
        if self.prices_override is not None:
            head.append("# Prices given for the whole comparison: "
                        + tomli_w.dumps({"prices": _prices_dict(self.prices_override)})
                        .replace("\n", " ").strip())
        blocks = ["\n".join(head)]
        for p in self.plans:
            where = f" ({p.path})" if p.path is not None else ""
            blocks.append(f"# ===== {p.label}{where} =====\n" + tomli_w.dumps(p.scenario.to_dict()))
        return "\n\n".join(blocks)


def _prices_dict(prices: Prices) -> dict:
    return {f.name: getattr(prices, f.name) for f in fields(prices)
            if getattr(prices, f.name) not in (None, "")}


def _unique_labels(names: Sequence[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for name in names:
        k = seen.get(name, 0)
        seen[name] = k + 1
        out.append(name if k == 0 else f"{name}-{k + 1}")
    return out


def compare(scenarios: Sequence[Scenario], labels: Sequence[str] | None = None, *,
            paths: Sequence[Path | None] | None = None,
            gwp_horizon: int = DEFAULT_GWP_HORIZON, prices: Prices | None = None,
            output_interval_min: float = 0.1,
            progress: Callable[[Iterable], Iterable] | None = None) -> Comparison:
    """Run and summarise several plans for the same patient and circuit.

    Parameters
    ----------
    scenarios : sequence of Scenario
        At least one; all with the same patient and circuit.
    labels : sequence of str, optional
        Names of the plans (default: each plan's name).
    paths : sequence of Path or None, optional
        Files the scenarios came from (shown in reports).
    gwp_horizon : {20, 100}, years
    prices : Prices, optional
        Prices for every plan, replacing the scenarios' own ``[prices]``. Refused when the
        plans use different agents and an agent price is given.
    output_interval_min : float, min
    progress : callable, optional
        Wraps the iterable of scenarios (e.g. ``tqdm``) to show progress.

    Raises
    ------
    InputError
        No scenarios, different patients or circuits, an unknown GWP horizon, an agent price
        for plans with different agents, or prices in different currencies.
    """
    scenarios = list(scenarios)
    if not scenarios:
        raise InputError("compare needs at least one scenario; got none.")
    horizon = check_horizon(gwp_horizon)
    labels = _unique_labels(list(labels) if labels is not None
                            else [s.plan.name for s in scenarios])
    paths = list(paths) if paths is not None else [None] * len(scenarios)
    if len(labels) != len(scenarios) or len(paths) != len(scenarios):
        raise InputError(f"compare needs one label and one path per scenario; got "
                         f"{len(scenarios)} scenarios, {len(labels)} labels, {len(paths)} paths.")
    check_same_setup(scenarios, labels)
    agents = sorted({s.vaporizer.agent for s in scenarios})
    if prices is not None and prices.agent_price_per_bottle is not None and len(agents) > 1:
        raise InputError(f"a price per bottle for the whole comparison needs one agent, but the "
                         f"plans use {', '.join(agents)}; set each scenario's [prices] instead.")
    chosen = [prices if prices is not None else s.prices for s in scenarios]
    currencies = sorted({p.currency for p in chosen if p is not None and p.any})
    if len(currencies) > 1:
        raise InputError(f"prices in one comparison must share a currency; got "
                         f"{', '.join(map(repr, currencies))}.")
    report = scenarios[0].report
    notes = []
    if any(s.report != report for s in scenarios[1:]):
        notes.append(f"The [report] settings differ between the files; every plan is "
                     f"summarised with those of {labels[0]} (target {report.target_end_tidal_mac:g}"
                     f" MAC, FIO2 threshold {report.fio2_threshold:g}).")
    wrap = progress if progress is not None else (lambda it: it)
    runs = []
    for scenario, label, path, plan_prices in wrap(list(zip(scenarios, labels, paths, chosen,
                                                            strict=True))):
        result = scenario.simulate(output_interval_min=output_interval_min,
                                   fio2_threshold=report.fio2_threshold)
        summary = summarise(result, target_end_tidal_mac=report.target_end_tidal_mac,
                            report_times_min=report.within(
                                scenario.plan.duration_min).report_times_min,
                            fio2_threshold=report.fio2_threshold, gwp_horizon=horizon,
                            prices=plan_prices)
        runs.append(PlanRun(label, path, scenario, result, summary, plan_prices))
    return Comparison(tuple(runs), report, horizon, prices,
                      currencies[0] if currencies else "", tuple(notes))


def compare_files(specs: Iterable[str | os.PathLike], **kwargs) -> Comparison:
    """:func:`compare` on scenario files, folders or glob patterns (see
    :func:`find_scenario_files`); plans are labelled by file name."""
    paths = find_scenario_files(specs)
    scenarios = [load_scenario(p) for p in paths]
    return compare(scenarios, [p.stem for p in paths], paths=paths, **kwargs)
