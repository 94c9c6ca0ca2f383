"""Fit: statistics → noise models with intervals → discrete-time Q and R."""
