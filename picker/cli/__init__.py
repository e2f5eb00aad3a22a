"""picker.cli.main."""
