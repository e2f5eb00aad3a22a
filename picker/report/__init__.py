"""Rendering of results, the only home of rich and matplotlib (with :mod:`picker.cli`).

designs (a solve's JSON, CSV and table), production (the production sections),
calibration (a fit's JSON and table), plan (a consolidated plan), bom (the bill
of materials), plots (the PNG files).
"""
