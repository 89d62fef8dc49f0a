"""The Weibull family's closed forms called by (shape, scale), for the tests' readability."""

from __future__ import annotations

from warranty_forecast.lifecore.families import WEIBULL


def _theta(shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.theta(shape=shape, scale=scale)


def weibull_log_survival(t, shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.log_survival(t, _theta(shape, scale))


def weibull_survival(t, shape, scale):  # type: ignore[no-untyped-def]
    import numpy as np

    return np.exp(weibull_log_survival(t, shape, scale))


def weibull_cdf(t, shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.cdf(t, _theta(shape, scale))


def weibull_pdf(t, shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.pdf(t, _theta(shape, scale))


def weibull_hazard(t, shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.hazard(t, _theta(shape, scale))


def weibull_b_life(p, shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.quantile(p, _theta(shape, scale))


def weibull_mean(shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.mean(_theta(shape, scale))


def weibull_variance(shape, scale):  # type: ignore[no-untyped-def]
    return WEIBULL.variance(_theta(shape, scale))


def summary_table(fit):  # type: ignore[no-untyped-def]
    """FitResult.summary() as a table indexed by quantity (the core itself does not import pandas)."""
    import pandas as pd

    rows = fit.summary()
    return pd.DataFrame(list(rows.values()), index=pd.Index(list(rows), name="quantity"))
