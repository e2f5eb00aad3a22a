"""picker.core."""
