"""Benchmarks: figures printed, never asserted (``python -m picker.bench.<name>``).

search (``python -m picker.bench``, ``picker bench``), memory, circuit,
consolidate, production, sobol.
"""
