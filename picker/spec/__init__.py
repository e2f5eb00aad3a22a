"""picker.spec.model."""
