"""``python -m picker``: the same as the ``picker`` command."""

from picker.cli import main

main()
