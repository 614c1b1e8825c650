"""The settings panels: patient, ventilation, breathing system, agent and vaporizer, targets.

Each panel reads its widgets into keyword changes for one domain object and shows a scenario's
values back. The domain objects check the values, so the messages are theirs. Settings the
panels do not show (for example the circuit's gas temperature) keep the loaded scenario's
values.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import ipywidgets as w

from circlesim.app.fields import CheckField, ChoiceField, DerivedField, NumberField
from circlesim.domain.patient import RULES
from circlesim.properties import agent, agent_names
from circlesim.scenario import Scenario

__all__ = ["SettingsPanel"]

Field = NumberField | ChoiceField | CheckField | DerivedField


class _Group:
    """Fields that feed one domain object (``target`` names the scenario attribute)."""

    def __init__(self, title: str, target: str, fields: list[Field], note: str = "") -> None:
        self.title = title
        self.target = target
        self.fields = fields
        children = [f.widget for f in fields]
        if note:
            children.append(w.HTML(f"<div class='cs-note'>{note}</div>"))
        self.widget = w.VBox(children, layout=w.Layout(padding="4px 2px"))

    def changes(self) -> dict:
        return {f.key: f.value for f in self.fields}

    def show(self, obj: object) -> None:
        for f in self.fields:
            f.show(getattr(obj, f.key))


def _patient_group() -> _Group:
    return _Group("Patient", "patient", [
        NumberField("weight_kg", "Weight", "kg", 70.0),
        NumberField("height_cm", "Height", "cm", 175.0),
        NumberField("age_years", "Age", "years", 40.0,
                    tooltip="Sets the age-adjusted MAC (Mapleson 1996)"),
        ChoiceField("sex", "Sex", [("female", "female"), ("male", "male")], "male"),
        DerivedField("vo2_ml_min", "O2 consumption (VO2)", "mL/min", RULES["vo2"], digits=0),
        DerivedField("cardiac_output_l_min", "Cardiac output", "L/min",
                     RULES["cardiac_output"]),
        DerivedField("frc_l", "Functional residual capacity", "L", RULES["frc"]),
    ], note="Derived values follow published rules from weight, height, age and sex; tick "
            "<i>set</i> to use your own.")


def _ventilation_group() -> tuple[_Group, DerivedField, DerivedField]:
    tidal = DerivedField("tidal_volume_ml", "Tidal volume", "mL", RULES["alveolar_ventilation"],
                         digits=0)
    rate = DerivedField("rate_per_min", "Rate", "breaths/min", "by age (common practice)",
                        digits=0)
    group = _Group("Ventilation", "patient", [
        NumberField("paco2_target_kpa", "PaCO2 aimed at", "kPa", 5.3,
                    tooltip="Sets the default ventilation (alveolar ventilation equation)"),
        DerivedField("dead_space_ml", "Dead space", "mL", RULES["dead_space"], digits=0),
    ], note="Tidal volume and rate here are the settings at the start of the plan (the first "
            "step); a later step may change them.")
    group.widget.children = (tidal.widget, rate.widget, *group.widget.children)
    return group, tidal, rate


def _circuit_group() -> _Group:
    return _Group("Breathing system", "circuit", [
        NumberField("volume_l", "Circuit volume (without bag)", "L", 3.0),
        NumberField("bag_l", "Reservoir bag", "L", 2.0),
        ChoiceField("valve", "Pressure-limiting valve at start",
                    [("open", "open"), ("closed", "closed")], "open"),
        NumberField("leak_ml_min", "Leak", "mL/min", 0.0),
        NumberField("sample_ml_min", "Gas-analyser sample flow", "mL/min", 200.0),
        ChoiceField("sample_returned", "Sample gas",
                    [("returned to circuit", True), ("lost", False)], True),
    ])


def _absorber_group() -> _Group:
    return _Group("Absorbent", "absorber", [
        NumberField("granule_mass_g", "Absorbent mass", "g", 1000.0),
        NumberField("used_fraction", "Already used", "fraction 0–1", 0.0),
    ])


def _agent_group() -> _Group:
    names = [(agent(n).label, n) for n in agent_names()]
    return _Group("Agent and vaporizer", "vaporizer", [
        ChoiceField("agent", "Agent", names, "sevoflurane"),
        ChoiceField("placement", "Vaporizer",
                    [("outside the circle (plenum)", "outside"),
                     ("inside the circle (draw-over)", "inside")], "outside"),
        DerivedField("max_dial_percent", "Largest dial setting", "vol%",
                     "the agent's usual largest plenum setting", digits=1),
    ])


def _targets_group() -> _Group:
    return _Group("Targets", "report", [
        NumberField("fio2_threshold", "Lowest acceptable FIO2", "fraction", 0.30),
        NumberField("target_end_tidal_mac", "End-tidal agent target", "× age-adjusted MAC",
                    1.0),
    ])


class SettingsPanel:
    """All settings panels in tabs.

    Attributes
    ----------
    widget : ipywidgets.Tab
    tidal_volume, rate : DerivedField
        Starting ventilation; the app mirrors them into the plan's first step.
    """

    def __init__(self) -> None:
        vent, self.tidal_volume, self.rate = _ventilation_group()
        self.groups = [_patient_group(), vent, _circuit_group(), _absorber_group(),
                       _agent_group(), _targets_group()]
        self.widget = w.Tab(children=[g.widget for g in self.groups],
                            titles=[g.title for g in self.groups],
                            layout=w.Layout(width="100%"))
        self.widget.add_class("cs-settings")

    @property
    def all_fields(self) -> list[Field]:
        return [f for g in self.groups for f in g.fields] + [self.tidal_volume, self.rate]

    def field(self, key: str) -> Field:
        """The field feeding ``key`` (for tests and for wiring)."""
        for f in self.all_fields:
            if f.key == key:
                return f
        raise KeyError(key)

    def observe(self, callback: Callable) -> None:
        """Call ``callback`` whenever any setting changes."""
        for f in self.all_fields:
            f.observe(callback)

    def apply(self, base: Scenario) -> Scenario:
        """``base`` with the panels' values (raises InputError naming a bad value)."""
        changes: dict[str, dict] = {}
        for g in self.groups:
            changes.setdefault(g.target, {}).update(g.changes())
        return replace(base, **{name: replace(getattr(base, name), **values)
                                for name, values in changes.items()})

    def show(self, scenario: Scenario) -> None:
        """Show a scenario's settings (the plan's first step gives the starting ventilation)."""
        for g in self.groups:
            g.show(getattr(scenario, g.target))
        first = scenario.plan.steps[0]
        self.tidal_volume.show(first.tidal_volume_ml)
        self.rate.show(first.rate_per_min)
        self.show_derived(scenario)

    def show_derived(self, scenario: Scenario) -> None:
        """Show the values the rules give for the current settings."""
        p = replace(scenario.patient, vo2_ml_min=None, cardiac_output_l_min=None, frc_l=None,
                    dead_space_ml=None)
        derived = {"vo2_ml_min": p.vo2, "cardiac_output_l_min": p.cardiac_output,
                   "frc_l": p.frc, "dead_space_ml": p.dead_space,
                   "tidal_volume_ml": scenario.patient.default_tidal_volume_ml,
                   "rate_per_min": scenario.patient.default_rate_per_min,
                   "max_dial_percent": float(scenario.vaporizer.properties.max_dial_percent)}
        for f in self.all_fields:
            if isinstance(f, DerivedField):
                f.show_derived(derived[f.key])
