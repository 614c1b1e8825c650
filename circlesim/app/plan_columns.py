"""Columns of the plan table: what each shows, and how its cells are read and written.

:class:`Column` describes one column and :data:`STEP_COLUMNS` the default ones (one per
:class:`~circlesim.domain.plan.Step` setting). :func:`cell_value` gives what a column shows of a
step, :func:`parse_cell` the step fields a cell's text gives, and :func:`locate_error` rewords an
engine message about ``Plan.steps[i].field`` in the table's terms. The table widget itself is
:class:`circlesim.app.plan_editor.PlanEditor`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from circlesim.app.fields import format_number
from circlesim.base.validation import InputError

__all__ = ["STEP_COLUMNS", "Column", "cell_value", "locate_error", "parse_cell"]


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


def parse_cell(i: int, col: Column, text: str) -> dict[str, object]:
    """The step fields a cell gives (``{key: value}``, and the alternative's field).

    Parameters
    ----------
    i : int
        0-based row of the cell (its step), for the error message.
    col : Column
    text : str
        The cell's text; a number may use a decimal comma, a blank number is None (an
        injection 0 mL).

    Raises
    ------
    InputError
        ``Plan.steps[i].field must be a number`` when a number cell holds something else.
    """
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
