"""picker.report.designs."""
