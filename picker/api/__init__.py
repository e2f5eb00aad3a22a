"""picker.api.solve."""
