"""Failures incurred but not yet reported: the failure-to-claim delay and the life fit that allows for it.

A unit that failed shortly before the as-of date but whose claim comes after it is counted today as a
survivor: the fit is biased low at the newest ages of every cohort and the forecast misses those claims.
This module

1. estimates the delay distribution G(d) = P(delay <= d), d in whole days, per product, from the counted
   returns filed by the as-of date (`claim_reporting_delays`, one row per product x delay_days x
   observable_days). A failure on date x is seen only if its delay is at most as_of - x (right
   truncation), so the empirical distribution of the seen delays is biased short; the nonparametric
   estimate is the reverse-time product-limit estimator (Lagakos, Barraj & De Gruttola 1988, Biometrika
   75; Kalbfleisch & Lawless 1991):

       G(d) = prod over s > d of (1 - n_s / N_s),
       n_s = claims with delay s,   N_s = claims with delay <= s <= observable window,

   (`estimate_reporting_delay`; it assumes the delay does not depend on the failure date);
2. gives, for each fit_suspensions row (warranty start date, observed age a) and each month in service k
   before a, the share w of that cell's failures that would have been reported by the as-of date: the
   mean of G(as_of - failure date) over the cell's failure days, failures taken uniform over the days
   of the cell (`reported_share`);
3. fits the Weibull to the likelihood of Kalbfleisch, Lawless & Robinson (1991, Technometrics 33): a
   row's s units not reported by the as-of date either survive to a or failed in a cell k before a and
   are not yet reported, so the row contributes

       s log( R(a) + sum_k (F(upper_k) - F(lower_k)) (1 - w_k) ),

   the counted returns contributing log(F(upper) - F(lower)) as before (their own factor w does not
   depend on the life parameters). It is maximised by EM on the grouped data (`correct_product`): the
   E-step puts s (F-increment_k (1 - w_k)) / (R(a) + sum_k' F-increment_k' (1 - w_k')) expected
   unreported failures in each cell, the M-step refits the project's Weibull with them added as
   interval-censored returns and taken off the row's suspensions; repeated until the parameters move
   less than a tolerance. The log-likelihood above is computed after every M-step (it never falls).

The cells are on the exact day grid of `lifecore.data.month_interval_ends`: a failure dated d = 0, 1, ...
days after the warranty start (age [d, d + 1) days) lies in month k = max(1, ceil(d / (365.25/12))); a
row observed to age a has a x 365.25/12 = D + 1 days in service, D the days from its start to the as-of
date, so its failures are dated d = 0 .. D; the month holding the as-of date (or the warranty end) ends
at the row's observed age a, as its suspensions do.

The result per product: the corrected LifeData the fit used, the corrected fit_returns and
fit_suspensions frames, the Weibull outcome (with likelihood-ratio bounds) before and after, and the
expected unreported failures by build month and calendar month of failure, and of expected claim.

Guards: a product with fewer than `min_claims` delays within the cap uses the delays pooled over all
products (noted); when the pool is that thin too, no correction (G = 1, noted).

Negligible corrections (`negligible_shift`, default DEFAULT_NEGLIGIBLE_SHIFT = 0.1): before the EM, one
E-step at the uncorrected fit theta0 gives the expected unreported failures m0 and the completed data;
one Newton step of the completed data's log-likelihood from theta0 gives the first EM move
delta = -H^-1 g (the free parameters). Its size in standard errors of the uncorrected fit,
d = sqrt(delta' Sigma^-1 delta), Sigma the fit's covariance, bounds the move of any smooth quantity of
the fit (shape, scale, B10, F at the warranty end, the expected returns): |f(theta0 + delta) - f(theta0)|
<= d x se(f) to first order (Cauchy-Schwarz). When d < negligible_shift the refit is left out: the
published fit stays the uncorrected one (corrected = uncorrected, em_iterations 0, noted), but the frames
are still completed with m0, so the failures not yet reported still reach the life fits and the
forecast (a line's own share is negligible; summed over thousands of lines it is not). Cochran (1977,
Sampling Techniques, 3rd ed., section 1.8, from memory) takes a bias below a tenth of the standard error
as negligible: a two-sided 95% normal interval then misses 5.1% of the time instead of 5.0%. The full EM
would move the fit by about d / (1 - lambda), lambda the fraction of missing information (about the
unreported share of the returns, ~1%), so the skip's error stays below that tenth. Thin lines (a few
returns, wide standard errors) are the ones skipped; large lines, where the unreported failures move the
fit by more than a tenth of its (narrow) uncertainty, get the EM. A negative delay or a
delay beyond its observable window cannot come from the SQL stage (staging quarantines a claim dated
before its failure): ValueError. Delays over `max_delay_days` are left out of the estimate: G is the
distribution of the delays up to the cap, i.e. such late claims are taken as negligible (their number is
reported); the reverse-time factors at s <= cap use only delays <= s, so the cap changes nothing below it.

Limits: the bounds of the corrected fit come from the completed data (the expected unreported failures
treated as observed), so they leave out the small extra uncertainty of the imputed share (its missing
information; about the unreported share of the returns, 0.4-0.6% on the demo). The delay distribution is
taken as known (no variance from its estimate). Ages in months of 365.25/12 days; delays in days.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import logging
import math
from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np
import numpy.typing as npt
import pandas as pd

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.errors import FitError
from warranty_forecast.lifecore.data import DAYS_PER_MONTH, LifeData, month_interval_ends
from warranty_forecast.lifecore.families import get_family
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.likelihood import log_likelihood
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.stages.fitting import PUBLISHED_STATUSES, WeibullOutcome, fit_weibull, life_data_by_product
from warranty_forecast.stages.by_product import rows_by_product
from warranty_forecast.stages.parallel import map_products

log = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]

DEFAULT_MAX_DELAY_DAYS = 180  # delays beyond are left out of G (taken as negligible); reported
DEFAULT_MIN_CLAIMS = 50  # fewer delays within the cap: pool all products' delays, else no correction
DEFAULT_TOLERANCE = 1e-7  # EM stops when no theta (log scale, log shape) moves more than this
DEFAULT_MAX_ITERATIONS = 200
# The EM is skipped when one step of it would move the fit by less than this many standard errors (in the
# Mahalanobis distance of the parameters, which bounds the move of every quantity computed from them,
# each in units of its own standard error): Cochran (1977, Sampling Techniques, 3rd ed., section 1.8,
# from memory) takes a bias below a tenth of the standard error as negligible; a 95% interval then
# misses 5.1% of the time instead of 5.0%.
DEFAULT_NEGLIGIBLE_SHIFT = 0.1

PRODUCT, POOLED, NONE = "product", "pooled", "none"  # ReportingDelay.source
ALL_PRODUCTS = "(all products)"

# Month in service of a failure d days after the start: max(1, ceil(d / L)), L = 365.25 / 12 = 1461 / 48,
# in integers.
_DAYS_NUMERATOR, _DAYS_DENOMINATOR = 1461, 48

DELAY_COLUMNS = ("delay_days", "observable_days", "claims")
SUSPENSION_COLUMNS = (
    "product", "build_month", "sale_month", "warranty_months", "warranty_start_date", "observed_age_months",
    "suspensions",
)
RETURN_COLUMNS = ("product", "build_month", "sale_month", "warranty_months", "months_in_service", "returns")
GROUP = ["product", "build_month", "sale_month", "warranty_months"]
REPORTED_SHARE_COLUMNS = (
    "row", *GROUP, "warranty_start_date", "months_in_service", "interval_lower", "interval_upper", "days",
    "reported_share",
)
UNREPORTED_COLUMNS = ("product", "build_month", "failure_month", "expected_unreported")
UNREPORTED_BY_CLAIM_MONTH_COLUMNS = ("product", "build_month", "month", "expected_unreported")
SUMMARY_COLUMNS = (
    "product", "delay_source", "delay_claims", "delay_claims_beyond_cap", "delay_mean_days", "delay_median_days",
    "delay_p99_days", "uncorrected_status", "uncorrected_shape", "uncorrected_scale", "corrected_status",
    "corrected_shape", "corrected_scale", "corrected_shape_lr_lower", "corrected_shape_lr_upper",
    "corrected_scale_lr_lower", "corrected_scale_lr_upper", "reported_returns", "expected_unreported",
    "em_iterations", "em_converged", "log_likelihood_uncorrected", "log_likelihood_corrected", "note",
)


# ------------------------------------------------------------------------------ the delay distribution


@dataclass(frozen=True)
class ReportingDelay:
    """The failure-to-claim delay distribution of one product, in whole days.

    `cdf[d]` = G(d) = P(delay <= d) for d = 0 .. support_days; G = 1 from support_days on (the longest
    delay kept, at most max_delay_days) and 0 below day 0. source: "product" (its own claims), "pooled"
    (all products' claims, too few of its own) or "none" (too few claims anywhere: G = 1, no correction).
    """

    product: str
    source: str
    cdf: FloatArray
    claims: float  # claims used (delays within the cap)
    claims_beyond_cap: float  # claims with a delay over max_delay_days, left out
    max_delay_days: int
    note: str = ""

    def __post_init__(self) -> None:
        cdf = np.array(self.cdf, dtype=float, copy=True)
        if cdf.ndim != 1 or cdf.size == 0 or not np.all(np.isfinite(cdf)):
            raise ValueError("cdf must be a non-empty one-dimensional array of finite values")
        if np.any(np.diff(cdf) < -1e-12) or cdf[0] < 0.0 or abs(cdf[-1] - 1.0) > 1e-9:
            raise ValueError("cdf must be non-decreasing from >= 0 to 1")
        cdf[-1] = 1.0
        cdf.setflags(write=False)
        object.__setattr__(self, "cdf", cdf)

    @property
    def support_days(self) -> int:
        """The longest delay with mass: G(d) = 1 for d >= support_days."""
        return int(self.cdf.size - 1)

    @property
    def corrects(self) -> bool:
        """False when G = 1 from day 0 (no claim can be late): the correction is void."""
        return self.cdf[0] < 1.0

    @property
    def probabilities(self) -> FloatArray:
        """P(delay = d) for d = 0 .. support_days."""
        return np.diff(self.cdf, prepend=0.0)

    def reported_within(self, days: npt.ArrayLike) -> FloatArray:
        """G(days): the probability that a claim arrives within `days` whole days of the failure (0 below 0,
        1 from support_days on)."""
        d = np.asarray(days)
        if not np.issubdtype(d.dtype, np.integer):
            raise ValueError("days must be whole days (an integer array)")
        return np.where(d < 0, 0.0, self.cdf[np.clip(d, 0, self.support_days)])

    @property
    def mean_days(self) -> float:
        return float(np.sum(np.arange(self.cdf.size) * self.probabilities))

    def quantile_days(self, p: float) -> int:
        """The smallest d with G(d) >= p (0 < p <= 1)."""
        if not 0.0 < p <= 1.0:
            raise ValueError(f"p must lie in (0, 1], got {p!r}")
        return int(np.searchsorted(self.cdf, p - 1e-12, side="left"))


def _no_correction(product: str, max_delay_days: int, claims: float, beyond: float, note: str) -> ReportingDelay:
    return ReportingDelay(product, NONE, np.ones(1), claims, beyond, max_delay_days, note)


def _checked_delays(delays: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, FloatArray]:
    missing = [c for c in DELAY_COLUMNS if c not in delays.columns]
    if missing:
        raise ValueError(f"delays lacks columns {missing} (the claim_reporting_delays model's)")
    arrays = []
    for column in DELAY_COLUMNS:
        values = pd.to_numeric(delays[column], errors="coerce").to_numpy(dtype=float)
        if not np.all(np.isfinite(values)):
            raise ValueError(f"delays.{column} must be finite numbers")
        arrays.append(values)
    delay, observable, claims = arrays
    if np.any(delay != np.round(delay)) or np.any(observable != np.round(observable)):
        raise ValueError("delays.delay_days and delays.observable_days must be whole days")
    if np.any(delay < 0):
        raise ValueError(
            f"delays.delay_days must be >= 0 (a claim before its failure), got {delay.min():g}: the staging"
            " layer quarantines such claims, so this is a bug upstream"
        )
    if np.any(observable < delay):
        raise ValueError("delays.observable_days must be >= delays.delay_days (a claim filed after the as-of date)")
    if np.any(claims < 0):
        raise ValueError("delays.claims must be >= 0")
    return delay.astype(np.int64), observable.astype(np.int64), claims


def estimate_reporting_delay(
    delays: pd.DataFrame, *, max_delay_days: int = DEFAULT_MAX_DELAY_DAYS, product: str = ""
) -> ReportingDelay:
    """The reverse-time product-limit estimate of G(d) = P(delay <= d) from right-truncated delays.

    `delays`: one product's rows of claim_reporting_delays (delay_days, observable_days, claims; the
    observable window may be capped anywhere at or above the longest delay). With n_s claims of delay s
    and N_s claims with delay <= s <= observable window (the reverse-time risk set),
    G(d) = prod_{s = d+1}^{D} (1 - n_s / N_s), D the longest delay kept, G(D) = 1. Without truncation
    (every window >= D) it is the empirical distribution function. Delays over `max_delay_days` are left
    out (counted in claims_beyond_cap). Raises ValueError on impossible rows or when no claim is left.
    """
    if max_delay_days < 0:
        raise ValueError(f"max_delay_days must be >= 0, got {max_delay_days!r}")
    delay, observable, claims = _checked_delays(delays)
    kept = (delay <= max_delay_days) & (claims > 0)
    beyond = float(claims[(delay > max_delay_days)].sum())
    used = float(claims[kept].sum())
    if used <= 0:
        raise ValueError(f"delays: no claim with a delay within max_delay_days = {max_delay_days}")
    delay, observable, claims = delay[kept], observable[kept], claims[kept]
    longest = int(delay.max())
    observable = np.minimum(observable, longest)
    reported = np.bincount(delay, weights=claims, minlength=longest + 1)
    # risk set N_s: each claim counts for s in [delay, observable]
    change = np.bincount(delay, weights=claims, minlength=longest + 2)
    change -= np.bincount(observable + 1, weights=claims, minlength=longest + 2)
    at_risk = np.cumsum(change)[: longest + 1]
    hazard = np.divide(reported, at_risk, out=np.zeros_like(reported), where=at_risk > 0)
    factor = 1.0 - np.minimum(hazard, 1.0)  # factor s is 0 only when every claim at risk at s has delay s
    # G(d) = prod_{s > d} factor_s: reverse cumulative product (shifted by one)
    tail = np.cumprod(factor[::-1])[::-1]  # tail[d] = prod_{s >= d} factor_s
    cdf = np.append(tail[1:], 1.0)
    note = ""
    if beyond:
        note = (
            f"{beyond:g} claim(s) with a delay over max_delay_days = {max_delay_days} left out of the delay"
            " distribution (such late claims are taken as negligible)"
        )
    return ReportingDelay(product, PRODUCT, cdf, used, beyond, int(max_delay_days), note)


def reporting_delays_by_product(
    claim_reporting_delays: pd.DataFrame,
    products: list[str] | tuple[str, ...],
    *,
    min_claims: float = DEFAULT_MIN_CLAIMS,
    max_delay_days: int = DEFAULT_MAX_DELAY_DAYS,
) -> dict[str, ReportingDelay]:
    """Each product's delay distribution: its own with at least `min_claims` delays within the cap, else
    the one pooled over all products (when the pool has that many), else none (G = 1, no correction)."""
    if min_claims < 1:
        raise ValueError(f"min_claims must be >= 1, got {min_claims!r}")
    frame = claim_reporting_delays
    if "product" not in frame.columns:
        raise ValueError("claim_reporting_delays lacks the product column")
    _checked_delays(frame)
    within = frame[frame["delay_days"] <= max_delay_days]
    pooled_claims = float(within["claims"].sum())
    pooled = None
    if pooled_claims >= min_claims:
        pooled = estimate_reporting_delay(frame, max_delay_days=max_delay_days, product=ALL_PRODUCTS)
    result = {}
    by_product = rows_by_product(frame)
    for product in products:
        rows = by_product[product]
        own = float(rows.loc[rows["delay_days"] <= max_delay_days, "claims"].sum())
        beyond = float(rows.loc[rows["delay_days"] > max_delay_days, "claims"].sum())
        if own >= min_claims:
            result[product] = estimate_reporting_delay(rows, max_delay_days=max_delay_days, product=product)
        elif pooled is not None:
            note = (
                f"only {own:g} counted return(s) with a delay (fewer than {min_claims:g}): the delay distribution"
                f" pooled over all products ({pooled_claims:g} claims) is used"
            )
            result[product] = ReportingDelay(
                product, POOLED, pooled.cdf, pooled.claims, pooled.claims_beyond_cap, pooled.max_delay_days,
                _join(note, pooled.note),
            )
        else:
            result[product] = _no_correction(
                product, max_delay_days, own, beyond,
                f"only {own:g} counted return(s) with a delay, {pooled_claims:g} over all products (fewer than"
                f" {min_claims:g}): no correction for claims not yet reported",
            )
    return result


# -------------------------------------------------------------------- the cells failures may hide in


@dataclass(frozen=True)
class _Cells:
    """One product's (suspension row, month in service) cells with failures that may be unreported, and
    their days (internal). Row positions index the product's suspension rows."""

    cell_row: np.ndarray  # row position of each cell
    months_in_service: np.ndarray
    lower: FloatArray  # month_interval_ends(k) lower
    upper: FloatArray  # min(month end, observed age a)
    days: np.ndarray  # days of service in the cell up to a
    unreported_share: FloatArray  # 1 - w: mean over the cell's days of 1 - G(as_of - failure date)
    day_cell: np.ndarray  # cell position of each day
    day_of_service: np.ndarray  # d: failure date = warranty start + d (age [d, d + 1) days)
    day_lag: np.ndarray  # as_of - failure date, days
    day_unreported: FloatArray  # 1 - G(day_lag)


