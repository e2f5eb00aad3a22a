"""picker.tank."""
