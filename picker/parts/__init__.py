"""Facts about parts: value series, value tables, pairs, distributions, drift, prices, limits.

``series`` (IEC 60063 values), ``table`` (:class:`~picker.parts.table.ValueTable`),
``pairs`` (parallel pairs), ``distributions`` (tolerance distributions),
``drift`` (temperature drift classes), ``pricing`` (price breaks) and
``limits`` (where the lumped model holds).
"""
