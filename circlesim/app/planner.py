"""The planner app: settings, plan editor, live figure, warnings, comparison and export.

Every change re-reads the inputs, re-runs the engine and updates one plotly ``FigureWidget``
in place. Inputs that cannot be run show an inline error (and outline the cell at fault) while
the figure, warnings and outcomes keep the last prediction that ran.

Target mode and the advisor: the plan table's Target column (× age-adjusted MAC, or vol%
with a % sign) hands the dial to circlesim's target controller; the figure then shows the
target and the dial the controller set, the warnings and outcomes say whether each target was
met, and "Use the controller's dials" loads the controller's knob-level plan into the table.
"Advise" opens :class:`~circlesim.app.advise_panel.AdvisePanel`, which asks the plan advisor
for flows and dials that meet a target and can load its plan.

Extending it: ``app.editor.add_action(label, callback)`` adds a button to the plan toolbar and
``app.editor.add_column(Column(..., step_field=False))`` a column whose text
``app.editor.extras()`` returns; a callback may change cells with ``app.editor.set_cell`` (which
triggers a new prediction) or load a whole plan with ``app.show_plan(plan)``.
"""

from __future__ import annotations

import html
import time
from dataclasses import replace
from pathlib import Path

import ipywidgets as w

from circlesim.app.advise_panel import AdvisePanel
from circlesim.app.comparison import outcome_table, table_html
from circlesim.app.controls import SettingsPanel
from circlesim.app.export import ExportPanel
from circlesim.app.fields import format_number
from circlesim.app.fit_width import FitWidth
from circlesim.app.loading import LoadBar, examples_folder
from circlesim.app.plan_columns import locate_error
from circlesim.app.plan_editor import PlanEditor
from circlesim.app.runner import Runner
from circlesim.app.style import style_widget
from circlesim.app.warnings_panel import alerts_html, caution_html, error_html
from circlesim.base.validation import InputError
from circlesim.domain.plan import Plan
from circlesim.scenario import Scenario, load_scenario

__all__ = ["DEMO_SCENARIO", "PlannerApp", "planner"]

#: The invented demonstration case loaded at start-up.
DEMO_SCENARIO = "flow_reduction_sevoflurane.toml"

_MIRRORED = ("tidal_volume_ml", "rate_per_min")


def demo_scenario() -> Scenario:
    """The start-up scenario (``scenarios/flow_reduction_sevoflurane.toml``)."""
    folder = examples_folder()
    if folder is None or not (folder / DEMO_SCENARIO).is_file():
        raise InputError(f"the demo scenario {DEMO_SCENARIO} was not found; pass a scenario "
                         "to the planner (planner(scenario=...)).")
    return load_scenario(folder / DEMO_SCENARIO)


