"""The planner app (front-end layer; needs the ``app`` extra: ipywidgets, plotly, anywidget).

In a notebook, or served as a web app by Voilà (``make demo``)::

    from circlesim.app import planner
    planner()

Modules: :mod:`.planner` (the app), :mod:`.controls` and :mod:`.fields` (settings panels),
:mod:`.plan_editor` (the table of steps), :mod:`.runner` (engine runs, last good prediction,
reference plan), :mod:`.warnings_panel`, :mod:`.comparison` (outcomes table),
:mod:`.advise_panel` (the plan advisor),
:mod:`.band_panel` (the spread over similar patients), :mod:`.loading` and :mod:`.export` (files),
:mod:`.style`.
"""

from circlesim.app.planner import DEMO_SCENARIO, PlannerApp, planner

__all__ = ["DEMO_SCENARIO", "PlannerApp", "planner"]
