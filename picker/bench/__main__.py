"""``python -m picker.bench``: the search and Monte Carlo figures (see picker.bench.search)."""

import sys

from picker.bench.search import main

main(quick="--quick" in sys.argv[1:])
