"""The plan editor: a table of steps that can be added, edited and removed.

Each row is one :class:`~circlesim.domain.plan.Step`; each column is described by a :class:`Column`.
A blank cell means "keep the previous setting" (flows and dial start at zero, ventilation at
the patient's default; a blank Target in the first row means no target, and a target holds
until a later step sets a dial or another target). Columns that are not step settings
(``step_field=False``) can be added with :meth:`PlanEditor.add_column`, and buttons with
:meth:`PlanEditor.add_action`; their values are read with :meth:`PlanEditor.extras`.
"""

from __future__ import annotations

import html
import re
from collections.abc import Callable
from dataclasses import dataclass

import ipywidgets as w

from circlesim.app.fields import format_number
from circlesim.base.validation import InputError
from circlesim.domain.plan import Plan, Step

__all__ = ["STEP_COLUMNS", "Column", "PlanEditor", "cell_value", "locate_error"]


@dataclass(frozen=True)
class Column:
    """One column of the plan table.

    Parameters
    ----------
    key : str
        A :class:`~circlesim.domain.plan.Step` field, or any name for an extra column.
    header, unit : str
        Shown in the header row.
    width : str
        CSS width of the cells.
    kind : {"number", "choice", "text"}
    choices : tuple of (str, str)
        (shown text, value) pairs for a "choice" column; the value "" means blank.
    step_field : bool
        Whether the value is passed to ``Step``.
    tooltip : str
    blank : tuple of (str, str), optional
        What a blank cell shows (its grey placeholder) in the first row and in later rows;
        default: "0" (or the patient's default) in the first row and "keep" after it.
    alternative : tuple of (str, str), optional
        ``(suffix, step field)``: a number typed with this suffix goes to the other step field
        instead (the Target column takes "1.2" as × MAC and "1.6%" as vol%).
    """

    key: str
    header: str
    unit: str = ""
    width: str = "56px"
    kind: str = "number"
    choices: tuple[tuple[str, str], ...] = ()
    step_field: bool = True
    tooltip: str = ""
    blank: tuple[str, str] | None = None
    alternative: tuple[str, str] | None = None

    @property
    def fields(self) -> tuple[str, ...]:
        """The step fields this column shows (its key, and the alternative's field)."""
        if not self.step_field:
            return ()
        return (self.key,) if self.alternative is None else (self.key, self.alternative[1])


STEP_COLUMNS: tuple[Column, ...] = (
    Column("time_min", "Time", "min", tooltip="minutes from the start of the plan"),
    Column("o2_l_min", "O2", "L/min", tooltip="oxygen flowmeter"),
    Column("air_l_min", "Air", "L/min", tooltip="air flowmeter"),
    Column("n2o_l_min", "N2O", "L/min", tooltip="nitrous oxide flowmeter"),
    Column("dial_percent", "Dial", "vol%", tooltip="vaporizer setting"),
    Column("target_mac", "Target", "× MAC", width="56px", blank=("none", "keep"),
           alternative=("%", "target_end_tidal_percent"),
           tooltip="target mode: end-tidal agent to hold, × age-adjusted MAC (or vol% typed "
                   "with a % sign, e.g. 1.6%); the controller then chooses the dial, so leave "
                   "the step's Dial blank. Holds until a later step sets a dial or a target."),
    Column("target_within_min", "Within", "min", width="52px", blank=("", ""),
           tooltip="time allowed to reach this step's target (blank: as fast as the dial "
                   "allows)"),
    Column("inject_ml", "Inject", "mL liquid",
           tooltip="liquid agent injected into the circuit at this time"),
    Column("tidal_volume_ml", "Tidal volume", "mL", width="64px"),
    Column("rate_per_min", "Rate", "/min"),
    Column("valve", "Valve", "", width="70px", kind="choice",
           choices=(("keep", ""), ("open", "open"), ("closed", "closed")),
           tooltip="pressure-limiting valve from this step on"),
    Column("note", "Note", "", width="130px", kind="text"),
)


def cell_value(col: Column, settings: dict) -> object:
    """What column ``col`` shows of a step's settings (``Step.to_dict()``): the value of its
    key, or the alternative's value as text with its suffix (e.g. "1.6%")."""
    if col.alternative is not None and settings.get(col.alternative[1]) is not None:
        return format_number(settings[col.alternative[1]]) + col.alternative[0]
    return settings.get(col.key)


_PLACEHOLDER = "keep"
_STEP_REF = re.compile(r"^(?:Plan\.)?steps\[(\d+)\]\.?(\w+)?\s*")


