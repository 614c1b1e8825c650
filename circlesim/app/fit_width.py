"""Make the figure fill the page width.

plotly's ``FigureWidget`` draws itself before the page has placed it, so it starts at plotly's
default 700 px width, and with ``responsive`` set it only resizes on a window "resize" event.
:class:`FitWidth` is an invisible widget that sends that event once the page is laid out and
whenever the app's width changes.
"""

from __future__ import annotations

import anywidget

__all__ = ["FitWidth"]

_ESM = """
export default {
  render({ el }) {
    let lastWidth = -1;
    const nudge = () => window.dispatchEvent(new Event("resize"));
    const watch = () => {
      const app = el.closest(".cs-app") || document.body;
      const observer = new ResizeObserver((entries) => {
        const width = Math.round(entries[0].contentRect.width);
        if (width !== lastWidth) { lastWidth = width; nudge(); }
      });
      observer.observe(app);
      return observer;
    };
    let observer = null;
    const start = () => {
      if (!el.isConnected) { requestAnimationFrame(start); return; }
      observer = watch();
    };
    start();
    const timers = [300, 1500].map((ms) => setTimeout(nudge, ms));
    return () => { timers.forEach(clearTimeout); if (observer) observer.disconnect(); };
  },
};
"""


class FitWidth(anywidget.AnyWidget):
    """Invisible helper: tells responsive plotly figures to fit their container's width."""

    _esm = _ESM
