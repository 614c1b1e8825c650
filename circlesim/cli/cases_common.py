"""Terminal tables shared by the measured-case commands (check, fit, calibrate)."""

from __future__ import annotations

import math
from collections.abc import Sequence


def format_rows(header: Sequence[str], rows: Sequence[Sequence[object]]) -> str:
    """A plain aligned table; numbers with three significant digits, missing values as —."""
    def cell(v: object) -> str:
        if v is None or (isinstance(v, float) and math.isnan(v)):
            return "—"
        if isinstance(v, float):
            return f"{v:.3g}" if abs(v) < 1000 else f"{v:.0f}"
        return str(v)

    body = [[cell(v) for v in row] for row in rows]
    widths = [max(len(r[i]) for r in [list(header), *body]) for i in range(len(header))]
    lines = ["  ".join(c.ljust(w) if i == 0 else c.rjust(w)
                       for i, (c, w) in enumerate(zip(r, widths, strict=True)))
             for r in [list(header), *body]]
    lines.insert(1, "-" * len(lines[0]))
    return "\n".join(lines)


MEASURES_HEADER = ("series", "samples", "MDPE %", "MDAPE %", "divergence %/h", "wobble %")
MEASURES_LEGEND = ("PE = (measured − predicted) / predicted; MDPE = median PE (bias), MDAPE = "
                   "median |PE| (inaccuracy), divergence = slope of |PE| over time, wobble = "
                   "median |PE − MDPE| (Varvel, Donoho & Shafer 1992). Predictions below the "
                   "floor (agent 0.1 %, N2O, O2 and N2 1 %, CO2 0.5 %) are not scored.")
