"""What a plan achieves and uses: MAC and MAC-hours, emissions, costs, time to target,
absorbent, and comparisons of scenarios (analyses; no plotting).
"""
