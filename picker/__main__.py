"""``python -m picker``: the same as the ``picker`` command."""

from picker.cli.main import main

main()
