"""Paper and office outputs: the trip report PDF, the bench sheets, season tables and plots.

A shell: it reads rows from `core.rules.report` and lays them out with fpdf2 (PDF) and matplotlib
(plots, drawn on an off-screen Figure, never through pyplot's global state).
"""
