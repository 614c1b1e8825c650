"""The "Advise" panel: ask the plan advisor for flows and dials that meet an end-tidal target.

The user gives the target (× age-adjusted MAC), the time allowed to reach it, what to aim for
(least liquid agent, least CO2-equivalent, least time to target) and the main limits (lowest
FIO2, lowest and highest fresh gas flow, largest dial, changes per hour, the agent's
labelling). :func:`circlesim.advisor.advise.advise` then searches a plan for the patient, breathing
system and vaporizer of the current prediction and the plan's length; the panel shows the
plan, what it saves against a plain high-flow plan, the advisor's explanation and problems,
its checks and the trade-off between time to target and agent used, and can load the plan into
the editor. Inputs the advisor cannot take, and targets it cannot meet, are explained in the
panel (with the closest plan), never as a traceback.
"""

from __future__ import annotations

import html
import re
from collections.abc import Callable

import ipywidgets as w

from circlesim.advisor.advise import advise
from circlesim.advisor.answer import Advice
from circlesim.advisor.inputs import Constraints, Targets
from circlesim.app.comparison import table_html
from circlesim.app.fields import CheckField, ChoiceField, NumberField, format_number
from circlesim.app.plotly_bundle import figure_widget_class
from circlesim.app.warnings_panel import alerts_html
from circlesim.base.validation import InputError, Interval, check_whole_number
from circlesim.domain.plan import Plan
from circlesim.engine.simulate import SimulationError
from circlesim.scenario import Scenario

__all__ = ["OBJECTIVE_CHOICES", "AdvisePanel"]

#: What the advisor may aim for: (shown text, objective of
#: :func:`~circlesim.advisor.advise.advise`).
OBJECTIVE_CHOICES = (("least liquid agent", "agent"), ("least CO2-equivalent", "co2e"),
                     ("least time to target", "time"))

#: The model's word on the advice, always shown in the panel.
ADVICE_CAUTION = ("The advice is a model prediction for planning: follow it only while "
                  "checking inspired and end-tidal agent and O2 on the gas monitor, and "
                  "correct the settings by what you measure.")

_CHECK_WORDS = {"end_tidal_target": "end-tidal target", "fio2": "FIO2",
                "flow_range": "flow range", "dial_range": "dial limit",
                "changes_per_hour": "changes per hour", "labelling": "labelling"}


