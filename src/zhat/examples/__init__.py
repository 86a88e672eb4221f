"""Invented scenarios with their models and data, shipped with the package for ``zhat demo``."""
