"""Loading plans and scenarios into the planner: an upload button and the example scenarios.

A file with only a ``[plan]`` table replaces the plan and keeps the patient and breathing
system on screen; a full scenario file replaces everything.
"""

from __future__ import annotations

import tomllib
from collections.abc import Callable
from pathlib import Path

import ipywidgets as w

from circlesim.base.validation import InputError
from circlesim.scenario import Scenario, load_scenario, scenario_from_toml

__all__ = ["LoadBar", "examples_folder", "merge_loaded"]

_PLAN_ONLY_KEYS = {"plan", "title", "question"}


def examples_folder() -> Path | None:
    """The ``scenarios/`` folder of a source checkout, if there is one."""
    folder = Path(__file__).resolve().parents[2] / "scenarios"
    return folder if folder.is_dir() else None


def merge_loaded(text: str, name: str, current: Scenario) -> Scenario:
    """The scenario to show after loading ``text`` (TOML) from a file called ``name``.

    Raises
    ------
    InputError
        For malformed TOML or invalid contents, naming the file and the problem.
    """
    loaded = scenario_from_toml(text, name)
    keys = set(tomllib.loads(text))
    if keys <= _PLAN_ONLY_KEYS:
        return Scenario(plan=loaded.plan, patient=current.patient, circuit=current.circuit,
                        absorber=current.absorber, vaporizer=current.vaporizer,
                        report=current.report, title=loaded.title or current.title,
                        question=loaded.question or current.question)
    return loaded


class LoadBar:
    """Upload a TOML file or pick an example; ``on_load(scenario)`` or ``on_error(message)``.

    Parameters
    ----------
    current : callable returning Scenario
        The scenario on screen (a plan-only file keeps its other settings).
    on_load : callable taking Scenario
    on_error : callable taking str
    """

    def __init__(self, current: Callable[[], Scenario], on_load: Callable[[Scenario], None],
                 on_error: Callable[[str], None]) -> None:
        self._current = current
        self._on_load = on_load
        self._on_error = on_error
        self.upload = w.FileUpload(accept=".toml", multiple=False, description="Load TOML…",
                                   tooltip="Load a plan or a whole scenario from a TOML file",
                                   layout=w.Layout(width="130px"))
        self.upload.add_class("cs-upload")
        self.upload.observe(self._uploaded, names="value")
        folder = examples_folder()
        files = sorted(folder.glob("*.toml")) if folder else []
        self.examples = w.Dropdown(
            options=[("Open an example…", "")] + [(f.stem.replace("_", " "), str(f))
                                                   for f in files],
            value="", layout=w.Layout(width="280px"))
        self.examples.observe(self._picked, names="value")
        children = [self.upload] + ([self.examples] if files else [])
        self.widget = w.HBox(children, layout=w.Layout(align_items="center"))

    def load_text(self, text: str, name: str) -> bool:
        """Load TOML text; report an error instead of raising. Returns True when loaded."""
        try:
            scenario = merge_loaded(text, name, self._current())
        except InputError as exc:
            self._on_error(str(exc))
            return False
        self._on_load(scenario)
        return True

    def _uploaded(self, change: dict) -> None:
        if not change["new"]:
            return
        item = change["new"][0]
        name = item.get("name", "uploaded file")
        try:
            text = bytes(item["content"]).decode("utf-8")
        except UnicodeDecodeError:
            self._on_error(f"{name} is not UTF-8 text; a plan or scenario file is TOML text.")
        else:
            self.load_text(text, name)
        self.upload.value = ()

    def _picked(self, change: dict) -> None:
        path = change["new"]
        if not path:
            return
        try:
            scenario = load_scenario(path)
        except InputError as exc:
            self._on_error(str(exc))
        else:
            self._on_load(scenario)
        self.examples.value = ""
