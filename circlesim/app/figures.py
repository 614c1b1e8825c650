"""The planner's two figures: the agent and oxygen panels, and the other three.

A change redraws the first figure before the second (a plotly redraw of two panels costs about
half that of five), so the panels the user watches follow the dial first. Both are plotly
``FigureWidget`` objects updated in place; :func:`refresh_figures` brings them up to date.
"""

from __future__ import annotations

from collections.abc import Sequence

from circlesim.engine.result import Result

__all__ = ["FIGURE_HEIGHT_PX", "MAIN_PANELS", "MORE_FIGURE_HEIGHT_PX", "MORE_PANELS",
           "figure_widget", "refresh_figures"]

#: The figure watched on every change (agent and oxygen panels) and the one below it (N2O and
#: N2, flows and bag, liquid agent), by panel number of :data:`circlesim.reports.timeline.
#: PANELS`.
MAIN_PANELS, MORE_PANELS = (1, 2), (3, 4, 5)
#: Heights of the two figures, px: the agent and oxygen panels fit a 768-pixel-high screen
#: beside the plan; both figures fit a 1080-pixel-high one.
FIGURE_HEIGHT_PX, MORE_FIGURE_HEIGHT_PX = 330, 430


def figure_widget(results: Sequence[Result], labels: Sequence[str], fio2_threshold: float,
                  main: bool):
    """The planner's first (``main``: agent and oxygen, with the band's empty traces) or
    second figure, as a plotly ``FigureWidget`` showing ``results`` over the plan's length.

    Parameters
    ----------
    results, labels
        As :func:`circlesim.reports.timeline.timeline_figure`.
    fio2_threshold : float, fraction
    main : bool
    """
    from circlesim.app.plotly_bundle import figure_widget_class
    from circlesim.reports.band import add_band_slots
    from circlesim.reports.timeline import timeline_figure

    panels = MAIN_PANELS if main else MORE_PANELS
    figure = timeline_figure(results, labels, fio2_threshold=fio2_threshold,
                             height=FIGURE_HEIGHT_PX if main else MORE_FIGURE_HEIGHT_PX,
                             panels=panels)
    if main:
        # part of the figure from the start: traces added after the page has the widget
        # would only reach it as messages
        add_band_slots(figure)
    # beside the plan the figure is narrow: smaller legends leave the curves room
    figure.update_layout({("legend" if r == 1 else f"legend{r}"): {"font": {"size": 10}}
                          for r in range(1, len(panels) + 1)},
                         margin={"l": 40, "r": 4, "t": 30, "b": 36})
    figure.update_xaxes(range=(0.0, float(results[0].time_min[-1])))
    widget = figure_widget_class()(figure)
    widget.add_class("cs-figure" if main else "cs-more-figure")
    widget._config = {**widget._config, "responsive": True, "displaylogo": False}
    return widget


def refresh_figures(figures: Sequence, results: Sequence[Result], labels: Sequence[str],
                    fio2_threshold: float) -> None:
    """Bring the figures up to date in place, in order (the watched one first: its message
    reaches the page first), on a time axis as long as the plan."""
    from circlesim.reports.timeline import refresh_timeline

    duration = float(results[0].time_min[-1])
    for figure in figures:
        refresh_timeline(figure, results, labels, fio2_threshold=fio2_threshold)
        if figure.layout.xaxis.range != (0.0, duration):
            figure.layout.xaxis.range = (0.0, duration)