class AdvisePanel:
    """The advisor's form, busy state, answer and trade-off figure.

    Parameters
    ----------
    current : callable returning Scenario
        The scenario of the current prediction (patient, breathing system, vaporizer,
        absorbent, plan length, report settings).
    load : callable taking (Plan, float)
        Loads the advised plan and its target (× age-adjusted MAC) into the planner.

    Attributes
    ----------
    widget : ipywidgets.VBox
        Hidden until :meth:`open` is called.
    advice : Advice or None
        The last answer (None before the first, or after inputs the advisor rejected).
    error : str or None
        Why the last request could not be answered.
    pareto : plotly.graph_objects.FigureWidget or None
        The trade-off figure, updated in place by each answer.
    """

    def __init__(self, current: Callable[[], Scenario],
                 load: Callable[[Plan, float], None]) -> None:
        self._current = current
        self._load = load
        self.advice: Advice | None = None
        self.error: str | None = None
        self.pareto = None
        self._target_mac = 1.0
        self._defaults_for: tuple | None = None
        self.target = NumberField("advise_target", "End-tidal target", "× age-adjusted MAC",
                                  1.0)
        self.within = NumberField("advise_within", "Time allowed to reach it", "min", 10.0)
        self.objective = ChoiceField("advise_objective", "Aim for", list(OBJECTIVE_CHOICES),
                                     "agent")
        self.min_fio2 = NumberField("advise_min_fio2", "Lowest FIO2", "fraction", 0.30)
        self.min_fgf = NumberField("advise_min_fgf", "Lowest fresh gas flow", "L/min", 0.5)
        self.max_fgf = NumberField("advise_max_fgf", "Highest fresh gas flow", "L/min", 8.0)
        self.max_dial = NumberField("advise_max_dial", "Largest dial", "vol%", 8.0)
        self.changes = NumberField("advise_changes", "Changes per hour, at most", "", 6.0,
                                   tooltip="changes of flow or dial in any hour")
        self.labelling = CheckField("advise_labelling", "Follow the agent's labelling", True,
                                    tooltip="for sevoflurane: no flow below 1 L/min, at most "
                                            "2 MAC-hours at 1 to < 2 L/min (circlesim's "
                                            "alert rules)")
        self.run_button = w.Button(description="Find a plan", button_style="primary",
                                   layout=w.Layout(width="auto"))
        self.run_button.add_class("cs-advise-run")
        self.run_button.on_click(lambda _: self.run())
        self.close_button = w.Button(description="Close", layout=w.Layout(width="auto"))
        self.close_button.add_class("cs-advise-close")
        self.close_button.on_click(lambda _: self.close())
        self.load_button = w.Button(description="Load this plan into the editor",
                                    disabled=True, layout=w.Layout(width="auto"))
        self.load_button.add_class("cs-advise-load")
        self.load_button.on_click(lambda _: self.load())
        self.about = w.HTML()
        self.status = w.HTML()
        self.status.add_class("cs-advise-status")
        self.answer = w.HTML()
        self.answer.add_class("cs-advise-answer")
        self.figure_box = w.Box(layout=w.Layout(flex="1 1 380px", min_width="320px"))
        self.widget = self._layout()

    # ---- layout -----------------------------------------------------------------------------
    def _layout(self) -> w.VBox:
        aim = w.VBox([self.target.widget, self.within.widget, self.objective.widget],
                     layout=w.Layout(margin="0 24px 0 0"))
        limits = w.VBox([self.min_fio2.widget, self.min_fgf.widget, self.max_fgf.widget,
                         self.max_dial.widget, self.changes.widget, self.labelling.widget])
        buttons = w.HBox([self.run_button, self.load_button, self.close_button],
                         layout=w.Layout(grid_gap="6px", margin="6px 0"))
        answer = w.HBox([w.VBox([self.answer], layout=w.Layout(flex="1 1 520px")),
                         self.figure_box], layout=w.Layout(flex_flow="row wrap"))
        box = w.VBox([
            w.HTML("<div class='cs-section'>Advise: flows and dials for an end-tidal target"
                   "</div>"),
            w.HTML(f"<div class='cs-advise-caution'>{html.escape(ADVICE_CAUTION)}</div>"),
            self.about,
            w.HBox([aim, limits], layout=w.Layout(flex_flow="row wrap")),
            buttons, self.status, answer,
        ], layout=w.Layout(display="none", margin="4px 6px 4px 0"))
        box.add_class("cs-card")
        box.add_class("cs-advise")
        return box

    # ---- actions ----------------------------------------------------------------------------
    def open(self) -> None:
        """Show the panel, with defaults from the current scenario (target, FIO2 limit,
        largest dial) the first time and whenever the agent or the report targets change."""
        sc = self._current()
        key = (sc.vaporizer.agent, sc.vaporizer.max_dial, sc.report.target_end_tidal_mac,
               sc.report.fio2_threshold)
        if key != self._defaults_for:
            self._defaults_for = key
            self.target.show(sc.report.target_end_tidal_mac)
            self.min_fio2.show(sc.report.fio2_threshold)
            self.max_dial.show(sc.vaporizer.max_dial)
        self.about.value = _about(sc)
        self.widget.layout.display = ""

    def close(self) -> None:
        """Hide the panel (the last answer stays for the next time it opens)."""
        self.widget.layout.display = "none"

    @property
    def is_open(self) -> bool:
        return self.widget.layout.display != "none"

    def read(self, scenario: Scenario) -> tuple[Targets, Constraints, str]:
        """Targets, constraints and objective from the form.

        Raises
        ------
        InputError
            Naming the box (in the panel's words), the value and the allowed range.
        """
        changes = check_whole_number("Constraints.max_changes_per_hour", self.changes.value,
                                     Interval(0, 30))
        targets = Targets(end_tidal_mac=self.target.value, reach_within_min=self.within.value,
                          duration_min=scenario.plan.duration_min)
        constraints = Constraints(
            min_fio2=self.min_fio2.value, min_fgf_l_min=self.min_fgf.value,
            max_fgf_l_min=self.max_fgf.value, max_dial_percent=self.max_dial.value,
            max_changes_per_hour=changes, follow_labelling=self.labelling.value)
        return targets, constraints, str(self.objective.value)

    def run(self) -> Advice | None:
        """Ask the advisor (1–6 s) and show its answer; returns it (None on bad input)."""
        scenario = self._current()
        self.about.value = _about(scenario)
        self._busy(True)
        try:
            targets, constraints, objective = self.read(scenario)
            advice = advise(scenario.model_patient, scenario.model_circuit, scenario.vaporizer,
                            targets,
                            constraints, objective, absorber=scenario.absorber)
        except (InputError, SimulationError) as exc:
            self.advice, self.error = None, self._words(str(exc))
            self.status.value = (f"<div class='cs-error' role='alert'><b>Not advised:</b> "
                                 f"{html.escape(self.error)}</div>")
            self.answer.value = ""
            self.load_button.disabled = True
            return None
        finally:
            self._busy(False)
        self.advice, self.error = advice, None
        self._target_mac = targets.end_tidal_mac
        self._show(advice)
        return advice

    def load(self) -> None:
        """Load the advised (or closest) plan into the editor, which predicts it."""
        if self.advice is not None:
            self._load(self.advice.plan, self._target_mac)

    # ---- internals --------------------------------------------------------------------------
    def _busy(self, busy: bool) -> None:
        self.run_button.disabled = busy
        self.load_button.disabled = busy or self.advice is None
        self.run_button.description = "Working…" if busy else "Find a plan"
        self.run_button.icon = "spinner" if busy else ""
        if busy:
            self.status.value = ("<div class='cs-status cs-busy'>Searching flows and dials "
                                 "with the model — this takes a few seconds…</div>")

    def _words(self, message: str) -> str:
        """An advisor message with the form's labels for the fields it names."""
        labels = {"Targets.end_tidal_mac": "End-tidal target (× MAC)",
                  "Targets.reach_within_min": "Time allowed (min)",
                  "Targets.duration_min": "The plan's length (min)",
                  "Constraints.min_fio2": "Lowest FIO2",
                  "Constraints.min_fgf_l_min": "Lowest fresh gas flow (L/min)",
                  "Constraints.max_fgf_l_min": "Highest fresh gas flow (L/min)",
                  "Constraints.max_dial_percent": "Largest dial (vol%)",
                  "Constraints.max_changes_per_hour": "Changes per hour"}
        return re.sub("|".join(re.escape(k) for k in labels), lambda m: labels[m.group(0)],
                      message)

    def _show(self, advice: Advice) -> None:
        from circlesim.reports.advice import pareto_figure

        agent = advice.result.agent
        if advice.feasible:
            aim = next(text for text, key in OBJECTIVE_CHOICES if key == advice.objective)
            head = (f"<div class='cs-saved'><b>Advised plan ({aim}):</b> "
                    f"{advice.agent_ml:.1f} mL of liquid {agent}, "
                     f"{advice.saved_ml:.1f} mL ({advice.saved_percent:.0f} %) less than a "
                     f"plain {advice.reference_fgf_l_min:g} L/min plan "
                     + ("holding the same target." if advice.reference_holds_target else
                        "(which does not hold the same target: not a like-for-like "
                        "comparison).") + "</div>")
        else:
            head = ("<div class='cs-error' role='alert'><b>The target cannot be met within "
                    "these limits.</b> " + " ".join(html.escape(p) for p in advice.problems)
                    + " <span class='cs-unit'>Below: the closest plan found.</span></div>")
        lines = "".join(f"<div class='cs-advise-line'>{html.escape(line)}</div>"
                        for line in advice.explanation.splitlines()
                        if not line.startswith("Cannot be met:"))  # the problems are above
        checks = ", ".join(f"{_CHECK_WORDS.get(k, k)} {'ok' if ok else 'NOT met'}"
                           for k, ok in advice.checks.items())
        self.answer.value = (
            head + lines
            + table_html(*_plan_rows(advice), title="Plan" if advice.feasible
                         else "Closest plan")
            + f"<div class='cs-note'>Checked on a re-run of the plan: {checks}.</div>"
            + alerts_html(advice.result.alerts))
        self.status.value = (f"<span class='cs-status'>Advice computed in "
                             f"{advice.elapsed_s:.1f} s ({advice.evaluations} model runs)."
                             "</span>")
        self.load_button.description = ("Load this plan into the editor" if advice.feasible
                                        else "Load the closest plan into the editor")
        self.load_button.disabled = False
        if not advice.pareto:
            self.figure_box.layout.display = "none"
            return
        fig = pareto_figure(advice, height=340)
        fig.update_layout(title={"text": "Time to target against agent used",
                                 "font": {"size": 13}})
        if self.pareto is None:
            self.pareto = figure_widget_class()(fig)
            self.pareto.add_class("cs-pareto")
            self.figure_box.children = (self.pareto,)
        else:  # the same widget, new curves
            with self.pareto.batch_update():
                self.pareto.data = ()
                self.pareto.layout = fig.layout
            self.pareto.add_traces(list(fig.data))
        self.figure_box.layout.display = ""


def _about(sc: Scenario) -> str:
    p = sc.patient
    return ("<div class='cs-note'>For the current patient and equipment: "
            f"{format_number(p.weight_kg)} kg, {format_number(p.age_years)} years, "
            f"{html.escape(sc.vaporizer.agent)} vaporizer ({sc.vaporizer.placement} the "
            f"circle), circuit {format_number(sc.circuit.volume_l)} L, over the plan's "
            f"{format_number(sc.plan.duration_min)} min, with the patient's default "
            "ventilation.</div>")


def _plan_rows(advice: Advice) -> tuple[list[str], list[list[str]]]:
    table = advice.table()
    header = ["Time (m:ss)", "O2 (L/min)", "Air (L/min)", "Total (L/min)", "Dial (vol%)",
              "Note"]
    rows = [[r.time, format_number(r.o2_l_min), format_number(r.air_l_min),
             format_number(r.total_fgf_l_min), format_number(r.dial_percent), r.note]
            for r in table.itertuples()]
    return header, rows
