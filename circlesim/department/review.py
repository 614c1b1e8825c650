"""A department review: every record in a folder under one rule, case by case and in total.

:func:`review_folder` reads every case record in a folder (a broken record is listed with its
error and the others still run), reviews each under the rule (:func:`review_case`) on local
processes or a Dask cluster (:func:`circlesim.base.distributed.map_chunks`) with a progress
callback, and returns a :class:`DepartmentReview`: per-case and total tables, the flagged
cases first, and a plain-language summary. Totals are sums over the cases; their intervals
come from summing each drawn patient's saving over the cases (the cases' draws are
independent, so the k-th draws of all cases together are one draw of the total).
"""

from __future__ import annotations

import os
import time
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from circlesim.base.distributed import map_chunks
from circlesim.base.files import write_text_atomic
from circlesim.base.validation import InputError
from circlesim.cases.record import CaseRecord, load_cases
from circlesim.department.counterfactual import CaseReview, review_case
from circlesim.department.rule import FlowRule
from circlesim.department.usage import USAGE_FIELDS, DepartmentPrices

__all__ = ["LABELS", "USAGE_FIELDS", "CaseProblem", "DepartmentReview", "review_folder",
           "review_records"]

#: Labels of the additive quantities, with units.
LABELS = {"agent_ml": "agent, mL", "agent_g": "agent, g", "n2o_l": "N2O, L",
          "absorbent_g": "absorbent, g", "cost": "cost", "co2e_gwp20_kg": "CO2-eq GWP20, kg",
          "co2e_gwp100_kg": "CO2-eq GWP100, kg"}


@dataclass(frozen=True)
class CaseProblem:
    """A record that could not be read or reviewed, with the reason."""

    path: Path | None
    name: str
    message: str