def locate_error(message: str, columns: tuple[Column, ...] = STEP_COLUMNS) -> tuple[
        str, int | None, str | None]:
    """Reword an engine message about ``Plan.steps[i].field`` in the table's terms.

    Returns
    -------
    text : str
        E.g. "Step 2, Dial (vol%): must be a number from 0 to 8 vol% …".
    row : int or None
        0-based row the message is about.
    key : str or None
        Column key the message is about.
    """
    match = _STEP_REF.match(message)
    if not match:
        return message, None, None
    row = int(match.group(1))
    key = match.group(2)
    headers = {c.key: f"{c.header} ({c.unit})" if c.unit else c.header for c in columns}
    owner = {f: c.key for c in columns for f in c.fields}
    key = owner.get(key, key)
    where = f"Step {row + 1}"
    if key in headers:
        where += f", {headers[key]}"
    elif key:
        where += f" {key}"
    rest = message[match.end():]
    # "(3) cannot be set together with ..." reads "3 cannot be set together with ..."
    rest = re.sub(r"^\(([^()]*)\)\s+", r"\1 ", rest)
    # Other step fields the message names are given as the table's column headers.
    rest = re.sub(r"\b(?:Step\.)?([a-z0-9]+_\w+)\b",
                  lambda m: headers[owner[m.group(1)]] if m.group(1) in owner else m.group(0),
                  rest)
    for header in headers.values():  # two fields of one column: "(Target or Target)"
        rest = rest.replace(f"{header} or {header}", header)
    return f"{where}: {rest}", row, key if key in headers else None


class _Row:
    """The widgets of one table row."""

    def __init__(self, columns: tuple[Column, ...], on_change: Callable,
                 on_remove: Callable) -> None:
        self.cells: dict[str, w.Widget] = {}
        #: Step settings the table has no column for, kept as loaded.
        self.hidden: dict[str, object] = {}
        for col in columns:
            self.cells[col.key] = self._cell(col, on_change)
        self.number = w.HTML(layout=w.Layout(width="26px"))
        self.remove = w.Button(icon="trash", tooltip="Remove this step",
                               layout=w.Layout(width="34px", height="28px"))
        self.remove.add_class("cs-remove-step")
        self.remove.on_click(lambda _: on_remove(self))

    @staticmethod
    def _cell(col: Column, on_change: Callable) -> w.Widget:
        layout = w.Layout(width=col.width)
        if col.kind == "choice":
            cell = w.Dropdown(options=list(col.choices), value=col.choices[0][1], layout=layout)
        else:
            cell = w.Text(value="", continuous_update=False, layout=layout,
                          placeholder=_PLACEHOLDER if col.kind == "number" else "")
        cell.add_class("cs-cell")
        cell.add_class(f"cs-col-{col.key.replace('_', '-')}")
        cell.observe(on_change, names="value")
        return cell

    def widgets(self, columns: tuple[Column, ...]) -> list[w.Widget]:
        return [self.number, *(self.cells[c.key] for c in columns), self.remove]

    def close(self) -> None:
        """Release the row's widgets (they are not shown again)."""
        for widget in (self.number, *self.cells.values(), self.remove):
            widget.close()


