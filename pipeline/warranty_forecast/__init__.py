"""Warranty-returns forecasting pipeline: DuckDB shaping, grouped Weibull life model, forecast, reserve."""

__version__ = "0.1.0"