@dataclass(frozen=True, eq=False)
class DepartmentReview:
    """The review of a folder of records under one rule.

    Attributes
    ----------
    rule : FlowRule
    reviews : list of CaseReview
        In file-name order.
    problems : list of CaseProblem
    where : str
        Where the cases ran.
    seconds : float, s
        Wall time of the review.
    draws : int
    currency : str
    """

    rule: FlowRule
    reviews: list[CaseReview]
    problems: list[CaseProblem] = field(default_factory=list)
    where: str = ""
    seconds: float = 0.0
    draws: int = 0
    currency: str = ""

    @property
    def flagged(self) -> list[CaseReview]:
        """Cases where the rule would have risked low FIO2 or a dry bag."""
        return [r for r in self.reviews if r.flagged]

    @property
    def invented(self) -> bool:
        """Whether any reviewed record is invented (provenance "invented")."""
        return any("invented" in r.provenance.lower() for r in self.reviews)

    @property
    def agents(self) -> list[str]:
        """Agents of the reviewed cases, in order of first appearance."""
        return list(dict.fromkeys(r.agent for r in self.reviews))

    def case_table(self) -> pd.DataFrame:
        """One row per case, flagged cases first; every column carries its unit."""
        cur = f" ({self.currency})" if self.currency else ""
        rows = []
        for r in sorted(self.reviews, key=lambda r: (not r.flagged, r.name)):
            row: dict[str, Any] = {
                "case": r.name, "agent": r.agent, "length, min": r.duration_min,
                "patient": r.basis, "risk under the rule": r.risks() or "none",
                "follows the rule already": r.follows_rule}
            for key in ("agent_ml", "cost", "co2e_gwp20_kg", "co2e_gwp100_kg"):
                label = LABELS[key] + (cur if key == "cost" else "")
                row[f"{label}: as recorded"] = getattr(r.recorded, key)
                row[f"{label}: recorded flows, course held"] = getattr(r.held, key)
                row[f"{label}: under the rule"] = getattr(r.rule, key)
                row[f"{label}: saving"] = r.saving[key]
                row[f"{label}: saving 5 %"] = r.saving_low[key]
                row[f"{label}: saving 95 %"] = r.saving_high[key]
            row.update({
                "absorbent, g: as recorded": r.recorded.absorbent_g,
                "absorbent, g: under the rule": r.rule.absorbent_g,
                "lowest FIO2 under the rule": r.rule.lowest_fio2,
                f"min below FIO2 {self.rule.fio2_threshold:g} under the rule":
                    r.rule.minutes_below_fio2,
                "bag runs dry under the rule": r.rule.bag_empty,
                "plausible patients at risk, %": 100.0 * r.risk_share,
                "end-tidal course held: median deviation, %":
                    r.arms.rule_quality.median_percent,
                "end-tidal course held: worst deviation, %": r.arms.rule_quality.worst_percent,
                "maintenance end-tidal, vol%": r.maintenance_percent,
                "responses to warnings": "; ".join(r.arms.responses) or "none",
                "patient basis": r.basis_note})
            rows.append(row)
        return pd.DataFrame(rows)

    def _group(self, agent: str | None) -> list[CaseReview]:
        return [r for r in self.reviews if agent is None or r.agent == agent]

    def total(self, key: str, arm: str, agent: str | None = None) -> float | None:
        """Sum of ``key`` over the cases (of ``agent``; all when None) in ``arm``: "recorded",
        "held", "rule" or "saving". None when a case has no value (no price or GWP)."""
        values = []
        for r in self._group(agent):
            v = r.saving[key] if arm == "saving" else getattr(getattr(r, arm), key)
            if v is None:
                return None
            values.append(v)
        return float(np.sum(values)) if values else None

    def total_interval(self, key: str, agent: str | None = None) -> tuple[float, float] | None:
        """5 % and 95 % of the total saving of ``key`` over the drawn patients, or None."""
        group = self._group(agent)
        if not group or self.draws == 0 or any(r.saving[key] is None for r in group):
            return None
        stacked = np.vstack([r.saving_draws[key] for r in group]).sum(axis=0)
        total = self.total(key, "saving", agent)
        if not np.all(np.isfinite(stacked)) or total is None:
            return None
        # the interval always holds the fitted patients' total (as each case's does)
        return (min(float(np.percentile(stacked, 5.0)), total),
                max(float(np.percentile(stacked, 95.0)), total))

    def totals_table(self) -> pd.DataFrame:
        """Totals per agent and over all agents (liquid agent only per agent)."""
        cur = f" ({self.currency})" if self.currency else ""
        rows = []
        groups = [(a, a) for a in self.agents] + ([("all agents", None)]
                                                   if len(self.agents) > 1 else [])
        for label, agent in groups:
            group = self._group(agent)
            row: dict[str, Any] = {"agent": label, "cases": len(group),
                                   "flagged": sum(r.flagged for r in group)}
            for key in ("agent_ml", "cost", "co2e_gwp20_kg", "co2e_gwp100_kg"):
                if key == "agent_ml" and agent is None:
                    continue  # mL of different agents do not add up
                name = LABELS[key] + (cur if key == "cost" else "")
                interval = self.total_interval(key, agent)
                row[f"{name}: as recorded"] = self.total(key, "recorded", agent)
                row[f"{name}: recorded flows, course held"] = self.total(key, "held", agent)
                row[f"{name}: under the rule"] = self.total(key, "rule", agent)
                row[f"{name}: saving"] = self.total(key, "saving", agent)
                row[f"{name}: saving 5 %"] = None if interval is None else interval[0]
                row[f"{name}: saving 95 %"] = None if interval is None else interval[1]
            rows.append(row)
        return pd.DataFrame(rows)

    def summary(self) -> list[str]:
        """A plain-language summary for a meeting, one paragraph per item."""
        n = len(self.reviews)
        out = ["These records are INVENTED data made by the model, for demonstration only."
               ] if self.invented else []
        out += [f"{n} case(s) reviewed under the rule '{self.rule.name}'"
               + (f"; {len(self.problems)} record(s) could not be reviewed and are listed "
                  "below" if self.problems else "") + "."]
        for agent in self.agents:
            group = self._group(agent)
            saved = self.total("agent_ml", "saving", agent)
            held = self.total("agent_ml", "held", agent)
            interval = self.total_interval("agent_ml", agent)
            share = f" ({100 * saved / held:.0f} % of it)" if held else ""
            text = (f"{agent.capitalize()}, {len(group)} case(s): holding the same end-tidal "
                    f"course, the rule would have used {saved:.0f} mL less liquid agent"
                    f"{share} than the recorded flows")
            if interval is not None:
                text += (f"; allowing for what the records leave uncertain about each "
                         f"patient, between {interval[0]:.0f} and {interval[1]:.0f} mL")
            out.append(text + ".")
        for key, words in (("co2e_gwp100_kg", "CO2-equivalent (100-year horizon)"),
                           ("co2e_gwp20_kg", "CO2-equivalent (20-year horizon)"),
                           ("cost", f"cost{' in ' + self.currency if self.currency else ''}")):
            total = self.total(key, "saving")
            if total is None:
                out.append(f"No total {words.split(' (')[0]} saving: some cases have no "
                           f"{'price' if key == 'cost' else 'published GWP'} for their agent.")
                continue
            interval = self.total_interval(key)
            span = "" if interval is None else f" (5–95 %: {interval[0]:.1f} to {interval[1]:.1f})"
            out.append(f"Saving in {words}: {total:.1f}{span}"
                       + (" kg." if key != "cost" else "."))
        flagged = self.flagged
        if flagged:
            out.append(f"In {len(flagged)} case(s) the rule would have risked low inspired "
                       f"oxygen (below {self.rule.fio2_threshold:.2f}) or a reservoir bag "
                       f"running dry: {', '.join(r.name for r in flagged)}. These are listed "
                       "first; a rule is only as safe as its worst case.")
        else:
            out.append(f"In no case did the rule let FIO2 fall below "
                       f"{self.rule.fio2_threshold:.2f} or the bag run dry, for the fitted "
                       "patients or for 90 % of the plausible ones.")
        prior = [r.name for r in self.reviews if r.basis == "prior"]
        if prior:
            out.append(f"{len(prior)} record(s) were too thin to fit and use the population "
                       f"prior: {', '.join(prior)}; their intervals are wider.")
        return out

    def write_csv(self, path: str | os.PathLike, *, overwrite: bool = False
                  ) -> tuple[Path, Path]:
        """Write the per-case table to ``path`` and the totals next to it
        (``STEM-totals.csv``), atomically; existing files are kept unless ``overwrite``."""
        path = Path(path)
        totals = path.with_name(f"{path.stem}-totals{path.suffix or '.csv'}")
        cases = self.case_table()
        if self.problems:
            broken = pd.DataFrame([{"case": p.name, "risk under the rule": "not reviewed",
                                    "patient basis": p.message} for p in self.problems])
            cases = pd.concat([cases, broken], ignore_index=True)
        return (write_text_atomic(path, cases.to_csv(index=False), overwrite=overwrite),
                write_text_atomic(totals, self.totals_table().to_csv(index=False),
                                  overwrite=overwrite))


