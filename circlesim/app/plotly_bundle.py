"""plotly.js for the planner's figures: a lighter build, loaded once per page.

plotly's ``FigureWidget`` brings its own front end with the full plotly.js inside (about
5 MB); on a 2-core machine the browser takes 1.2 s to load and start it, on the path to the
first drawn figure. The planner only draws cartesian traces, so when it is served by
:mod:`circlesim.app.serving` the figures are drawn with the cartesian build of plotly.js
(1.5 MB, started in about 0.5 s):

* the build ships compressed (``static/plotly-cartesian.min.js.gz``, 0.5 MB: third-party code
  stays out of our searchable source); the server unpacks it once into a temporary folder
  (:func:`bundle_directory`) that it publishes, and the page runs the build while the rest of
  the page loads (``circlesim/app/page/index.html.j2``);
* the figures are made with :func:`figure_widget_class`: still plotly's Python
  ``FigureWidget``, with our front end (``static/figure_front.js``), which runs the build from
  that address once per page and speaks the widget's messages.

Where the server does not publish the build (JupyterLab, a plain ``voila``), or where the
installed plotly expects another major version of plotly.js (:func:`build_fits_plotly`), the
figures are plotly's own ``FigureWidget``.

The build is the ``plotly.js-cartesian-dist-min`` package, version :data:`PLOTLY_JS_VERSION`,
from the npm registry, unchanged apart from the compression (``gzip -9 -n``; MIT licence:
``static/plotly-cartesian.LICENSE.txt``).
"""

from __future__ import annotations

import functools
import gzip
import json
import os
import shutil
import tempfile
from collections.abc import Iterable
from pathlib import Path

__all__ = ["BUNDLE_ADDRESS_ENV", "CARTESIAN_TRACES", "PLOTLY_JS_VERSION", "build_fits_plotly",
           "bundle_address", "bundle_directory", "check_trace_types", "figure_widget_class"]

#: Set (by the server, for its kernels) to the address of the plotly.js build relative to the
#: server's base URL.
BUNDLE_ADDRESS_ENV = "CIRCLESIM_PLOTLY_BUNDLE"

#: Version of the plotly.js build in ``static/``.
PLOTLY_JS_VERSION = "4.1.1"

#: Trace types the build draws (its package's README).
CARTESIAN_TRACES = frozenset({"bar", "box", "contour", "heatmap", "histogram", "histogram2d",
                              "histogram2dcontour", "image", "pie", "scatter", "scatterternary",
                              "violin"})

_STATIC = Path(__file__).parent / "static"
_BUILD_FILE = "plotly-cartesian.min.js"
_BUILD_ARCHIVE = _STATIC / f"{_BUILD_FILE}.gz"
_LICENCE = _STATIC / "plotly-cartesian.LICENSE.txt"
_FRONT_END = _STATIC / "figure_front.js"


#: The unpacked build's folder, kept for the life of the process.
_keep: list[tempfile.TemporaryDirectory] = []


@functools.cache
def bundle_directory() -> Path:
    """The folder the server publishes: the unpacked plotly.js build and its licence, in a
    temporary folder made once per process and removed when the process ends."""
    folder = tempfile.TemporaryDirectory(prefix="circlesim-plotly-")
    _keep.append(folder)  # alive (and not yet cleaned up) while the process runs
    path = Path(folder.name)
    with gzip.open(_BUILD_ARCHIVE, "rb") as packed, (path / _BUILD_FILE).open("wb") as out:
        shutil.copyfileobj(packed, out)
    shutil.copy(_LICENCE, path / _LICENCE.name)
    return path



def bundle_address(static_prefix: str = "voila/static/") -> str:
    """Address of the plotly.js build relative to the base URL, versioned so that browsers
    may keep it (e.g. ``"voila/static/plotly-cartesian.min.js?v=4.1.1"``)."""
    return f"{static_prefix}{_BUILD_FILE}?v={PLOTLY_JS_VERSION}"


def build_fits_plotly(plotly_js_version: str | None = None) -> bool:
    """Whether the build suits the installed plotly: the plotly.js it was made for
    (``plotly_js_version``, by default read from plotly) has the build's major version."""
    if plotly_js_version is None:
        from plotly.offline import get_plotlyjs_version

        plotly_js_version = get_plotlyjs_version()
    return plotly_js_version.split(".")[0] == PLOTLY_JS_VERSION.split(".")[0]


def check_trace_types(types: Iterable[str]) -> None:
    """Raise ``ValueError`` naming any trace type the cartesian build cannot draw."""
    missing = sorted(set(types) - CARTESIAN_TRACES)
    if missing:
        raise ValueError(f"trace type(s) {', '.join(map(repr, missing))} cannot be drawn by "
                         f"the planner's plotly.js build; it draws {sorted(CARTESIAN_TRACES)}")


@functools.cache
def _published_widget_class(address: str) -> type:
    import plotly.graph_objects as go

    class CartesianFigureWidget(go.FigureWidget):
        """plotly's ``FigureWidget`` drawn by circlesim's front end with the plotly.js build
        published at ``address``."""

        _esm = _FRONT_END.read_text(encoding="utf-8").replace("__PLOTLY_ADDRESS__",
                                                               json.dumps(address))

        def __init__(self, *args, **kwargs) -> None:
            super().__init__(*args, **kwargs)
            try:
                check_trace_types(trace.type for trace in self.data)
            except ValueError:
                self.close()
                raise

        def add_traces(self, data, *args, **kwargs):
            traces = data if isinstance(data, list | tuple) else [data]
            check_trace_types(trace.get("type", "scatter") if isinstance(trace, dict)
                              else trace.type for trace in traces)
            return super().add_traces(data, *args, **kwargs)

    return CartesianFigureWidget


def figure_widget_class() -> type:
    """The ``FigureWidget`` class to make figures with: one drawn with the plotly.js build
    the server published (:data:`BUNDLE_ADDRESS_ENV`), or plotly's own."""
    address = os.environ.get(BUNDLE_ADDRESS_ENV, "")
    if not address:
        import plotly.graph_objects as go

        return go.FigureWidget
    return _published_widget_class(address)
