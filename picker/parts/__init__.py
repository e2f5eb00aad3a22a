"""picker.parts."""
