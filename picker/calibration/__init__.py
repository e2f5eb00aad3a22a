"""Learning a board's parasitics from measured builds.

``measurements`` (the bench CSV), ``fit`` (weighted least squares of the
parasitics), ``selection`` (which parasitics the data support: nested-model
F-tests), ``result`` (the estimates and their notes) and ``diagnostics``
(residuals, leverage, outliers).
"""
