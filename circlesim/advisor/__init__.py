"""The plan advisor above target mode: optimised flow and dial schedules, the trade-off
between time and agent, emergence and decrement times (analyses; no plotting).
"""
