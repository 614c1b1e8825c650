"""The dial-plan engine: the equations (``model``), the compiled integrator (``solver``),
domain objects turned into arrays (``assembly``), single and batch runs (``simulate``,
``batch``, ``runner``), the ``Result`` and its alerts. Knows nothing of end-tidal targets.
"""