class PlannerApp:
    """The planner as one widget tree (show it by leaving it as a cell's last expression).

    Parameters
    ----------
    scenario : Scenario, optional
        What to show first (default: the demo scenario).
    output_folder : path, optional
        Where exports go (default ``out/``).

    Attributes
    ----------
    runner : Runner
        Last good prediction, reference plan and current error.
    settings : SettingsPanel
    editor : PlanEditor
    figure : plotly.graph_objects.FigureWidget
        The one figure, updated in place.
    widget : ipywidgets.VBox
    """

    def __init__(self, scenario: Scenario | None = None, *,
                 output_folder: str | Path | None = None) -> None:
        self.scenario = scenario if scenario is not None else demo_scenario()
        self.runner = Runner()
        self.last_update_ms = 0.0
        self._muted = False
        self.settings = SettingsPanel()
        self.editor = PlanEditor()
        self.loader = LoadBar(lambda: self.scenario, self.load, self.show_error)
        self.keep_button = w.Button(description="Keep as reference plan", icon="thumb-tack",
                                    tooltip="Keep this prediction; later changes are drawn "
                                            "dashed beside it", layout=w.Layout(width="auto"))
        self.keep_button.add_class("cs-keep-reference")
        self.keep_button.on_click(lambda _: self.keep_reference())
        self.clear_button = w.Button(description="Clear reference", icon="times",
                                     layout=w.Layout(width="auto"), disabled=True)
        self.clear_button.add_class("cs-clear-reference")
        self.clear_button.on_click(lambda _: self.clear_reference())
        self.title = w.HTML()
        self.error = w.HTML()
        self.error.add_class("cs-error-box")
        self.status = w.HTML()
        self.warnings = w.HTML()
        self.warnings.add_class("cs-warnings")
        self.outcomes = w.HTML()
        self.outcomes.add_class("cs-outcomes")
        self.export = ExportPanel(lambda: (self.runner.current, self.runner.reference),
                                  Path(output_folder) if output_folder else None)
        self.adopt_button = self.editor.add_action(
            "Use the controller's dials", lambda _: self.adopt_controller_plan(),
            tooltip="Replace the targets by the flows and dial settings the target controller "
                    "chose: a plan you can follow with the knobs")
        self.adopt_button.disabled = True
        self.advisor = AdvisePanel(lambda: self.scenario, self._load_advice)
        self.advise_button = self.editor.add_action(
            "Advise", lambda _: self.advisor.open(),
            tooltip="Ask the plan advisor for flows and dials that meet an end-tidal target")
        self.figure = None
        self._show_inputs(self.scenario)
        self.update()
        if self.figure is None:
            raise InputError(f"the scenario cannot be run: {self.runner.error}")
        self.status.value = "<span class='cs-status'>Prediction ready.</span>"
        self.settings.observe(self._setting_changed)
        self.editor.observe(self._plan_changed)
        self.widget = self._layout()

    # ---- layout ------------------------------------------------------------------------
    def _layout(self) -> w.VBox:
        def card(*children: w.Widget) -> w.VBox:
            box = w.VBox(list(children), layout=w.Layout(flex="0 0 auto",
                                                         margin="4px 6px 4px 0"))
            box.add_class("cs-card")
            return box

        section = "<div class='cs-section'>{}</div>"
        plan_card = card(w.HTML(section.format("Plan")),
                         w.HBox([self.loader.widget], layout=w.Layout(margin="0 0 4px 0")),
                         self.editor.widget)
        settings_card = card(w.HTML(section.format("Patient and equipment")),
                             self.settings.widget)
        results = card(self.warnings,
                       w.HTML(section.format("Outcomes")),
                       w.HBox([self.keep_button, self.clear_button],
                              layout=w.Layout(grid_gap="6px", margin="0 0 4px 0")),
                       self.outcomes)
        save = card(w.HTML(section.format("Save")), self.export.widget)
        left = w.VBox([plan_card, settings_card], layout=w.Layout(flex="0 1 960px"))
        right = w.VBox([results, save], layout=w.Layout(flex="1 1 420px"))
        top = w.HBox([left, right], layout=w.Layout(flex_flow="row wrap",
                                                    align_items="flex-start"))
        app = w.VBox([style_widget(), w.HTML(caution_html()), self.title, top,
                      self.advisor.widget, self.error, self.status, self.figure, FitWidth()])
        app.add_class("cs-app")
        return app

    def _repr_mimebundle_(self, **kwargs):
        return self.widget._repr_mimebundle_(**kwargs)

    # ---- public actions -----------------------------------------------------------------------
    def load(self, scenario: Scenario) -> None:
        """Show ``scenario`` in every control and predict it."""
        self._show_inputs(scenario)
        self.update()

    def show_plan(self, plan: Plan) -> None:
        """Put ``plan`` into the table and predict it (the other settings stay)."""
        self.load(replace(self.scenario, plan=plan))

    def adopt_controller_plan(self) -> bool:
        """Put the target controller's plan (flows and dials, no targets) into the table and
        predict it. Returns False when the current prediction has no targets."""
        current = self.runner.current
        if current is None or current.result.control is None:
            return False
        self.show_plan(current.result.control.plan)
        return True

    def keep_reference(self) -> None:
        """Keep the current prediction as the reference plan."""
        self.runner.keep_reference()
        self.clear_button.disabled = self.runner.reference is None
        self._draw()

    def clear_reference(self) -> None:
        """Drop the reference plan."""
        self.runner.clear_reference()
        self.clear_button.disabled = True
        self._draw()

    def show_error(self, message: str, row: int | None = None, key: str | None = None) -> None:
        """Show an inline error; the last prediction stays on screen."""
        self.runner.fail(message)
        self.editor.mark(row, key)
        self.error.value = error_html(message)
        if self.runner.current is not None:
            self.warnings.value = alerts_html(self.runner.current.result.alerts, stale=True,
                                              targets=_targets(self.runner.current.result))

    def read_inputs(self) -> Scenario:
        """The scenario the controls describe.

        Raises
        ------
        InputError
            Naming the step and column, or the setting, that is out of range.
        """
        plan = self.editor.read()
        return self.settings.apply(replace(self.scenario, plan=plan))

    def update(self) -> bool:
        """Read the inputs, run the engine and redraw. Returns True if a new prediction ran."""
        start = time.perf_counter()
        try:
            scenario = self.read_inputs()
        except InputError as exc:
            self.show_error(*locate_error(str(exc), self.editor.columns))
            return False
        if not self.runner.run(scenario):
            self.show_error(*locate_error(self.runner.error or "", self.editor.columns))
            return False
        self.scenario = scenario
        self._draw()
        self.last_update_ms = 1000.0 * (time.perf_counter() - start)
        self.status.value = (f"<span class='cs-status'>Prediction updated in "
                             f"{self.last_update_ms:.0f} ms (engine and figure data).</span>")
        return True

    # ---- internals ----------------------------------------------------------------------------
    def _draw(self) -> None:
        """Figure first (that is what the user watches), then the panels."""
        from circlesim.reports.timeline import refresh_timeline, timeline_figure

        current = self.runner.current
        results, labels = self.runner.shown()
        threshold = current.scenario.report.fio2_threshold
        if self.figure is None:
            self.figure = timeline_figure(results, labels, fio2_threshold=threshold,
                                          widget=True)
            self.figure.add_class("cs-figure")
            self.figure._config = {**self.figure._config, "responsive": True,
                                   "displaylogo": False}
        else:
            refresh_timeline(self.figure, results, labels, fio2_threshold=threshold)
        self.error.value = ""
        self.editor.mark(None, None)
        self.warnings.value = alerts_html(current.result.alerts,
                                          targets=_targets(current.result))
        self.outcomes.value = table_html(*outcome_table(current, self.runner.reference))
        self.adopt_button.disabled = current.result.control is None
        self._show_derived(current.scenario)
        sc = current.scenario
        question = (f"<div class='cs-subtitle'>{html.escape(sc.question)}</div>"
                    if sc.question else "")
        self.title.value = (f"<div class='cs-title'>circlesim planner — "
                            f"{html.escape(sc.title or sc.plan.name)}</div>{question}")

    def _load_advice(self, plan: Plan, target_mac: float) -> None:
        """Load an advised plan; the outcomes' end-tidal target becomes the advised one."""
        self.load(replace(self.scenario, plan=plan, report=replace(
            self.scenario.report, target_end_tidal_mac=target_mac)))

    def _show_inputs(self, scenario: Scenario) -> None:
        self._muted = True
        try:
            self.scenario = scenario
            self.editor.show(scenario.plan)
            self.settings.show(scenario)
        finally:
            self._muted = False

    def _show_derived(self, scenario: Scenario) -> None:
        self._muted = True
        try:
            self.settings.show_derived(scenario)
            p = scenario.patient
            self.editor.set_placeholders({
                "tidal_volume_ml": format_number(round(p.default_tidal_volume_ml)),
                "rate_per_min": format_number(p.default_rate_per_min)})
        finally:
            self._muted = False

    def _setting_changed(self, change: dict) -> None:
        if self._muted:
            return
        for key in _MIRRORED:
            field = self.settings.field(key)
            if change["owner"] in (field.input, field.override):
                self.editor.set_cell(0, key, field.value, notify=False)
        self.update()

    def _plan_changed(self) -> None:
        if self._muted:
            return
        self._muted = True
        try:
            for key in _MIRRORED:
                text = self.editor.rows[0].cells[key].value.strip()
                try:
                    self.settings.field(key).show(float(text) if text else None)
                except ValueError:
                    pass
        finally:
            self._muted = False
        self.update()


def _targets(result) -> tuple:
    """The target reports of a result in target mode (none otherwise)."""
    return () if result.control is None else result.control.targets


def planner(scenario: Scenario | str | Path | None = None, *,
            output_folder: str | Path | None = None) -> PlannerApp:
    """The planner app, ready to show in a notebook or served by Voilà.

    Parameters
    ----------
    scenario : Scenario or path, optional
        A scenario or a scenario TOML file (default: the demo scenario).
    output_folder : path, optional
        Where the Save buttons write (default ``out/``).
    """
    if isinstance(scenario, str | Path):
        scenario = load_scenario(scenario)
    return PlannerApp(scenario, output_folder=output_folder)
