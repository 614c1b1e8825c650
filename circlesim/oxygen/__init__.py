"""Oxygen at minimal flow: steady-state balances, lowest safe fresh-gas O2, the flow map,
the O2 time course, leaks and sample loss, nitrogen, absorbent (analyses; no plotting).
"""