class PlanEditor:
    """The plan table with its toolbar.

    Parameters
    ----------
    columns : tuple of Column
        Columns in display order (default :data:`STEP_COLUMNS`).

    Attributes
    ----------
    widget : ipywidgets.VBox
    toolbar : ipywidgets.HBox
        Holds "Add step", the plan length and the extra actions.
    """

    def __init__(self, columns: tuple[Column, ...] = STEP_COLUMNS) -> None:
        self.columns = tuple(columns)
        self.rows: list[_Row] = []
        self._listeners: list[Callable] = []
        self._muted = False
        self._first_row_defaults: dict[str, str] = {}
        self._header: tuple[tuple[Column, ...], list[w.Widget]] = ((), [])
        self._base = Plan((Step(0.0, o2_l_min=1.0),), duration_min=60.0)
        self.add_button = w.Button(description="Add step", icon="plus",
                                   tooltip="Add a step after the last one",
                                   layout=w.Layout(width="110px"))
        self.add_button.add_class("cs-add-step")
        self.add_button.on_click(lambda _: self.add_step())
        self.duration = w.FloatText(value=60.0, continuous_update=False,
                                    layout=w.Layout(width="80px"))
        self.duration.add_class("cs-duration")
        self.duration.observe(self._changed, names="value")
        self.name = w.Text(value="", continuous_update=False, layout=w.Layout(width="260px"))
        self.name.observe(self._changed, names="value")
        self.toolbar = w.HBox([
            self.add_button,
            w.HTML("<span class='cs-label'>Plan length <span class='cs-unit'>(min)</span></span>",
                   layout=w.Layout(margin="0 4px 0 16px")),
            self.duration,
            w.HTML("<span class='cs-label'>Name</span>", layout=w.Layout(margin="0 4px 0 16px")),
            self.name,
        ], layout=w.Layout(align_items="center", flex_flow="row wrap"))
        self.grid = w.GridBox(layout=w.Layout(grid_gap="2px 3px", align_items="center"))
        self.grid.add_class("cs-plan-table")
        self.widget = w.VBox([self.grid, self.toolbar])
        self._layout()

    # ---- extension points ---------------------------------------------------------------
    def add_action(self, label: str, callback: Callable[[PlanEditor], None], *,
                   tooltip: str = "", icon: str = "") -> w.Button:
        """Add a button to the toolbar; ``callback(editor)`` runs when it is clicked."""
        button = w.Button(description=label, tooltip=tooltip, icon=icon,
                          layout=w.Layout(width="auto", margin="0 0 0 16px"))
        button.add_class(f"cs-action-{re.sub(r'[^a-z0-9]+', '-', label.lower()).strip('-')}")
        button.on_click(lambda _: callback(self))
        self.toolbar.children = (*self.toolbar.children, button)
        return button

    def add_column(self, column: Column, *, after: str | None = None) -> None:
        """Add a column (after the column ``after``, or at the end); rows keep their values."""
        keys = [c.key for c in self.columns]
        if column.key in keys:
            raise ValueError(f"the plan table already has a column {column.key!r}.")
        at = keys.index(after) + 1 if after is not None else len(keys)
        self.columns = (*self.columns[:at], column, *self.columns[at:])
        for row in self.rows:
            row.cells[column.key] = _Row._cell(column, self._changed)
            if any(f in row.hidden for f in column.fields):
                self._set(row, column, cell_value(column, row.hidden))
                for f in column.fields:
                    row.hidden.pop(f, None)
        self._layout()

    def observe(self, callback: Callable[[], None]) -> None:
        """Call ``callback()`` after every edit, addition or removal."""
        self._listeners.append(callback)

    # ---- reading and showing --------------------------------------------------------------
    def read(self) -> Plan:
        """The plan in the table.

        Raises
        ------
        InputError
            Naming the step and the column (``Plan.steps[i].field …``) when a cell holds no
            number, a value outside its range, or the steps are out of order.
        """
        steps = []
        for i, row in enumerate(self.rows):
            values: dict = dict(row.hidden)
            for col in self.columns:
                if col.step_field:
                    values.update(self._parse(i, col, row.cells[col.key].value))
            if values["time_min"] is None:
                raise InputError(f"Plan.steps[{i}].time_min is empty; give the step's time in "
                                 "minutes from the start of the plan.")
            try:
                steps.append(Step(**values))
            except InputError as exc:
                raise InputError(re.sub(r"^Step\.", f"Plan.steps[{i}].", str(exc))) from None
        return Plan(tuple(steps), duration_min=float(self.duration.value),
                    name=self.name.value.strip() or "plan", description=self._base.description)

    @staticmethod
    def _parse(i: int, col: Column, text: str) -> dict[str, object]:
        """The step fields a cell gives (``{key: value}``, and the alternative's field)."""
        out: dict[str, object] = dict.fromkeys(col.fields)
        if col.kind == "choice":
            out[col.key] = text or None
            return out
        text = text.strip()
        if col.kind == "text":
            out[col.key] = text
            return out
        key = col.key
        if col.alternative is not None and text.endswith(col.alternative[0]):
            key, text = col.alternative[1], text[:-len(col.alternative[0])].strip()
        if not text:
            out[key] = 0.0 if key == "inject_ml" else None
            return out
        try:
            out[key] = float(text.replace(",", "."))
        except ValueError:
            raise InputError(f"Plan.steps[{i}].{key} must be a number; got {text!r}."
                             ) from None
        return out

    def extras(self) -> list[dict[str, str]]:
        """Values of the columns that are not step settings, one dict per row (raw text)."""
        return [{c.key: row.cells[c.key].value for c in self.columns if not c.step_field}
                for row in self.rows]

    def show(self, plan: Plan) -> None:
        """Fill the table with ``plan`` (without notifying listeners)."""
        self._muted = True
        try:
            self._base = plan
            for row in self.rows:
                row.close()
            self.rows = []
            shown = {f for c in self.columns for f in c.fields}
            for step in plan.steps:
                row = self._new_row()
                for col in self.columns:
                    if col.step_field:
                        self._set(row, col, cell_value(col, step.to_dict()))
                row.hidden = {k: v for k, v in step.to_dict().items() if k not in shown}
                self.rows.append(row)
            self.duration.value = plan.duration_min
            self.name.value = plan.name
            self._layout()
        finally:
            self._muted = False

    def set_cell(self, row: int, key: str, value: object, *, notify: bool = True) -> None:
        """Put ``value`` (a number, a word or None for blank) into a cell."""
        col = next(c for c in self.columns if c.key == key)
        was_muted = self._muted
        self._muted = was_muted or not notify
        try:
            self._set(self.rows[row], col, value)
        finally:
            self._muted = was_muted

    @staticmethod
    def _set(row: _Row, col: Column, value: object) -> None:
        if isinstance(value, str) and col.kind == "number":
            row.cells[col.key].value = value
        elif col.kind == "choice":
            row.cells[col.key].value = value or ""
        elif col.kind == "text":
            row.cells[col.key].value = "" if value is None else str(value)
        elif col.key == "inject_ml" and value == 0.0:
            row.cells[col.key].value = ""
        else:
            row.cells[col.key].value = format_number(value)

    def mark(self, row: int | None, key: str | None) -> None:
        """Outline the cell an error is about (None clears every mark)."""
        for r, widgets in enumerate(self.rows):
            for k, cell in widgets.cells.items():
                if r == row and k == key:
                    cell.add_class("cs-invalid")
                else:
                    cell.remove_class("cs-invalid")

    def set_placeholders(self, first_row: dict[str, str]) -> None:
        """What a blank cell of the first row means (e.g. the patient's default ventilation)."""
        self._first_row_defaults = dict(first_row)
        self._placeholders()

    def _placeholders(self) -> None:
        """Grey hints in blank cells: later rows keep the previous setting; the first row
        starts from zero or the patient's defaults; a blank injection is none."""
        for i, row in enumerate(self.rows):
            for col in self.columns:
                if col.kind != "number":
                    continue
                if col.key == "time_min":
                    text = ""
                elif col.blank is not None:
                    text = col.blank[0 if i == 0 else 1]
                elif col.key == "inject_ml":
                    text = "0"
                elif i == 0:
                    text = self._first_row_defaults.get(col.key, "0")
                else:
                    text = _PLACEHOLDER
                row.cells[col.key].placeholder = text

    # ---- editing ----------------------------------------------------------------------------
    def add_step(self) -> None:
        """Add a step 10 min after the last one (or halfway to the end of the plan)."""
        last = self._row_time(len(self.rows) - 1) if self.rows else 0.0
        end = float(self.duration.value)
        time = last + 10.0 if last + 10.0 < end else round((last + end) / 2.0, 1)
        row = self._new_row()
        row.cells["time_min"].value = format_number(time)
        self.rows.append(row)
        self._layout()
        self._notify()

    def remove_step(self, index: int) -> None:
        """Remove the step in row ``index`` (the last remaining step cannot be removed)."""
        self._remove(self.rows[index])

    def _remove(self, row: _Row) -> None:
        if len(self.rows) <= 1:
            return
        self.rows.remove(row)
        self._layout()
        row.close()
        self._notify()

    def _row_time(self, index: int) -> float:
        try:
            return float(self.rows[index].cells["time_min"].value)
        except ValueError:
            return 0.0

    def _new_row(self) -> _Row:
        return _Row(self.columns, self._changed, self._remove)

    def _layout(self) -> None:
        widths = ["26px", *(c.width for c in self.columns), "34px"]
        self.grid.layout.grid_template_columns = " ".join(widths)
        if self._header[0] != self.columns:
            header = [w.HTML("<span class='cs-th'>Step</span>")]
            for c in self.columns:
                unit = f"<br><span class='cs-unit'>{c.unit}</span>" if c.unit else "<br>&nbsp;"
                header.append(w.HTML(f"<span class='cs-th' title='{html.escape(c.tooltip)}'>"
                                     f"{html.escape(c.header)}{unit}</span>"))
            header.append(w.HTML(""))
            self._header = (self.columns, header)
        children = list(self._header[1])
        for i, row in enumerate(self.rows):
            row.number.value = f"<span class='cs-step-no'>{i + 1}</span>"
            row.remove.disabled = len(self.rows) <= 1
            children += row.widgets(self.columns)
        self.grid.children = children
        self._placeholders()

    def _changed(self, _change: dict | None = None) -> None:
        if not self._muted:
            self._notify()

    def _notify(self) -> None:
        for callback in self._listeners:
            callback()
