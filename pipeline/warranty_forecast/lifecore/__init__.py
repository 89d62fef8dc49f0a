"""The statistical core: grouped, censored life data, the life families and their maximum-likelihood fits.

Imports numpy and scipy only: no pandas, DuckDB, matplotlib or configuration.
"""
