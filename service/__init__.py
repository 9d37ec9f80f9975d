"""Plumbline: a pre-release gate for forecasting models."""

__version__ = "0.1.0"
