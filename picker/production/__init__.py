"""picker.production.figures."""
