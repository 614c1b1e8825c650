"""Tell the kernel when the page has drawn the planner's first figure.

The planner's second figure (N2O and N2, flows, liquid agent) is only made once the page shows
the first: the page starts plotly.js and draws each figure on its one main thread, and a plotly
``FigureWidget`` not served through :mod:`circlesim.app.plotly_bundle` brings its own copy of
plotly's front end (about 5 MB), so making the second figure up front would hold up the first.
:class:`FigureShown` is an invisible widget whose front end waits until a figure has been drawn
in the app and then sends one message, which calls ``on_shown``.
"""

from __future__ import annotations

from collections.abc import Callable

import anywidget

__all__ = ["FigureShown"]

_ESM = """
export default {
  render({ model, el }) {
    let frame = 0;
    const drawn = () => {
      const app = el.closest(".cs-app");
      return app && app.querySelector(".js-plotly-plot .scatterlayer .trace");
    };
    const wait = () => {
      if (drawn()) { model.send({ event: "figure-shown" }); return; }
      frame = requestAnimationFrame(wait);
    };
    wait();
    return () => cancelAnimationFrame(frame);
  },
};
"""


class FigureShown(anywidget.AnyWidget):
    """Invisible helper: calls ``on_shown()`` (once) when the page has drawn a figure.

    Parameters
    ----------
    on_shown : callable
        Called without arguments on the kernel's main thread.
    """

    _esm = _ESM

    def __init__(self, on_shown: Callable[[], None]) -> None:
        super().__init__()
        self._on_shown: Callable[[], None] | None = on_shown
        self.on_msg(self._message)

    def _message(self, _widget, content, _buffers) -> None:
        if isinstance(content, dict) and content.get("event") == "figure-shown" and \
                self._on_shown is not None:
            callback, self._on_shown = self._on_shown, None
            callback()
