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
import threading
import time
from copy import deepcopy
from dataclasses import replace
from pathlib import Path

import ipywidgets as w

from circlesim.app.advise_panel import AdvisePanel
from circlesim.app.band_panel import (
    BandPanel,
    BandWorker,
    band_outcomes_html,
    band_warnings_html,
    kernel_loop,
    measured_points,
    on_main_thread,
)
from circlesim.app.comparison import outcome_table, table_html
from circlesim.app.controls import SettingsPanel
from circlesim.app.export import ExportPanel
from circlesim.app.fields import format_number
from circlesim.app.figure_shown import FigureShown
from circlesim.app.figures import figure_widget, refresh_figures
from circlesim.app.fit_width import FitWidth
from circlesim.app.loading import LoadBar, examples_folder
from circlesim.app.plan_columns import locate_error
from circlesim.app.plan_editor import PlanEditor
from circlesim.app.runner import Runner
from circlesim.app.style import style_widget
from circlesim.app.warnings_panel import alerts_html, caution_html, error_html
from circlesim.base.validation import InputError
from circlesim.domain.plan import Plan
from circlesim.population.band import Band
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
    scenario_folder : path, optional
        Folder of the scenario file, for a fitted scenario's case record (``[fit] record`` is
        relative to it); default: the working folder.

    Attributes
    ----------
    runner : Runner
        Last good prediction, reference plan and current error.
    settings : SettingsPanel
    editor : PlanEditor
    figure : plotly.graph_objects.FigureWidget
        The agent and oxygen panels (and the band), updated in place on every change.
    more_figure : plotly.graph_objects.FigureWidget or None
        N2O and N2, flows and bag, liquid agent: updated right after :attr:`figure`. In a
        kernel it is made once the page shows :attr:`figure` (None until then).
    widget : ipywidgets.VBox
    """

    def __init__(self, scenario: Scenario | None = None, *,
                 output_folder: str | Path | None = None,
                 scenario_folder: str | Path | None = None) -> None:
        self.scenario = scenario if scenario is not None else demo_scenario()
        self.scenario_folder = Path(scenario_folder) if scenario_folder else None
        self.runner = Runner()
        self.last_update_ms = 0.0
        self.last_band_ms = 0.0
        self.band: Band | None = None
        self._figure_lock = threading.RLock()
        self._measured_cache: tuple[str, tuple] = ("", ())
        self._muted = False
        self.band_panel = BandPanel()
        self.band_warnings = w.HTML()
        self.band_warnings.add_class("cs-band-warnings")
        self.band_outcomes = w.HTML()
        self.band_outcomes.add_class("cs-band-outcomes-box")
        self.band_note = w.HTML()
        self.band_note.add_class("cs-band-note")
        self.worker = BandWorker(
            lambda *args: on_main_thread(lambda: self._band_done(*args)),
            lambda *args: on_main_thread(lambda: self._band_failed(*args)))
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
        self.figure = self.more_figure = None
        self._show_inputs(self.scenario)
        self.update()
        if self.figure is None:
            raise InputError(f"the scenario cannot be run: {self.runner.error}")
        self.status.value = "<span class='cs-status'>Prediction ready.</span>"
        self.settings.observe(self._setting_changed)
        self.editor.observe(self._plan_changed)
        self.band_panel.observe(lambda _: self.request_band())
        self.widget = self._layout()
        self._first_band()

    # ---- layout ------------------------------------------------------------------------
    def _layout(self) -> w.VBox:
        """One screen: the plan and its results on the left, the figure beside them.

        The less used settings (patient and equipment, the band, saving) are tabs beside the
        plan, so at 1366×768 the plan table, the warnings and the agent and oxygen panels are
        on screen together.
        """
        def card(*children: w.Widget, cls: str = "") -> w.VBox:
            box = w.VBox(list(children), layout=w.Layout(flex="0 0 auto",
                                                         margin="3px 0 3px 0"))
            box.add_class("cs-card")
            if cls:
                box.add_class(cls)
            return box

        plan_tab = w.VBox([w.HBox([self.loader.widget], layout=w.Layout(margin="0 0 4px 0")),
                           self.editor.widget])
        tabs = w.Tab(children=[plan_tab, self.settings.widget, self.band_panel.widget,
                               self.export.widget])
        for k, title in enumerate(("Plan", "Patient and equipment", "Spread", "Save")):
            tabs.set_title(k, title)
        tabs.add_class("cs-main-tabs")
        self.tabs = tabs
        warnings = card(self.warnings, self.band_warnings, cls="cs-warnings-card")
        results = card(w.HTML("<div class='cs-section'>Outcomes</div>"),
                       w.HBox([self.keep_button, self.clear_button],
                              layout=w.Layout(grid_gap="6px", margin="0 0 4px 0")),
                       self.outcomes, self.band_outcomes)
        left = w.VBox([tabs, self.error, self.advisor.widget, warnings, results],
                      layout=w.Layout(flex="0 1 760px", min_width="0"))
        left.add_class("cs-left")
        figures = [f for f in (self.figure, self.more_figure) if f is not None]
        right = w.VBox([w.HBox([self.status, self.band_note],
                               layout=w.Layout(grid_gap="12px", flex_flow="row wrap")),
                        *figures],
                       layout=w.Layout(flex="1 1 480px", min_width="0"))
        right.add_class("cs-right")
        self.right = right
        main = w.HBox([left, right], layout=w.Layout(flex_flow="row nowrap",
                                                     align_items="flex-start",
                                                     grid_gap="10px"))
        main.add_class("cs-main")
        app = w.VBox([style_widget(), w.HTML(caution_html()), self.title, main, FitWidth(),
                      FigureShown(self._add_more_figure)])
        app.add_class("cs-app")
        return app

    def _repr_mimebundle_(self, **kwargs):
        # As plotly's own FigureWidget display does: the page's first view of the figure
        # is its state now, with everything drawn since it was made.
        with self._figure_lock:
            for figure in self.figures:
                figure._widget_layout = deepcopy(figure._layout_obj._props)
                figure._widget_data = deepcopy(figure._data)
        return self.widget._repr_mimebundle_(**kwargs)

    @property
    def figures(self) -> tuple:
        """The figures made so far: the agent and oxygen panels, then the others."""
        return tuple(f for f in (self.figure, self.more_figure) if f is not None)

    def _add_more_figure(self) -> None:
        """Make the second figure (in a kernel: once the page shows the first, see
        :class:`~circlesim.app.figure_shown.FigureShown`) and put it below the first."""
        if self.more_figure is not None or self.runner.current is None:
            return
        results, labels = self.runner.shown()
        with self._figure_lock:
            self.more_figure = figure_widget(
                results, labels, self.runner.current.scenario.report.fio2_threshold, main=False)
        if hasattr(self, "right"):
            self.right.children = (*self.right.children, self.more_figure)

    def _first_band(self) -> None:
        """The first band, before the app is shown (Voilà runs this ahead of the page)."""
        if not self.band_panel.enabled.value or self.runner.current is None:
            return
        from circlesim.population.band import run_band

        start = time.perf_counter()
        try:
            settings = self.band_panel.read()
            control = self.runner.current.result.control
            band = run_band(self.runner.current.scenario, settings,
                            plan=None if control is None else control.plan)
        except InputError as exc:
            self.band_panel.show_error(str(exc))
            return
        self._band_done(band, 1000.0 * (time.perf_counter() - start), self.worker.generation)

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
        with self._figure_lock:
            self._draw()

    def clear_reference(self) -> None:
        """Drop the reference plan."""
        self.runner.clear_reference()
        self.clear_button.disabled = True
        with self._figure_lock:
            self._draw()

    def show_error(self, message: str, row: int | None = None, key: str | None = None) -> None:
        """Show an inline error; the last prediction stays on screen."""
        self.runner.fail(message)
        self.editor.mark(row, key)
        self.error.value = error_html(message)
        if self.runner.current is not None:
            self.warnings.value = alerts_html(self.runner.current.result.alerts, stale=True,
                                              targets=_targets(self.runner.current.result))
            self.band_warnings.value = band_warnings_html(self.band, stale=True)

    def read_inputs(self) -> Scenario:
        """The scenario the controls describe.

        Raises
        ------
        InputError
            Naming the step and column, or the setting, that is out of range.
        """
        plan = self.editor.read()
        return self.settings.apply(replace(self.scenario, plan=plan))

    def request_band(self) -> bool:
        """Ask the background worker for the band of the current prediction (returns at
        once). Returns False if the band is off or its settings are bad (an inline error
        then names the field and the last good band stays)."""
        current = self.runner.current
        if not self.band_panel.enabled.value:
            self.worker.cancel()
            self.band = None
            self.band_panel.show_error(None)
            self.band_panel.status.value = ""
            with self._figure_lock:
                if self.figure is not None:
                    from circlesim.reports.band import set_band

                    set_band(self.figure, None)
            self.band_warnings.value = self.band_outcomes.value = self.band_note.value = ""
            return False
        try:
            settings = self.band_panel.read()
        except InputError as exc:
            self.band_panel.show_error(str(exc))
            return False
        self.band_panel.show_error(None)
        if current is None:
            return False
        self.band_panel.settings = settings
        plan = current.result.control.plan if current.result.control is not None else None
        self.band_panel.status.value = ("<span class='cs-status cs-busy'>Computing the "
                                        "spread…</span>")
        self.worker.submit(current.scenario, settings, plan)
        return True

    def _band_done(self, band: Band, elapsed_ms: float, generation: int) -> None:
        """Draw the band if it is still the newest (on the kernel's main thread)."""
        from circlesim.reports.band import set_band

        measured = self._measured(band)
        with self._figure_lock:
            if generation != self.worker.generation or self.figure is None:
                return
            set_band(self.figure, band, self.scenario.vaporizer.agent, measured)
        self.band = band
        self.last_band_ms = elapsed_ms
        self.band_warnings.value = band_warnings_html(band)
        self.band_outcomes.value = band_outcomes_html(band)
        points = f"; {sum(len(m.values) for m in measured)} measured points" if measured \
            else ""
        who = "draws from the fit" if band.basis.startswith("the fit") else "similar patients"
        self.band_note.value = (f"<span class='cs-status'><b>Shaded:</b> {band.settings.label} "
                                f"of {band.n} {who} (end-tidal and brain agent, FIO2)</span>")
        self.band_panel.status.value = (
            f"<span class='cs-status'>Band over {band.n} {band.basis.replace('the ', '')} "
            f"({band.settings.label}, shaded) updated in {elapsed_ms:.0f} ms{points}.</span>")

    def _band_failed(self, message: str, generation: int) -> None:
        if generation != self.worker.generation:
            return
        self.band_panel.show_error(message)
        self.band_panel.status.value = ""

    def _measured(self, band: Band) -> tuple:
        """Measured points of a fitted scenario's case record (none if it has none)."""
        fit = self.scenario.fit
        if fit is None or not fit.record or not band.basis.startswith("the fit"):
            return ()
        path = (self.scenario_folder or Path.cwd()) / fit.record
        if self._measured_cache[0] != str(path):
            self._measured_cache = (str(path),
                                    measured_points(path, self.scenario.vaporizer.agent))
        return self._measured_cache[1]

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
        with self._figure_lock:
            self._draw()
        self.last_update_ms = 1000.0 * (time.perf_counter() - start)
        self.status.value = (f"<span class='cs-status'>Prediction updated in "
                             f"{self.last_update_ms:.0f} ms (engine and figure data).</span>")
        if self.figure is not None and hasattr(self, "widget"):
            self.request_band()
        return True

    # ---- internals ----------------------------------------------------------------------------
    def _draw(self) -> None:
        """Figures first (that is what the user watches), then the panels."""
        current = self.runner.current
        results, labels = self.runner.shown()
        threshold = current.scenario.report.fio2_threshold
        if self.figure is None:
            self.figure = figure_widget(results, labels, threshold, main=True)
            if kernel_loop() is None:  # plain Python: no page to wait for
                self._add_more_figure()
        else:
            refresh_figures(self.figures, results, labels, threshold)
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
    folder = None
    if isinstance(scenario, str | Path):
        folder = Path(scenario).parent
        scenario = load_scenario(scenario)
    return PlannerApp(scenario, output_folder=output_folder, scenario_folder=folder)
