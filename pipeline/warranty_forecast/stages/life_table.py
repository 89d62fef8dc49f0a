"""Non-parametric estimate of the fraction failed by months in service: the actuarial life table.

From the age-in-service matrix summed over build months, per product and month in service k:
  n_k  units at risk entering month k,  d_k  returns in month k,
  w_k  units whose observation ended inside month k (counted as at risk for half the month),
  n'_k = n_k - w_k / 2,  q_k = d_k / n'_k,  S(k) = prod_{j<=k} (1 - q_j),  F(k) = 1 - S(k),
the fraction failed by the end of month k, age b_k = `age_months` (its end on the day grid of
lifecore.data.month_interval_ends: whole days / (365.25/12), about k months).
Pointwise bounds: Greenwood's variance var(log S(k)) = sum_j d_j / (n'_j (n'_j - d_j)), applied on
the log(-log S) scale so that the bounds stay inside (0, 1).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from warranty_forecast.lifecore.data import month_interval_ends

LIFE_TABLE_COLUMNS = (
    "product",
    "months_in_service",
    "age_months",
    "units_at_risk",
    "returns",
    "units_withdrawn",
    "effective_at_risk",
    "conditional_return_probability",
    "fraction_failed",
    "fraction_failed_lower",
    "fraction_failed_upper",
)


def life_table(age_in_service: pd.DataFrame, confidence_level: float = 0.95) -> pd.DataFrame:
    """Actuarial life table per product (columns LIFE_TABLE_COLUMNS; fractions in [0, 1])."""
    summed = age_in_service.groupby(["product", "months_in_service"], as_index=False)[
        ["units_at_risk", "returns", "units_withdrawn"]
    ].sum()
    z = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
    pieces = [_one_product(rows, z) for _, rows in summed.groupby("product", sort=True)]
    if not pieces:
        return pd.DataFrame(columns=list(LIFE_TABLE_COLUMNS))
    return pd.concat(pieces, ignore_index=True).loc[:, list(LIFE_TABLE_COLUMNS)]


def _one_product(rows: pd.DataFrame, z: float) -> pd.DataFrame:
    rows = rows.sort_values("months_in_service").copy()
    at_risk = rows["units_at_risk"].to_numpy(dtype=float)
    returns = rows["returns"].to_numpy(dtype=float)
    effective = np.maximum(at_risk - rows["units_withdrawn"].to_numpy(dtype=float) / 2.0, returns)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(effective > 0, returns / effective, 0.0)
    q = np.clip(q, 0.0, 1.0)
    log_s = np.cumsum(np.log1p(-np.minimum(q, 1.0 - 1e-15)))
    with np.errstate(divide="ignore", invalid="ignore"):
        greenwood_terms = np.where(
            (effective > returns) & (returns > 0), returns / (effective * (effective - returns)), 0.0
        )
    var_log_s = np.cumsum(greenwood_terms)
    fraction = -np.expm1(log_s)
    lower = np.full_like(fraction, np.nan)
    upper = np.full_like(fraction, np.nan)
    usable = log_s < 0
    # log(-log S) +- z * se, se = sqrt(var log S) / |log S|; S**exp(+-c) are the bounds of S
    spread = z * np.sqrt(var_log_s[usable]) / -log_s[usable]
    upper[usable] = -np.expm1(log_s[usable] * np.exp(spread))
    lower[usable] = -np.expm1(log_s[usable] * np.exp(-spread))
    rows["age_months"] = month_interval_ends(rows["months_in_service"].to_numpy(dtype=float))[1]
    rows["effective_at_risk"] = effective
    rows["conditional_return_probability"] = q
    rows["fraction_failed"] = fraction
    rows["fraction_failed_lower"] = lower
    rows["fraction_failed_upper"] = upper
    return rows
