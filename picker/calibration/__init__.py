"""picker.calibration."""
