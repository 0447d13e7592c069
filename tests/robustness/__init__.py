"""Robustness suite: bad input per layer, property-based tests, safety, reproducibility."""
