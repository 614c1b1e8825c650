"""Small labelled input widgets shared by the settings panels.

Numbers are typed into plain text boxes and checked by the domain objects (never clipped by
the widget), so an out-of-range entry produces the domain object's own message naming the
field, the value and the allowed range.
"""

from __future__ import annotations

import html
import math
from collections.abc import Callable

import ipywidgets as w

__all__ = ["CheckField", "ChoiceField", "DerivedField", "NumberField", "row"]

LABEL_WIDTH = "190px"
BOX_WIDTH = "90px"


def row(*children: w.Widget) -> w.HBox:
    """A compact horizontal row."""
    return w.HBox(list(children), layout=w.Layout(align_items="center", margin="1px 0"))


def _label(text: str, unit: str = "", tooltip: str = "") -> w.HTML:
    unit_html = f" <span class='cs-unit'>({unit})</span>" if unit else ""
    title = f" title='{html.escape(tooltip, quote=True)}'" if tooltip else ""
    return w.HTML(f"<span class='cs-label'{title}>{text}{unit_html}</span>",
                  layout=w.Layout(width=LABEL_WIDTH))


def format_number(value: float | None) -> str:
    """A number as short text ("" for None): 0.35, 452, 1.5."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    return f"{value:.4g}"


class NumberField:
    """A labelled number box.

    Parameters
    ----------
    key : str
        Name of the domain-object field it feeds.
    label, unit, tooltip : str
    value : float
    css : str
        Extra CSS class (used by the browser test to find it).
    """

    def __init__(self, key: str, label: str, unit: str = "", value: float = 0.0,
                 tooltip: str = "") -> None:
        self.key = key
        self.input = w.FloatText(value=value, continuous_update=False,
                                 layout=w.Layout(width=BOX_WIDTH))
        self.input.add_class(f"cs-{key.replace('_', '-')}")
        self.widget = row(_label(label, unit, tooltip), self.input)

    @property
    def value(self) -> float:
        return float(self.input.value)

    def show(self, value: float) -> None:
        self.input.value = float(value)

    def observe(self, callback: Callable) -> None:
        self.input.observe(callback, names="value")


class ChoiceField:
    """A labelled drop-down of words; ``options`` are (shown text, value) pairs."""

    def __init__(self, key: str, label: str, options: list[tuple[str, object]], value: object,
                 tooltip: str = "") -> None:
        self.key = key
        self.input = w.Dropdown(options=options, value=value,
                                layout=w.Layout(width="150px"))
        self.input.add_class(f"cs-{key.replace('_', '-')}")
        self.widget = row(_label(label, tooltip=tooltip), self.input)

    @property
    def value(self) -> object:
        return self.input.value

    def show(self, value: object) -> None:
        self.input.value = value

    def observe(self, callback: Callable) -> None:
        self.input.observe(callback, names="value")


class CheckField:
    """A labelled tick box."""

    def __init__(self, key: str, label: str, value: bool, tooltip: str = "") -> None:
        self.key = key
        self.input = w.Checkbox(value=value, indent=False, layout=w.Layout(width="auto"))
        self.widget = row(_label(label, tooltip=tooltip), self.input)

    @property
    def value(self) -> bool:
        return bool(self.input.value)

    def show(self, value: bool) -> None:
        self.input.value = bool(value)

    def observe(self, callback: Callable) -> None:
        self.input.observe(callback, names="value")


class DerivedField:
    """A value derived from other inputs by a published rule, which the user may override.

    While "set" is unticked the box is greyed and shows the derived value (rounded to
    ``digits`` decimals); ticking it lets the user type their own value, which is then passed
    to the model (``value`` is None otherwise).
    """

    def __init__(self, key: str, label: str, unit: str, rule: str = "", digits: int = 2) -> None:
        self.key = key
        self.digits = digits
        self.input = w.FloatText(value=0.0, continuous_update=False, disabled=True,
                                 layout=w.Layout(width=BOX_WIDTH))
        self.input.add_class(f"cs-{key.replace('_', '-')}")
        self.override = w.Checkbox(value=False, description="set", indent=False,
                                   layout=w.Layout(width="60px", margin="0 0 0 8px"))
        self.override.add_class(f"cs-{key.replace('_', '-')}-set")
        self.derived = w.HTML("", layout=w.Layout(margin="0 0 0 4px"))
        self.widget = row(_label(label, unit, rule), self.input, self.override, self.derived)
        self.override.observe(self._toggle, names="value")

    def _toggle(self, change: dict) -> None:
        self.input.disabled = not change["new"]

    @property
    def value(self) -> float | None:
        """The user's value, or None when the derived value applies."""
        return float(self.input.value) if self.override.value else None

    def show(self, value: float | None) -> None:
        """Show an override (a number) or switch back to the derived value (None)."""
        if value is None:
            self.override.value = False
        else:
            self.override.value = True
            self.input.value = float(value)

    def show_derived(self, value: float) -> None:
        """Display the derived value (in the box while not overridden, beside it otherwise)."""
        if self.override.value:
            self.derived.value = f"<span class='cs-unit'>rule gives {format_number(value)}</span>"
        else:
            self.derived.value = "<span class='cs-unit'>from rule</span>"
            self.input.value = round(float(value), self.digits)

    def observe(self, callback: Callable) -> None:
        self.input.observe(callback, names="value")
        self.override.observe(callback, names="value")
