"""picker.bench.search."""