def _review_item(item: tuple, parallel: bool) -> CaseReview | CaseProblem:
    """Work function of :func:`map_chunks`: one record, its problem caught and returned."""
    record, rule, prices, options = item
    try:
        return review_case(record, rule, prices=prices, **options)
    except Exception as exc:  # one broken case must not stop the others
        kind = "" if isinstance(exc, InputError) else f"{type(exc).__name__}: "
        return CaseProblem(record.path, record.name, f"{kind}{exc}")


def review_records(records: list[CaseRecord], rule: FlowRule, *,
                   prices: DepartmentPrices | None = None, draws: int = 20, seed: int = 0,
                   every_min: float = 5.0, window_min: float = 5.0, scheduler: Any = None,
                   workers: int | None = None, fallback_to_local: bool = False,
                   progress=None, problems: list[CaseProblem] | None = None
                   ) -> DepartmentReview:
    """Review ``records`` under ``rule``.

    Parameters
    ----------
    records : list of CaseRecord
    rule : FlowRule
    prices : DepartmentPrices, optional
        Prices per agent (default: each record's own ``[prices]``).
    draws : int, 0–500
        Drawn patients per case for the intervals.
    seed : int
        Seed; each case's draws use it with the case's name, so a case gets the same draws
        whatever else is in the folder.
    every_min, window_min : float, min
        As for :func:`~circlesim.department.counterfactual.review_case`.
    scheduler, workers, fallback_to_local
        Where the cases run (:func:`circlesim.base.distributed.map_chunks`).
    progress : callable or bool, optional
        Called with 1 as each case finishes (e.g. a tqdm bar's ``update``); True shows a
        progress bar of its own.
    problems : list of CaseProblem, optional
        Records already found broken (listed in the review).
    """
    start = time.perf_counter()
    items = []
    for record in records:
        own = prices.for_agent(record.agent) if prices is not None else None
        case_seed = (seed + zlib.crc32(record.name.encode())) % (2 ** 32)
        items.append((record, rule, own, dict(draws=draws, seed=case_seed,
                                              every_min=every_min, window_min=window_min)))
    bar = None
    if progress is True:  # a progress bar of its own (terminal or notebook)
        from tqdm.auto import tqdm

        bar = tqdm(total=len(items), desc="cases", unit="case")
        progress = bar.update
    try:
        run = map_chunks(_review_item, items, scheduler=scheduler, workers=workers,
                         fallback_to_local=fallback_to_local, progress=progress or None)
    finally:
        if bar is not None:
            bar.close()
    reviews = [r for r in run.results if isinstance(r, CaseReview)]
    found = list(problems or []) + [r for r in run.results if isinstance(r, CaseProblem)]
    currency = prices.currency if prices is not None else next(
        (r.scenario.prices.currency for r in records if r.scenario.prices is not None), "")
    return DepartmentReview(rule=rule, reviews=reviews, problems=found, where=run.where,
                            seconds=time.perf_counter() - start, draws=draws,
                            currency=currency)


def review_folder(folder: str | os.PathLike, rule: FlowRule, **options: Any
                  ) -> DepartmentReview:
    """Review every case record in ``folder`` under ``rule`` (options of
    :func:`review_records`). Records that cannot be read are listed as problems.

    Raises
    ------
    InputError
        If ``folder`` is not a folder or holds no case records.
    """
    records, broken = load_cases(folder)
    problems = [CaseProblem(path, Path(path).stem, message) for path, message in broken]
    return review_records(records, rule, problems=problems, **options)

