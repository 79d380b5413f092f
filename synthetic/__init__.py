"""Scenario recipes of the synthetic generator, shipped inside the package as ``wsad.scenarios``."""
