"""Figures built from renders and probes: comparison sheets, layer maps, probe tables."""
