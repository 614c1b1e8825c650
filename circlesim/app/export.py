"""Saving what the planner shows: the plan or scenario as TOML, the prediction as CSV, and a
self-contained HTML snapshot.

Every file goes through :func:`circlesim.base.files.write_text_atomic`. Unless "replace existing
files" is ticked, a name already taken gets a free variant (``name-1.csv``, ``name-2.csv``…),
so a user's file is never overwritten.
"""

from __future__ import annotations

import html
import os
import re
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path

import ipywidgets as w
import tomli_w

from circlesim.app.comparison import outcome_table
from circlesim.app.plan_columns import STEP_COLUMNS, cell_value
from circlesim.app.runner import Prediction
from circlesim.base.files import write_text_atomic
from circlesim.cli.common import free_path
from circlesim.domain.plan import Plan
from circlesim.reports.html import Section, write_report
from circlesim.scenario import plan_to_toml

__all__ = ["KINDS", "ExportPanel", "default_folder", "export", "shown_path"]

#: Spacing of the exported time series, min (the command line's default).
CSV_INTERVAL_MIN = 0.1

#: What can be saved: kind -> (button label, file suffix).
KINDS = {
    "plan": ("Plan (TOML)", ".toml"),
    "scenario": ("Scenario (TOML)", "-scenario.toml"),
    "csv": ("Prediction (CSV)", ".csv"),
    "html": ("Snapshot (HTML)", ".html"),
}


def default_folder() -> Path:
    """``out/`` of the source checkout when run from one, else ``./out``."""
    root = Path(__file__).resolve().parents[2]
    return root / "out" if (root / "pyproject.toml").is_file() else Path.cwd() / "out"


def shown_path(path: Path) -> str:
    """``path`` as the app shows it: relative to the folder the app was started in, so no
    machine's absolute path appears on screen (or in a screenshot)."""
    try:
        return os.path.relpath(Path(path).expanduser().resolve(), Path.cwd())
    except ValueError:  # another drive (Windows): nothing shorter to show
        return str(path)


def _stem(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", name).strip("-").lower() or "plan"


def _plan_rows(plan: Plan) -> tuple[list[str], list[list[object]]]:
    header = [f"{c.header} ({c.unit})" if c.unit else c.header for c in STEP_COLUMNS]
    rows = [[cell_value(c, asdict(step)) for c in STEP_COLUMNS] for step in plan.steps]
    return header, rows


def snapshot_sections(current: Prediction, reference: Prediction | None) -> list[Section]:
    """Report sections: the plan, the figure with the warnings, and the outcomes."""
    from circlesim.reports.timeline import timeline_figure

    sc, result = current.scenario, current.result
    p = sc.patient
    results = [result] if reference is None else [reference.result, result]
    labels = None if reference is None else ["reference plan", "current plan"]
    figure = timeline_figure(results, labels, fio2_threshold=sc.report.fio2_threshold)
    about = [sc.question] if sc.question else []
    about.append(f"Patient: {p.weight_kg:g} kg, {p.height_cm:g} cm, {p.age_years:g} years, "
                 f"{p.sex}; O2 consumption used {p.vo2:.0f} mL/min, cardiac output "
                 f"{p.cardiac_output:.1f} L/min, FRC {p.frc:.2f} L. Agent: {result.agent}, "
                 f"age-adjusted MAC {result.mac_percent:.2f} %.")
    if reference is not None:
        about.append("Solid lines: the reference plan; dashed lines: the current plan.")
    if result.control is not None:  # target mode: each target's verdict
        about.extend(rep.message for rep in result.control.targets)
    return [
        Section(sc.title or sc.plan.name, paragraphs=about, tables=[_plan_rows(sc.plan)]),
        Section("Prediction", figures=[figure],
                warnings=[str(a) for a in result.alerts] or ["No alert rule fires."]),
        Section("Outcomes", tables=[outcome_table(current, reference)]),
    ]


def export(kind: str, current: Prediction, reference: Prediction | None, folder: Path,
           stem: str, *, overwrite: bool = False) -> Path:
    """Write one kind of file and return its path.

    Parameters
    ----------
    kind : {"plan", "scenario", "csv", "html"}
    current, reference : Prediction
    folder : Path
    stem : str
        File name without suffix.
    overwrite : bool
        Replace an existing file; otherwise a free name is chosen.
    """
    path = folder / f"{_stem(stem)}{KINDS[kind][1]}"
    if not overwrite:
        path = free_path(path)
    sc = current.scenario
    if kind == "plan":
        return write_text_atomic(path, plan_to_toml(sc.plan), overwrite=overwrite)
    if kind == "scenario":
        return write_text_atomic(path, tomli_w.dumps(sc.to_dict()), overwrite=overwrite)
    if kind == "csv":
        fine = sc.simulate(output_interval_min=CSV_INTERVAL_MIN)
        return fine.to_csv(path, overwrite=overwrite)
    return write_report(path, f"circlesim snapshot: {sc.title or sc.plan.name}",
                        snapshot_sections(current, reference),
                        inputs_toml=tomli_w.dumps(sc.to_dict()), overwrite=overwrite)


class ExportPanel:
    """Folder, name and one button per kind of file.

    Parameters
    ----------
    predictions : callable returning (current, reference)
        What to save (``current`` None: nothing has run yet).
    folder : Path, optional
    """

    def __init__(self, predictions: Callable[[], tuple[Prediction | None, Prediction | None]],
                 folder: Path | None = None) -> None:
        self._predictions = predictions
        self.folder = w.Text(value=shown_path(folder or default_folder()),
                             layout=w.Layout(flex="1 1 auto", width="auto"))
        self.stem = w.Text(value="", placeholder="from the plan's name",
                           layout=w.Layout(width="190px"))
        self.overwrite = w.Checkbox(value=False, description="replace existing files",
                                    indent=False, layout=w.Layout(width="auto",
                                                                  margin="0 0 0 12px"))
        self.buttons = {}
        for kind, (label, _) in KINDS.items():
            button = w.Button(description=label, icon="download",
                              layout=w.Layout(width="auto", margin="2px 6px 2px 0"))
            button.add_class(f"cs-save-{kind}")
            button.on_click(lambda _, k=kind: self.save(k))
            self.buttons[kind] = button
        self.status = w.HTML("")
        label = "<span class='cs-label'>{}</span>"
        row = w.Layout(align_items="center", margin="2px 0")
        self.widget = w.VBox([
            w.HBox([w.HTML(label.format("Folder"), layout=w.Layout(width="50px")),
                    self.folder], layout=row),
            w.HBox([w.HTML(label.format("Name"), layout=w.Layout(width="50px")), self.stem,
                    self.overwrite], layout=row),
            w.HBox(list(self.buttons.values()), layout=w.Layout(flex_flow="row wrap")),
            self.status,
        ])

    def save(self, kind: str) -> Path | None:
        """Save one kind of file; show where it went, or why it could not be saved."""
        current, reference = self._predictions()
        if current is None:
            self.status.value = "<div class='cs-error'>Nothing to save yet.</div>"
            return None
        stem = self.stem.value.strip() or current.scenario.plan.name
        try:
            path = export(kind, current, reference, Path(self.folder.value).expanduser().resolve(),
                          stem,
                          overwrite=self.overwrite.value)
        except OSError as exc:  # includes FileExistsNotOverwrittenError
            self.status.value = f"<div class='cs-error'>Not saved: {html.escape(str(exc))}</div>"
            return None
        self.status.value = (f"<div class='cs-saved'>Saved {KINDS[kind][0]} to "
                             f"<code>{html.escape(shown_path(path))}</code></div>")
        return path
