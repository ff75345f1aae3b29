"""Figures, motion previews and HTML pages that compare plans.

Part of the analysis side: these modules read plan files and certification
results and draw them; they never solve. ``palette`` fixes the look shared
by every figure.
"""
