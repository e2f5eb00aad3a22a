"""``python -m picker.bench [--quick]``: the search and Monte Carlo figures (picker.bench.search)."""

from picker.bench.search import cli

cli(prog="python -m picker.bench")
