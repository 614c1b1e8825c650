"""Helpers shared by the planner-app tests."""

from __future__ import annotations


def cell(app, row: int, key: str):
    """The widget of one cell of the plan table."""
    return app.editor.rows[row].cells[key]


def all_html(widget) -> str:
    """Text of every HTML widget in a widget tree."""
    out, stack = [], [widget]
    while stack:
        w = stack.pop()
        if hasattr(w, "value") and isinstance(w.value, str) and "<" in w.value:
            out.append(w.value)
        stack.extend(getattr(w, "children", ()))
    return "\n".join(out)


def curves(shown) -> list:
    """The curves of a figure, or of both of a planner's figures (``app``) in order; the band's
    shaded traces (``meta="band"``) left out."""
    figures = getattr(shown, "figures", (shown,))
    return [t for figure in figures for t in figure.data if t.meta != "band"]
