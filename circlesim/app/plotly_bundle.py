"""plotly.js for the planner's figures, loaded once per page and early.

Each plotly ``FigureWidget`` carries its own copy of plotly's widget code (about 5 MB) in its
state; the browser receives it over the kernel's websocket and runs it as a module for every
figure. Running it costs about 1–1.4 s on a 2-core machine, and it can only start once the
widget's state has arrived, so it sits on the path to the first drawn figure.

When the planner is served by :mod:`circlesim.app.serving`, the server publishes plotly's
widget code as a static file (:func:`bundle_directory`), the page starts loading it while the
rest of the page loads (``circlesim/app/page/index.html.j2``), and the figures are made with
:func:`figure_widget_class`, whose front-end code imports that same address instead of
carrying the code: the browser fetches and runs it once, and the figures find it ready. Where
the server does not publish it (JupyterLab, a plain ``voila``), the figures are plotly's own
``FigureWidget``.
"""

from __future__ import annotations

import functools
import json
import os
from pathlib import Path

__all__ = ["BUNDLE_ADDRESS_ENV", "bundle_address", "bundle_directory", "figure_widget_class"]

#: Set (by the server, for its kernels) to the address of plotly's widget code relative to the
#: server's base URL.
BUNDLE_ADDRESS_ENV = "CIRCLESIM_PLOTLY_BUNDLE"

_BUNDLE_FILE = "widgetbundle.js"

# The figure's front-end code: import plotly's widget code from the published address (resolved
# against the page's base URL, as the page's own preload is) and hand on its widget, drawing
# each view only once its element is on the page. (Brought in its own copy, the code took a
# second to start, by which time the element was always placed; imported from the page's
# module map it starts at once, and plotly measures legend text as zero wide in an element not
# yet placed.)
_ESM_TEMPLATE = """
const page = JSON.parse(document.getElementById("jupyter-config-data")?.textContent ?? "{}");
const base = new URL(page.baseUrl ?? "/", document.baseURI);
const plotly = (await import(new URL(%s, base).href)).default;

export default () => {
  const widget = typeof plotly === "function" ? plotly() : plotly;
  return {
    ...widget,
    render(context) {
      let frame = 0;
      let closed = false;
      let cleanup = null;
      const draw = () => {
        if (closed) return;
        if (!context.el.isConnected) {
          frame = requestAnimationFrame(draw);
          return;
        }
        Promise.resolve(widget.render(context)).then((done) => {
          if (closed && typeof done === "function") done();
          else cleanup = done;
        });
      };
      draw();
      return () => {
        closed = true;
        cancelAnimationFrame(frame);
        if (typeof cleanup === "function") cleanup();
      };
    },
  };
};
"""


def bundle_directory() -> Path:
    """The folder that holds plotly's widget code (``widgetbundle.js``)."""
    import plotly

    return Path(plotly.__file__).parent / "package_data"


def bundle_address(static_prefix: str = "voila/static/") -> str:
    """Address of plotly's widget code relative to the base URL, versioned so that browsers
    may keep it (e.g. ``"voila/static/widgetbundle.js?v=7.1.0"``)."""
    import plotly

    return f"{static_prefix}{_BUNDLE_FILE}?v={plotly.__version__}"


@functools.cache
def _published_widget_class(address: str) -> type:
    import plotly.graph_objects as go

    class PublishedBundleFigureWidget(go.FigureWidget):
        """plotly's ``FigureWidget`` whose front-end code is imported from ``address``."""

        _esm = _ESM_TEMPLATE % json.dumps(address)

    return PublishedBundleFigureWidget


def figure_widget_class() -> type:
    """The ``FigureWidget`` class to make figures with: one that imports plotly's widget code
    from the address the server published (:data:`BUNDLE_ADDRESS_ENV`), or plotly's own."""
    address = os.environ.get(BUNDLE_ADDRESS_ENV, "")
    if not address:
        import plotly.graph_objects as go

        return go.FigureWidget
    return _published_widget_class(address)
