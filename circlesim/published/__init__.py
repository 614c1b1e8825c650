"""Published checks of the model (docs/validation.md is generated from them):
``python -m circlesim.published docs/validation.md``.
"""
