"""Target mode: plan steps that ask for an end-tidal value, and the one public entry point.

``predict`` dispatches (dial plans to the engine, target plans to the controller);
``controller`` chooses the dial; ``assessment`` writes its choices as a plan and judges each
target; ``settings`` holds the controller's settings and reports.
"""