def _cells(rows: pd.DataFrame, delay: ReportingDelay, as_of_date: dt.date) -> _Cells:
    age = rows["observed_age_months"].to_numpy(dtype=float)
    start = np.array(rows["warranty_start_date"].tolist(), dtype="datetime64[D]")
    to_as_of = (np.datetime64(as_of_date, "D") - start).astype(np.int64)  # A, days from start to as-of
    # d max: a unit a x L days in service was observed through the failure dates d = 0 .. a L - 1
    last_day = np.where(age > 0, np.floor(age * DAYS_PER_MONTH + 1e-6) - 1, -1).astype(np.int64)
    inconsistent = (last_day > to_as_of) & (age > 0)
    if np.any(inconsistent):
        i = int(np.flatnonzero(inconsistent)[0])
        raise ValueError(
            f"fit_suspensions: observed_age_months {age[i]!r} runs past the as-of date {as_of_date} from the"
            f" warranty start {rows['warranty_start_date'].iloc[i]}"
        )
    support = delay.support_days if delay.corrects else 0
    first_day = np.maximum(0, to_as_of - support + 1)  # lag A - d <= support - 1
    n_days = np.maximum(0, last_day - first_day + 1)
    total = int(n_days.sum())
    day_row = np.repeat(np.arange(len(rows)), n_days)
    offsets = np.arange(total) - np.repeat(np.cumsum(n_days) - n_days, n_days)
    day = np.repeat(first_day, n_days) + offsets
    lag = to_as_of[day_row] - day
    unreported = 1.0 - delay.reported_within(lag)
    month = np.maximum(1, (_DAYS_DENOMINATOR * day + _DAYS_NUMERATOR - 1) // _DAYS_NUMERATOR)
    if total:
        new_cell = np.ones(total, dtype=bool)
        new_cell[1:] = (day_row[1:] != day_row[:-1]) | (month[1:] != month[:-1])
        starts = np.flatnonzero(new_cell)
    else:
        starts = np.zeros(0, dtype=np.int64)
    day_cell = np.cumsum(new_cell) - 1 if total else np.zeros(0, dtype=np.int64)
    cell_row, k = day_row[starts], month[starts]
    summed = np.add.reduceat(unreported, starts) if total else np.zeros(0)
    cell_first = np.where(k <= 1, 0, (k - 1) * _DAYS_NUMERATOR // _DAYS_DENOMINATOR + 1)
    cell_last = np.minimum(k * _DAYS_NUMERATOR // _DAYS_DENOMINATOR, last_day[cell_row])
    cell_days = cell_last - cell_first + 1
    lower, upper = month_interval_ends(k)
    return _Cells(
        cell_row=cell_row,
        months_in_service=k,
        lower=lower,
        upper=np.minimum(upper, age[cell_row]),
        days=cell_days,
        unreported_share=summed / np.maximum(cell_days, 1),
        day_cell=day_cell,
        day_of_service=day,
        day_lag=lag,
        day_unreported=unreported,
    )


def _checked_suspensions(fit_suspensions: pd.DataFrame) -> None:
    missing = [c for c in SUSPENSION_COLUMNS if c not in fit_suspensions.columns]
    if missing:
        raise ValueError(f"fit_suspensions lacks columns {missing}")


def reported_share(
    fit_suspensions: pd.DataFrame, delays: Mapping[str, ReportingDelay], as_of_date: dt.date
) -> pd.DataFrame:
    """The share of failures that would have been reported by the as-of date, per fit_suspensions row x
    month in service before the row's observed age, where it is below 1.

    For a row with warranty start s0 observed to age a, month k holds the days of service j (failure date
    s0 + d, age [d, d + 1) days) of month_interval_ends(k) up to a; reported_share = mean over those days of
    G(as_of - s0 - d), failures taken as uniform over the days of the cell. `row` is the row's index label
    in `fit_suspensions`; interval_lower / interval_upper the cell's ages (months; the upper end stops at
    a); days the days of service in it. Products without a delay distribution are left out.
    REPORTED_SHARE_COLUMNS.
    """
    _checked_suspensions(fit_suspensions)
    pieces = []
    for product, rows in fit_suspensions.groupby("product", sort=True):
        delay = delays.get(product)
        if delay is None or not delay.corrects:
            continue
        cells = _cells(rows, delay, as_of_date)
        keep = cells.unreported_share > 0
        picked = rows.iloc[cells.cell_row[keep]]
        pieces.append(pd.DataFrame({
            "row": picked.index.to_numpy(),
            **{column: picked[column].to_numpy() for column in (*GROUP, "warranty_start_date")},
            "months_in_service": cells.months_in_service[keep],
            "interval_lower": cells.lower[keep],
            "interval_upper": cells.upper[keep],
            "days": cells.days[keep],
            "reported_share": 1.0 - cells.unreported_share[keep],
        }))
    if not pieces:
        return pd.DataFrame({column: [] for column in REPORTED_SHARE_COLUMNS})
    return pd.concat(pieces, ignore_index=True)[list(REPORTED_SHARE_COLUMNS)]


# ---------------------------------------------------------------------------------------- the fit


@dataclass(frozen=True)
class DelayCorrectedFit:
    """One product's life fit allowing for claims not yet reported (Kalbfleisch, Lawless & Robinson 1991).

    uncorrected / corrected: the Weibull outcomes (fitting.fit_weibull, with likelihood-ratio bounds) on
    the pipeline's life data and on the completed data. data: the completed LifeData the corrected fit
    used (the expected unreported failures as interval-censored returns in their cells, the cell holding
    the as-of date ending at the observed age; suspensions less them). fit_returns / fit_suspensions: the
    product's frames completed the same way (the cell holding the as-of date kept whole, as the pipeline
    counts returns; columns reported_returns and expected_unreported_returns, suspensions_reported and
    expected_unreported_failures beside the completed returns and suspensions). unreported_by_failure_month:
    expected unreported failures per build month x calendar month of failure; unreported_by_claim_month:
    the same by the calendar month their claims are expected in (after the as-of date), from G.
    log_likelihoods: the observed-data (KLR) log-likelihood after each M-step (iteration 0: the
    uncorrected fit's parameters).
    """

    product: str
    delay: ReportingDelay
    uncorrected: WeibullOutcome
    corrected: WeibullOutcome
    data: LifeData
    uncorrected_data: LifeData
    fit_returns: pd.DataFrame
    fit_suspensions: pd.DataFrame
    unreported_by_failure_month: pd.DataFrame
    unreported_by_claim_month: pd.DataFrame
    expected_unreported: float
    iterations: int
    converged: bool
    log_likelihoods: tuple[float, ...] = ()
    note: str = ""

    @property
    def fit(self) -> FitResult | None:
        """The corrected Weibull (None when there is no published fit)."""
        return self.corrected.fit


@dataclass(frozen=True)
class ReportingDelayCorrection:
    """Every product's corrected fit, the completed frames (all products) and the unreported failures."""

    delays: Mapping[str, ReportingDelay]
    products: Mapping[str, DelayCorrectedFit]
    fit_returns: pd.DataFrame
    fit_suspensions: pd.DataFrame
    unreported_by_failure_month: pd.DataFrame  # UNREPORTED_COLUMNS
    unreported_by_claim_month: pd.DataFrame  # UNREPORTED_BY_CLAIM_MONTH_COLUMNS
    table: pd.DataFrame  # SUMMARY_COLUMNS, one row per product
    notes: tuple[str, ...] = field(default=())

    @property
    def data_by_product(self) -> dict[str, LifeData]:
        """The corrected LifeData per product (the uncorrected data where nothing was corrected)."""
        return {product: fit.data for product, fit in self.products.items()}


@dataclass(frozen=True)
class _Problem:
    """One product's grouped data for the EM (internal)."""

    returns: LifeData  # the counted returns only
    age: FloatArray  # observed age of each suspension row
    survivors: FloatArray  # suspensions of each row
    cells: _Cells


def _unreported(problem: _Problem, theta: FloatArray) -> tuple[FloatArray, FloatArray]:
    """E-step: expected unreported failures per cell, and log(R(a) + sum_k F-increment (1 - w)) per row."""
    family = get_family("weibull")
    cells = problem.cells
    log_r_lower = family.log_survival(cells.lower, theta)
    log_r_upper = family.log_survival(cells.upper, theta)
    increment = np.exp(log_r_lower) * -np.expm1(np.minimum(log_r_upper - log_r_lower, 0.0))
    hidden = increment * cells.unreported_share
    per_row = np.bincount(cells.cell_row, weights=hidden, minlength=problem.age.size)
    log_denominator = np.log(np.exp(family.log_survival(problem.age, theta)) + per_row)
    expected = problem.survivors[cells.cell_row] * hidden / np.exp(log_denominator[cells.cell_row])
    return expected, log_denominator


def _observed_log_likelihood(problem: _Problem, theta: FloatArray) -> float:
    """The KLR log-likelihood: counted returns as interval-censored, each row's units not reported as
    s log(R(a) + sum_k F-increment_k (1 - w_k)) (constants in w left out)."""
    family = get_family("weibull")
    returns_part = float(log_likelihood(family, theta, problem.returns)) if problem.returns.n_returns else 0.0
    _, log_denominator = _unreported(problem, theta)
    positive = problem.survivors > 0
    return returns_part + float(np.sum(problem.survivors[positive] * log_denominator[positive]))


def _completed(problem: _Problem, expected: FloatArray) -> LifeData:
    """The returns plus the expected unreported failures in their cells; the suspensions less them."""
    cells = problem.cells
    lower = np.concatenate([problem.returns.interval_lower, cells.lower])
    upper = np.concatenate([problem.returns.interval_upper, cells.upper])
    counts = np.concatenate([problem.returns.interval_counts, expected])
    pairs, inverse = np.unique(np.column_stack([lower, upper]), axis=0, return_inverse=True)
    interval_counts = np.bincount(inverse.ravel(), weights=counts, minlength=pairs.shape[0])
    left = problem.survivors - np.bincount(cells.cell_row, weights=expected, minlength=problem.age.size)
    ages, age_index = np.unique(problem.age, return_inverse=True)
    suspension_counts = np.bincount(age_index.ravel(), weights=np.maximum(left, 0.0), minlength=ages.size)
    return LifeData(
        exact_ages=problem.returns.exact_ages,
        exact_counts=problem.returns.exact_counts,
        interval_lower=pairs[:, 0],
        interval_upper=pairs[:, 1],
        interval_counts=interval_counts,
        suspension_ages=ages,
        suspension_counts=suspension_counts,
    )


def _em_fit(
    problem: _Problem,
    start: FitResult,
    fitter: Fitter,
    *,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
) -> tuple[FitResult, FloatArray, LifeData, int, bool, tuple[float, ...]]:
    """EM from `start` (its fixed parameters stay fixed): (last M-step fit, expected unreported per cell
    at it, completed data, iterations, converged, observed log-likelihood after each step)."""
    fixed = {name: getattr(start, name) for name in start.fixed}
    theta = np.asarray(start.theta, dtype=float)
    path = [_observed_log_likelihood(problem, theta)]
    fit = start
    for iteration in range(1, max_iterations + 1):
        expected, _ = _unreported(problem, theta)
        completed = _completed(problem, expected)
        fit = fitter.fit(completed, fixed=fixed or None)
        step = float(np.max(np.abs(fit.theta - theta)))
        theta = np.asarray(fit.theta, dtype=float)
        path.append(_observed_log_likelihood(problem, theta))
        if step < tolerance:
            expected, _ = _unreported(problem, theta)
            return fit, expected, _completed(problem, expected), iteration, True, tuple(path)
    expected, _ = _unreported(problem, theta)
    return fit, expected, _completed(problem, expected), max_iterations, False, tuple(path)


def _first_step_shift(problem: _Problem, start: FitResult) -> tuple[float, FloatArray, LifeData]:
    """The first EM move from `start` in its standard errors, d = sqrt(delta' Sigma^-1 delta) with
    delta = -H^-1 g one Newton step of the completed data's log-likelihood (free parameters; Sigma the
    start's covariance), and the E-step's expected unreported failures per cell and completed data.
    d is inf when the step or the covariance cannot be formed (the EM then runs)."""
    family = get_family("weibull")
    theta = np.asarray(start.theta, dtype=float)
    expected, _ = _unreported(problem, theta)
    completed = _completed(problem, expected)
    free = [i for i, name in enumerate(family.parameter_names) if name not in start.fixed]
    _, gradient, hessian = log_likelihood(family, theta, completed, derivatives=2)
    g, h = gradient[free], hessian[np.ix_(free, free)]
    covariance = np.asarray(start.covariance, dtype=float)[np.ix_(free, free)]
    try:
        delta = np.linalg.solve(-h, g)
        shift = float(np.sqrt(delta @ np.linalg.solve(covariance, delta)))
    except np.linalg.LinAlgError:
        return math.inf, expected, completed
    return (shift if math.isfinite(shift) else math.inf), expected, completed


def _problem(returns: pd.DataFrame, suspensions: pd.DataFrame, cells: _Cells) -> _Problem:
    by_month = returns.groupby("months_in_service", as_index=False)["returns"].sum()
    lower, upper = month_interval_ends(by_month["months_in_service"].to_numpy(dtype=float))
    return _Problem(
        returns=LifeData(
            interval_lower=lower, interval_upper=upper, interval_counts=by_month["returns"].to_numpy(dtype=float)
        ),
        age=suspensions["observed_age_months"].to_numpy(dtype=float),
        survivors=suspensions["suspensions"].to_numpy(dtype=float),
        cells=cells,
    )


def klr_log_likelihood(
    fit_returns: pd.DataFrame, fit_suspensions: pd.DataFrame, delay: ReportingDelay, as_of_date: dt.date
) -> Callable[[npt.ArrayLike], float]:
    """One product's observed-data log-likelihood (Kalbfleisch, Lawless & Robinson 1991) as a function of
    the Weibull theta = (log scale, log shape), scale in months: the function the EM maximises.

    sum over counted returns of log(F(upper) - F(lower)) + sum over fit_suspensions rows of
    s log(R(a) + sum_k (F(upper_k) - F(lower_k)) (1 - w_k)), w from `reported_share` (constants left out).
    """
    _checked_suspensions(fit_suspensions)
    suspensions = fit_suspensions.reset_index(drop=True)
    problem = _problem(fit_returns, suspensions, _cells(suspensions, delay, as_of_date))
    return lambda theta: _observed_log_likelihood(problem, np.asarray(theta, dtype=float))


def correct_product(
    product: str,
    fit_returns: pd.DataFrame,
    fit_suspensions: pd.DataFrame,
    delay: ReportingDelay,
    as_of_date: dt.date,
    settings: LifeModelSettings,
    warranty_months: int,
    *,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    negligible_shift: float = DEFAULT_NEGLIGIBLE_SHIFT,
) -> DelayCorrectedFit:
    """One product's Weibull fit with and without the correction for claims not yet reported.

    `fit_returns`, `fit_suspensions`: the product's rows of those outputs. The uncorrected fit is
    fitting.fit_weibull on the pipeline's life data (its fixed-shape fallback included); the EM starts
    from it and keeps its shape fixed when it was fixed; the corrected outcome is fit_weibull on the
    completed data. No fit, or no delay distribution: the uncorrected outcome stands (noted). When one
    EM step would move the fit by less than `negligible_shift` standard errors (module docstring; 0 turns
    the skip off), the EM is left out: the uncorrected outcome stands and the frames are completed at it.
    """
    if not negligible_shift >= 0.0:
        raise ValueError(f"negligible_shift must be >= 0, got {negligible_shift!r}")
    for name, frame in (("fit_returns", fit_returns), ("fit_suspensions", fit_suspensions)):
        if len(frame) and set(frame["product"]) != {product}:
            raise ValueError(f"{name} must hold only product {product}'s rows")
    _checked_suspensions(fit_suspensions)
    returns = fit_returns.reset_index(drop=True)
    suspensions = fit_suspensions.reset_index(drop=True)
    data = life_data_by_product(returns, suspensions).get(product, LifeData())
    fixed_shape = settings.fixed_shape_for(product)
    cdf_ages = (float(warranty_months),)
    # likelihood-ratio bounds of shape, scale and F(warranty end) only: this stage publishes no B-life
    uncorrected = fit_weibull(data, settings, fixed_shape, b_life_fractions=(), cdf_ages=cdf_ages)
    cells = _cells(suspensions, delay, as_of_date)
    note = delay.note

    def unchanged(reason: str) -> DelayCorrectedFit:
        return DelayCorrectedFit(
            product, delay, uncorrected, uncorrected, data, data,
            _completed_returns(returns, suspensions, cells, np.zeros(cells.cell_row.size)),
            _completed_suspensions(suspensions, cells, np.zeros(cells.cell_row.size)),
            _empty_unreported(UNREPORTED_COLUMNS), _empty_unreported(UNREPORTED_BY_CLAIM_MONTH_COLUMNS),
            0.0, 0, True, (), _join(note, reason),
        )

    if not delay.corrects:
        return unchanged("no correction: every claim taken as reported")
    if uncorrected.fit is None or uncorrected.status not in PUBLISHED_STATUSES:
        return unchanged(f"no correction: no Weibull fit to start from ({uncorrected.status})")
    if cells.cell_row.size == 0:
        return unchanged("no correction: no unit was in service within the delay of the as-of date")
    problem = _problem(returns, suspensions, cells)
    start = np.array(suspensions["warranty_start_date"].tolist(), dtype="datetime64[D]")

    def result(corrected, completed, expected, iterations, converged, path, note):  # type: ignore[no-untyped-def]
        return DelayCorrectedFit(
            product=product,
            delay=delay,
            uncorrected=uncorrected,
            corrected=corrected,
            data=completed,
            uncorrected_data=data,
            fit_returns=_completed_returns(returns, suspensions, cells, expected),
            fit_suspensions=_completed_suspensions(suspensions, cells, expected),
            unreported_by_failure_month=_by_failure_month(product, suspensions, start, cells, expected),
            unreported_by_claim_month=_by_claim_month(product, suspensions, cells, expected, delay, as_of_date),
            expected_unreported=float(expected.sum()),
            iterations=iterations,
            converged=converged,
            log_likelihoods=path,
            note=note,
        )

    if negligible_shift > 0.0:
        shift, expected, completed = _first_step_shift(problem, uncorrected.fit)
        if shift < negligible_shift:
            note = _join(note, (
                f"fit not re-estimated: the {expected.sum():.3g} expected unreported failure(s) would move it by"
                f" {shift:.2g} standard errors (under {negligible_shift:g}); the frames are completed at the"
                " uncorrected fit"
            ))
            at_start = (_observed_log_likelihood(problem, np.asarray(uncorrected.fit.theta, dtype=float)),)
            return result(uncorrected, completed, expected, 0, True, at_start, note)
    fitter = Fitter("weibull", confidence_level=settings.confidence_level, min_returns=settings.min_returns)
    try:
        last, expected, completed, iterations, converged, path = _em_fit(
            problem, uncorrected.fit, fitter, tolerance=tolerance, max_iterations=max_iterations
        )
    except FitError as error:
        return unchanged(f"no correction: the fit to the completed data failed during EM: {error}")
    corrected = fit_weibull(completed, settings, fixed_shape, b_life_fractions=(), cdf_ages=cdf_ages)
    if corrected.fit is None or corrected.status not in PUBLISHED_STATUSES:
        return unchanged(f"no correction: the completed data have no published fit ({corrected.status})")
    if set(corrected.fit.fixed) != set(last.fixed):
        note = _join(note, "the corrected fit's shape was fixed differently from the EM's; its figures are the"
                           " completed data's own fit")
    if not converged:
        note = _join(note, f"EM not converged in {max_iterations} iterations (step above {tolerance:g})")
    return result(corrected, completed, expected, iterations, converged, path, note)


def _completed_returns(
    returns: pd.DataFrame, suspensions: pd.DataFrame, cells: _Cells, expected: FloatArray
) -> pd.DataFrame:
    keys = suspensions.iloc[cells.cell_row][GROUP].reset_index(drop=True)
    keys["months_in_service"] = cells.months_in_service
    keys["expected_unreported_returns"] = expected
    added = keys.groupby([*GROUP, "months_in_service"], as_index=False, sort=False)[
        "expected_unreported_returns"
    ].sum()
    merged = returns.merge(added, on=[*GROUP, "months_in_service"], how="outer", sort=True)
    merged["reported_returns"] = merged["returns"].fillna(0.0).astype(float)
    merged["expected_unreported_returns"] = merged["expected_unreported_returns"].fillna(0.0)
    merged["returns"] = merged["reported_returns"] + merged["expected_unreported_returns"]
    if "return_cost" in merged.columns:  # the cost of claims not yet made is not known
        merged["return_cost"] = merged["return_cost"].fillna(0.0)
    merged["months_in_service"] = merged["months_in_service"].astype(np.int64)
    return merged.reset_index(drop=True)


def _completed_suspensions(suspensions: pd.DataFrame, cells: _Cells, expected: FloatArray) -> pd.DataFrame:
    out = suspensions.copy()
    unreported = np.bincount(cells.cell_row, weights=expected, minlength=len(out)) if len(out) else np.zeros(0)
    out["suspensions_reported"] = out["suspensions"].astype(float)
    out["expected_unreported_failures"] = unreported
    out["suspensions"] = np.maximum(out["suspensions_reported"] - unreported, 0.0)
    return out


def _day_amounts(cells: _Cells, expected: FloatArray) -> FloatArray:
    """Each cell's expected unreported failures spread over its days in proportion to 1 - G(lag)
    (failures uniform over the cell's days)."""
    per_cell = np.bincount(cells.day_cell, weights=cells.day_unreported, minlength=expected.size)
    share = np.divide(
        cells.day_unreported, per_cell[cells.day_cell], out=np.zeros_like(cells.day_unreported),
        where=per_cell[cells.day_cell] > 0,
    )
    return expected[cells.day_cell] * share


def _by_failure_month(
    product: str, suspensions: pd.DataFrame, start: np.ndarray, cells: _Cells, expected: FloatArray
) -> pd.DataFrame:
    amounts = _day_amounts(cells, expected)
    day_row = cells.cell_row[cells.day_cell]
    failure = start[day_row] + cells.day_of_service
    frame = pd.DataFrame({
        "build_month": suspensions["build_month"].to_numpy()[day_row],
        "failure_month": failure.astype("datetime64[M]").astype("datetime64[D]").astype(object),
        "expected_unreported": amounts,
    })
    out = frame.groupby(["build_month", "failure_month"], as_index=False, sort=True)["expected_unreported"].sum()
    out.insert(0, "product", product)
    return out[list(UNREPORTED_COLUMNS)]


def _by_claim_month(
    product: str, suspensions: pd.DataFrame, cells: _Cells, expected: FloatArray, delay: ReportingDelay,
    as_of_date: dt.date,
) -> pd.DataFrame:
    """A failure with lag m unreported at the as-of date is claimed i days after it with probability
    P(delay = m + i) / (1 - G(m)), i = 1 .. support - m."""
    amounts = _day_amounts(cells, expected)
    support = delay.support_days
    day_row = cells.cell_row[cells.day_cell]
    frame = pd.DataFrame({
        "build_month": suspensions["build_month"].to_numpy()[day_row], "lag": cells.day_lag, "amount": amounts,
    })
    by_lag = frame.groupby(["build_month", "lag"], sort=True)["amount"].sum().unstack(fill_value=0.0)
    lags = by_lag.columns.to_numpy(dtype=np.int64)
    probabilities = delay.probabilities
    # claim_after[m, i - 1] = P(delay = m + i) / (1 - G(m))
    offsets = np.arange(1, support + 1)
    later = lags[:, None] + offsets[None, :]
    mass = np.where(later <= support, probabilities[np.minimum(later, support)], 0.0)
    tail = 1.0 - delay.cdf[np.minimum(lags, support)]
    claim_after = np.divide(mass, tail[:, None], out=np.zeros_like(mass), where=tail[:, None] > 0)
    by_offset = by_lag.to_numpy() @ claim_after  # build month x days after the as-of date
    claim_month = (np.datetime64(as_of_date, "D") + offsets).astype("datetime64[M]")
    months, month_index = np.unique(claim_month, return_inverse=True)
    by_month = np.zeros((by_offset.shape[0], months.size))
    np.add.at(by_month.T, month_index.ravel(), by_offset.T)
    out = pd.DataFrame(by_month, index=by_lag.index, columns=months.astype("datetime64[D]").astype(object))
    out = out.stack().rename("expected_unreported").reset_index()
    out.columns = ["build_month", "month", "expected_unreported"]
    out = out[out["expected_unreported"] > 0].reset_index(drop=True)
    out.insert(0, "product", product)
    return out[list(UNREPORTED_BY_CLAIM_MONTH_COLUMNS)]


def _empty_unreported(columns: tuple[str, ...]) -> pd.DataFrame:
    return pd.DataFrame(
        {column: pd.Series(dtype=float if column == "expected_unreported" else object) for column in columns}
    )


def _correct_one(product, returns, suspensions, delay, as_of_date, settings, warranty, tolerance, max_iterations, negligible_shift):  # type: ignore[no-untyped-def]
    """correct_product with positional arguments, for a worker process."""
    return correct_product(
        product, returns, suspensions, delay, as_of_date, settings, warranty,
        tolerance=tolerance, max_iterations=max_iterations, negligible_shift=negligible_shift,
    )


def correct_for_reporting_delay(
    fit_returns: pd.DataFrame,
    fit_suspensions: pd.DataFrame,
    claim_reporting_delays: pd.DataFrame,
    as_of_date: dt.date,
    settings: LifeModelSettings,
    warranty_by_product: Mapping[str, int],
    *,
    min_claims: float = DEFAULT_MIN_CLAIMS,
    max_delay_days: int = DEFAULT_MAX_DELAY_DAYS,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    workers: int = 1,
    negligible_shift: float = DEFAULT_NEGLIGIBLE_SHIFT,
) -> ReportingDelayCorrection:
    """Every product's delay distribution, corrected fit and expected unreported failures.

    `warranty_by_product`: the warranty (months) at which each fit's fraction failed is bounded, as in
    fitting.fit_products (cohort_summary's max_warranty_months). Never raises for one product's data: a
    product left uncorrected says why in its note. `workers` > 1: the products in that many processes
    (stages.parallel.map_products), with the same result. `negligible_shift`: see correct_product.
    """
    _checked_suspensions(fit_suspensions)
    products = sorted(set(fit_returns["product"]) | set(fit_suspensions["product"]))
    delays = reporting_delays_by_product(
        claim_reporting_delays, products, min_claims=min_claims, max_delay_days=max_delay_days
    )
    returns_of, suspensions_of = rows_by_product(fit_returns), rows_by_product(fit_suspensions)
    corrected = map_products(
        _correct_one,
        [
            (product, returns_of[product], suspensions_of[product], delays[product], as_of_date, settings,
             int(warranty_by_product[product]), tolerance, max_iterations, negligible_shift)
            for product in products
        ],
        workers,
    )
    fits = dict(zip(products, corrected))
    for product, fit in fits.items():
        log.debug("reporting delay %s: %s", product, fit.note)
    notes = tuple(f"product {product}: {fit.note}" for product, fit in fits.items() if fit.note)

    def stacked(name: str, columns: tuple[str, ...] | None = None) -> pd.DataFrame:
        frames = [getattr(fit, name) for fit in fits.values() if len(getattr(fit, name))]
        if not frames:
            return _empty_unreported(columns) if columns else pd.DataFrame()
        return pd.concat(frames, ignore_index=True)

    return ReportingDelayCorrection(
        delays=delays,
        products=fits,
        fit_returns=stacked("fit_returns"),
        fit_suspensions=stacked("fit_suspensions"),
        unreported_by_failure_month=stacked("unreported_by_failure_month", UNREPORTED_COLUMNS),
        unreported_by_claim_month=stacked("unreported_by_claim_month", UNREPORTED_BY_CLAIM_MONTH_COLUMNS),
        table=pd.DataFrame([_summary_row(fit) for fit in fits.values()], columns=list(SUMMARY_COLUMNS)),
        notes=notes,
    )


def _summary_row(fit: DelayCorrectedFit) -> dict[str, object]:
    delay = fit.delay
    row: dict[str, object] = {
        "product": fit.product,
        "delay_source": delay.source,
        "delay_claims": delay.claims,
        "delay_claims_beyond_cap": delay.claims_beyond_cap,
        "delay_mean_days": delay.mean_days,
        "delay_median_days": delay.quantile_days(0.5),
        "delay_p99_days": delay.quantile_days(0.99),
        "uncorrected_status": fit.uncorrected.status,
        "corrected_status": fit.corrected.status,
        "reported_returns": fit.uncorrected_data.n_returns,
        "expected_unreported": fit.expected_unreported,
        "em_iterations": fit.iterations,
        "em_converged": fit.converged,
        "log_likelihood_uncorrected": fit.log_likelihoods[0] if fit.log_likelihoods else math.nan,
        "log_likelihood_corrected": fit.log_likelihoods[-1] if fit.log_likelihoods else math.nan,
        "note": fit.note,
    }
    for prefix, outcome in (("uncorrected", fit.uncorrected), ("corrected", fit.corrected)):
        row[f"{prefix}_shape"] = outcome.fit.shape if outcome.fit is not None else math.nan
        row[f"{prefix}_scale"] = outcome.fit.scale if outcome.fit is not None else math.nan
    bounds = fit.corrected.lr_bounds
    row["corrected_shape_lr_lower"], row["corrected_shape_lr_upper"] = bounds.shape if bounds else (math.nan, math.nan)
    row["corrected_scale_lr_lower"], row["corrected_scale_lr_upper"] = bounds.scale if bounds else (math.nan, math.nan)
    return row


def _join(first: str, second: str) -> str:
    return f"{first}; {second}" if first and second else first or second


# ---------------------------------------------------------------------------------------- the stage


@dataclass(frozen=True)
class DelayStage:
    """The reporting-delay stage of the nightly run. `shaped`: the shaped data the life fits and the
    forecast use (fit_returns / fit_suspensions completed with the expected unreported failures when the
    correction ran; the run's own data otherwise); `correction`: None when turned off
    (`forecast.correct_reporting_delay = false`); `table`: SUMMARY_COLUMNS per product (empty when off)."""

    shaped: object  # stages.shaping.ShapedData
    correction: ReportingDelayCorrection | None

    @property
    def table(self) -> pd.DataFrame:
        if self.correction is None:
            return pd.DataFrame({column: [] for column in SUMMARY_COLUMNS})
        return self.correction.table

    @property
    def unreported_by_claim_month(self) -> pd.DataFrame | None:
        return None if self.correction is None else self.correction.unreported_by_claim_month

    @property
    def warnings(self) -> tuple[str, ...]:
        return () if self.correction is None else self.correction.notes

    @property
    def summary(self) -> str:
        """One line for the run log."""
        if self.correction is None:
            return "turned off (forecast.correct_reporting_delay = false)"
        table = self.correction.table
        return (
            f"{table['expected_unreported'].sum():,.1f} failures not yet reported"
            f" (mean delay {', '.join(f'{p} {d:.1f}' for p, d in zip(table['product'], table['delay_mean_days']))} days)"
        )


def reporting_delay_stage(shaped, settings, life_model: LifeModelSettings, workers: int = 1) -> DelayStage:  # type: ignore[no-untyped-def]
    """The run's reporting-delay step: estimate each product's failure-to-claim delay from
    shaped.claim_reporting_delays, fit on the likelihood that allows for it (Kalbfleisch, Lawless &
    Robinson 1991) and complete the fit frames; `settings` is the run's ForecastSettings."""
    if not settings.correct_reporting_delay:
        return DelayStage(shaped=shaped, correction=None)
    warranty = shaped.cohort_summary.groupby("product")["max_warranty_months"].max().to_dict()
    correction = correct_for_reporting_delay(
        shaped.fit_returns, shaped.fit_suspensions, shaped.claim_reporting_delays, shaped.as_of_date, life_model,
        {product: int(months) for product, months in warranty.items()},
        min_claims=settings.min_delay_claims, max_delay_days=settings.max_reporting_delay_days, workers=workers,
    )
    def like(frame: pd.DataFrame, template: pd.DataFrame) -> pd.DataFrame:
        """The completed frame with the run's columns (the run's own empty frame when nothing was completed)."""
        if not len(frame) or not set(template.columns) <= set(frame.columns):
            return template if not len(frame) else frame.reindex(columns=list(template.columns))
        return frame.loc[:, list(template.columns)]

    completed = dataclasses.replace(
        shaped,
        fit_returns=like(correction.fit_returns, shaped.fit_returns),
        fit_suspensions=like(correction.fit_suspensions, shaped.fit_suspensions),
    )
    return DelayStage(shaped=completed, correction=correction)
