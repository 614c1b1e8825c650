"""Base layer: units (the one home of conversions), input validation, atomic file writing,
the standing caution, the compiled-code cache and local/Dask parallel runs. Imports nothing
of circlesim's own.
"""
