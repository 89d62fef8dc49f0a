"""The nightly stages over DataFrames: shaping (the only DuckDB owner), fitting, failure modes,
forecast, reserve and the life table."""
