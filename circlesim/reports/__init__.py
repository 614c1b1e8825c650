"""Front ends that draw: plotly figures and self-contained HTML reports for runs,
comparisons, populations, oxygen and advice. Plotly is imported here, never below.
"""
