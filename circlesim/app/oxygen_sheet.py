"""An interactive sheet for the quality team (front-end layer; needs the ``app`` extra).

In a notebook::

    from circlesim.app.oxygen_sheet import OxygenSheet
    OxygenSheet().show()

Controls for the patient, the breathing system, the threshold and the carrier; a flow × O2 map,
the lowest-safe-fraction curve and table, and the oxygen course of one chosen make-up with that
plan's warnings (from the same alert rules as the planner app). Inputs that cannot be run show
an error naming the field and keep the last good figures on screen.
"""

from __future__ import annotations

from dataclasses import replace

import ipywidgets as w
import plotly.graph_objects as go

from circlesim.app.plotly_bundle import figure_widget_class
from circlesim.app.style import style_widget
from circlesim.app.warnings_panel import alerts_html, caution_html, error_html
from circlesim.base.validation import InputError
from circlesim.engine.simulate import SimulationError
from circlesim.oxygen.course import oxygen_course
from circlesim.oxygen.flow_map import oxygen_map
from circlesim.oxygen.minimum import safe_fraction_table
from circlesim.oxygen.setup import FreshGas, Setup, check_threshold, minimum_fgf_l_min
from circlesim.reports.oxygen_figures import course_figure, map_figure, safe_fraction_figure

__all__ = ["OxygenSheet"]

_FLOWS = (0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0)


def _replace(widget: go.FigureWidget, figure: go.Figure) -> None:
    """Put a new figure's traces and layout into a figure widget on screen."""
    with widget.batch_update():
        widget.data = ()
        widget.add_traces(list(figure.data))
        widget.layout = figure.layout


def _number(description: str, value: float, step: float = 1.0) -> w.FloatText:
    return w.FloatText(value=value, step=step, description=description,
                       style={"description_width": "170px"},
                       layout=w.Layout(width="290px"))


