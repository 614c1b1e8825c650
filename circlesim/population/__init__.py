"""Virtual-patient populations: sourced distributions, the patient sampler, and population
runs with bands and probabilities (analyses; no plotting).
"""
