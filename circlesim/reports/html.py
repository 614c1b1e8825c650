"""Self-contained HTML reports (front-end layer; needs the ``app`` extra for figures).

A report is a title, the standing caution, and a list of sections, each holding text, tables
(pandas DataFrames or lists of rows) and plotly figures. The plotly library is embedded once so
the file opens in a browser without a network. Files are written atomically and never replace
an existing file unless asked.
"""

from __future__ import annotations

import html
import os
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from circlesim.base.cautions import CAUTION
from circlesim.base.files import write_text_atomic

__all__ = ["Section", "render_report", "write_report"]


@dataclass
class Section:
    """One part of a report.

    Attributes
    ----------
    heading : str
    paragraphs : list of str
        Plain text (escaped).
    tables : list
        ``pandas.DataFrame`` objects or ``(header, rows)`` pairs.
    figures : list
        plotly figures.
    warnings : list of str
        Shown highlighted.
    """

    heading: str
    paragraphs: list[str] = field(default_factory=list)
    tables: list[Any] = field(default_factory=list)
    figures: list[Any] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 1200px; margin: 1em auto; padding: 0 1em;
       color: #222; }
.caution { border: 2px solid #b00; background: #fff4f4; padding: 0.6em 1em; margin: 1em 0; }
.warning { background: #fff8e1; border-left: 4px solid #e6a100; padding: 0.3em 0.8em;
           margin: 0.3em 0; }
table { border-collapse: collapse; margin: 0.6em 0; font-size: 0.92em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.6em; text-align: right; }
th:first-child, td:first-child { text-align: left; }
.meta { color: #666; font-size: 0.85em; }
"""


def _table_html(table: Any) -> str:
    if hasattr(table, "to_html"):
        return table.to_html(index=False, float_format=lambda v: f"{v:.4g}", border=0)
    header, rows = table
    head = "".join(f"<th>{html.escape(str(h))}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(_fmt(c))}</td>" for c in row) + "</tr>"
                   for row in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    return "—" if value is None else str(value)


def render_report(title: str, sections: list[Section], *, inputs_toml: str | None = None) -> str:
    """The report as one HTML string (plotly embedded once)."""
    import plotly.io as pio

    parts = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>{html.escape(title)}"
             f"</title><style>{_STYLE}</style></head><body>",
             f"<h1>{html.escape(title)}</h1>",
             f"<p class='meta'>circlesim report, {datetime.now(UTC):%Y-%m-%d %H:%M} UTC</p>",
             f"<div class='caution'><strong>Caution.</strong> {html.escape(CAUTION)}</div>"]
    first_figure = True
    for section in sections:
        parts.append(f"<h2>{html.escape(section.heading)}</h2>")
        parts.extend(f"<div class='warning'>{html.escape(w)}</div>" for w in section.warnings)
        parts.extend(f"<p>{html.escape(p)}</p>" for p in section.paragraphs)
        parts.extend(_table_html(t) for t in section.tables)
        for fig in section.figures:
            parts.append(pio.to_html(fig, full_html=False,
                                     include_plotlyjs=True if first_figure else False))
            first_figure = False
    if inputs_toml:
        parts.append("<h2>Inputs (to reproduce this report)</h2>")
        parts.append(f"<pre>{html.escape(inputs_toml)}</pre>")
    parts.append(f"<div class='caution'>{html.escape(CAUTION)}</div></body></html>")
    return "\n".join(parts)


def write_report(path: str | os.PathLike, title: str, sections: list[Section], *,
                 inputs_toml: str | None = None, overwrite: bool = False) -> Path:
    """Render and write a report atomically; an existing file is kept unless ``overwrite``."""
    return write_text_atomic(path, render_report(title, sections, inputs_toml=inputs_toml),
                             overwrite=overwrite)
