"""The analysis layer: study tables, the correspondence grid, local correspondence,
expected movement and the report views. Reads what scoring jobs stored; returns schemas.
"""
