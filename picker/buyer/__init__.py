"""picker.buyer."""
