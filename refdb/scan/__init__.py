"""Measured scans: reading, validation, background, peak search and profile fitting."""
