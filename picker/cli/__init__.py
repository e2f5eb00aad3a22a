"""The ``picker`` command, the only home of typer.

main (the app, exit statuses, one-line errors, the registration of every
command), options (shared option parsing), solve (solve, evaluate, series,
bench), circuit (netlist, simulate), calibrate, consolidate.
"""