class OxygenSheet:
    """The quality team's interactive sheet.

    Parameters
    ----------
    setup : Setup, optional
        Starting patient and breathing system (default: the 70 kg reference adult).
    fio2_threshold : float, 0.21–1
    """

    def __init__(self, setup: Setup | None = None, *, fio2_threshold: float = 0.30) -> None:
        setup = Setup() if setup is None else setup
        p, c = setup.patient, setup.circuit
        self._base = setup
        self.weight = _number("weight (kg)", p.weight_kg)
        self.height = _number("height (cm)", p.height_cm)
        self.age = _number("age (years)", p.age_years)
        self.sex = w.Dropdown(options=("female", "male"), value=p.sex, description="sex",
                              style={"description_width": "170px"})
        self.vo2 = _number("VO2 (mL/min, 0 = rule)", p.vo2_ml_min or 0.0, 5.0)
        self.threshold = _number("FIO2 threshold", fio2_threshold, 0.01)
        self.carrier = w.ToggleButtons(options=(("O2 + air", "air"), ("O2 + N2O", "n2o")),
                                       value="air", description="carrier")
        self.leak = _number("leak (mL/min)", c.leak_ml_min, 10.0)
        self.sample_lost = _number("sample not returned (mL/min)",
                                   0.0 if c.sample_returned else c.sample_ml_min, 10.0)
        self.vent_share = _number("valve vents exhaled gas (0-1)", c.vent_exhaled_share, 0.1)
        self.initial_min = _number("high-flow period (min)", 10.0)
        self.initial_fgf = _number("high-flow FGF (L/min)", 4.0, 0.5)
        self.duration = _number("plan length (min)", 120.0, 10.0)
        self.fgf = w.FloatSlider(value=0.5, min=0.25, max=4.0, step=0.05,
                                 description="FGF (L/min)", continuous_update=False,
                                 style={"description_width": "120px"})
        self.o2 = w.FloatSlider(value=0.5, min=0.25, max=1.0, step=0.01,
                                description="fresh O2 fraction", continuous_update=False,
                                style={"description_width": "120px"})
        self.run_map = w.Button(description="Update map", button_style="primary")
        self.status = w.HTML()
        self.error = w.HTML()
        self.warnings = w.HTML()
        self.table = w.HTML()
        self.map = self.curve = self.course = None  # FigureWidgets, made on the first run
        self._map_box = w.Box()
        self._curve_box = w.Box()
        self._course_box = w.Box()
        inputs = (self.weight, self.height, self.age, self.sex, self.vo2, self.threshold,
                  self.carrier, self.leak, self.sample_lost, self.vent_share, self.initial_min,
                  self.initial_fgf, self.duration)
        for control in (*inputs, self.fgf, self.o2):
            control.observe(lambda _change: self.refresh_course(), names="value")
        self.run_map.on_click(lambda _button: self.refresh_map())
        left = w.VBox([w.HTML("<div class='cs-section'>Patient</div>"), self.weight,
                       self.height, self.age, self.sex, self.vo2,
                       w.HTML("<div class='cs-section'>Breathing system</div>"), self.leak,
                       self.sample_lost, self.vent_share,
                       w.HTML("<div class='cs-section'>Rule and plan</div>"), self.threshold,
                       self.carrier, self.initial_min, self.initial_fgf, self.duration,
                       self.run_map, self.status])
        right = w.VBox([w.HTML("<div class='cs-section'>One make-up: oxygen course</div>"),
                        self.fgf, self.o2, self.error, self._course_box, self.warnings])
        self.widget = w.VBox([
            style_widget(), w.HTML(caution_html()),
            w.HTML("<div class='cs-title'>Oxygen at minimal flow</div>"),
            w.HBox([left, right]),
            w.HTML("<div class='cs-section'>Flow × fresh-gas O2 map</div>"), self._map_box,
            w.HTML("<div class='cs-section'>Lowest safe fresh-gas O2</div>"),
            w.HBox([self._curve_box, self.table]),
        ], layout=w.Layout(width="100%"))
        self.widget.add_class("cs-app")
        self.refresh_course()
        self.refresh_map()

    # ---- inputs ----------------------------------------------------------------------------
    def setup(self) -> Setup:
        """The set-up on screen (raises InputError naming a bad field)."""
        patient = replace(self._base.patient, weight_kg=self.weight.value,
                          height_cm=self.height.value, age_years=self.age.value,
                          sex=self.sex.value, vo2_ml_min=self.vo2.value or None)
        lost = self.sample_lost.value
        circuit = replace(self._base.circuit, leak_ml_min=self.leak.value,
                          vent_exhaled_share=self.vent_share.value,
                          sample_returned=lost == 0.0,
                          sample_ml_min=lost if lost > 0.0 else self._base.circuit.sample_ml_min)
        return replace(self._base, patient=patient, circuit=circuit)

    def _plan_settings(self) -> dict:
        return {"duration_min": self.duration.value, "initial_min": self.initial_min.value,
                "initial_fgf_l_min": self.initial_fgf.value}

    # ---- outputs ---------------------------------------------------------------------------
    def refresh_course(self) -> bool:
        """Recompute the course of the chosen make-up; False (and an error shown) if the
        inputs cannot be run."""
        try:
            setup = self.setup()
            threshold = check_threshold(self.threshold.value, "sheet")
            course = oxygen_course(setup, FreshGas(self.fgf.value, self.o2.value,
                                                   self.carrier.value),
                                   fio2_threshold=threshold, **self._plan_settings())
        except (InputError, SimulationError) as exc:
            self.error.value = error_html(str(exc))
            return False
        self.error.value = ""
        figure = course_figure([course], height=480)
        if self.course is None:
            self.course = figure_widget_class()(figure)
            self._course_box.children = (self.course,)
        else:
            _replace(self.course, figure)
        self.warnings.value = alerts_html(course.result.alerts) + (
            f"<div class='cs-note'>Lowest FIO2 {course.lowest_fio2:.3f}; "
            f"{course.minutes_below:.1f} min below {threshold:.2f}; steady state "
            f"{float(course.final_steady.inspired_o2):.3f}. Below "
            f"{minimum_fgf_l_min(setup):.3f} L/min the bag empties.</div>")
        self.last_course = course
        return True

    def refresh_map(self) -> bool:
        """Recompute the map, the curve and the table; False (and an error shown) if the inputs
        cannot be run."""
        try:
            setup = self.setup()
            threshold = check_threshold(self.threshold.value, "sheet")
            self.status.value = "<span class='cs-status'>computing the map…</span>"
            table = safe_fraction_table(setup, _FLOWS, fio2_threshold=threshold,
                                        carriers=(self.carrier.value,),
                                        **self._plan_settings())
            omap = oxygen_map(setup, _FLOWS, fio2_threshold=threshold,
                              carrier=self.carrier.value, **self._plan_settings())
        except (InputError, SimulationError) as exc:
            self.status.value = error_html(str(exc))
            return False
        self.status.value = ""
        figures = (map_figure(omap), safe_fraction_figure(table, threshold, height=380))
        if self.map is None:
            self.map, self.curve = (figure_widget_class()(f) for f in figures)
            self._map_box.children = (self.map,)
            self._curve_box.children = (self.curve,)
        else:
            _replace(self.map, figures[0])
            _replace(self.curve, figures[1])
        self.table.value = table.round(3).to_html(index=False, classes="cs-table", border=0,
                                                  na_rep="not reachable")
        self.last_map, self.last_table = omap, table
        return True

    def show(self) -> None:
        """Display the sheet in the notebook."""
        from IPython.display import display

        display(self.widget)

