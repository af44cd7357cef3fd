"""Validation studies of orbitmass (simulation-based calibration); run as scripts."""
