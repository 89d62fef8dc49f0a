"""The build-month alert stage: build months whose returns run above what their product's baseline life
model expects (a supplier lot, a process change), found early.

For each product x build month, from the shaped tables fit_suspensions (one row per group of `units`
that were all observed to `observed_age_months`, 0 for units still in the channel) and fit_returns
(counted returns by `months_in_service`):

    observed  O   = sum of returns
    expected  E   = sum over rows of units x F(observed_age)
    early     O_K = sum of returns with months_in_service <= K
              E_K = sum over rows of units x F(min(observed_age, b_K)), b_K the end of month in
                    service K on the day grid (lifecore.data.month_interval_ends, about K months)

F is the cdf of the product's baseline model (any family, used only through `cdf`). units x F(a) is
the expected number of the row's units that fail within their observation window (0, a]: a unit that
fails is a return, one that does not is a suspension at a, so E counts the same events O counts.
K is `early_life_months`: a defect of a lot usually shows as infant failures, long before it moves the
whole-window count of a large cohort.

Each view is tested separately: the one-sided exact Poisson p-value P(X >= O | mean E) (1 when O = 0),
the exact (Garwood) interval for the ratio O / E with E taken as known,

    lower = chi2.ppf(alpha/2, 2 O) / (2 E)     (0 when O = 0),
    upper = chi2.ppf(1 - alpha/2, 2 O + 2) / (2 E),    alpha = 1 - confidence_level,

and Benjamini-Hochberg q-values over the build months of each product. A month is flagged when, in
either view, q <= `false_discovery_rate` and O / E >= `min_ratio` (the ratio floor keeps huge cohorts
from flagging harmless 3% excesses).

The baseline must not learn from the months it judges: it starts as the product's published fit, is
refitted (two-parameter Weibull, or the same fixed shape if the published fit fixed it) on the data
without the flagged months, and the months are judged again, until the flagged set stops changing (at
most `MAX_ROUNDS` rounds). If a refit fails, the previous baseline is kept and a warning says so.

Pointing at the cause (when the run passes returns_by_build_month_and_code): for each flagged month and
each failure code with returns in it, over the whole observation window,

    observed  O_c = the code's returns in the month
    expected  E_c = E (the month's whole-window expected returns) x s_c,
    s_c           = the code's share of the product's returns in the unflagged build months,

with the ratio O_c / E_c, the one-sided exact Poisson p-value and the code's share of the month's excess,
max(O_c - E_c, 0) over the sum of those excesses over the month's codes (so the shares add up to 1).
A failure code with at least `CONCENTRATED_SHARE` of its returns (and at least
`MIN_CONCENTRATED_RETURNS` of them) in flagged months is reported as concentrated there: its life is
then a defect of those months rather than a wear-out of the product, and its failure-mode fit says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Protocol

import numpy as np
import pandas as pd
from scipy import stats

from warranty_forecast.config import AlertSettings, LifeModelSettings
from warranty_forecast.errors import FitError
from warranty_forecast.lifecore.data import month_interval_ends
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.stages.fitting import PUBLISHED_STATUSES, life_data_by_product
from warranty_forecast.stages.life_models import FittedLives
from warranty_forecast.stages.build_month_cusum import design_threshold
from warranty_forecast.stages.month_life import hazard_ratio_test, month_data_by_build_month
from warranty_forecast.stages.by_product import rows_by_product
from warranty_forecast.stages.parallel import map_products

MAX_ROUNDS = 5
CUSUM_SEED = 20261203  # the CUSUM threshold's simulation seed: the same data give the same threshold every night
CONCENTRATED_SHARE = 0.5  # a failure code with this share of its returns in flagged months is concentrated there
MIN_CONCENTRATED_RETURNS = 5  # ... if at least this many (common practice, no source: fewer says nothing)

VIEWS = ("early", "window")  # column prefixes: the early-life view and the whole observation window

BUILD_MONTH_ALERT_COLUMNS = (
    "product",
    "build_month",
    "units",
    *(
        f"{view}_{name}"
        for view in VIEWS
        for name in ("observed_returns", "expected_returns", "ratio", "ratio_lower", "ratio_upper", "p_value", "q_value")
    ),
    "early_life_months",
    "hazard_ratio",
    "hazard_ratio_lower",
    "hazard_ratio_upper",
    "scale_test_p_value",
    "month_p_value",
    "month_q_value",
    "cusum",
    "cusum_threshold",
    "cusum_signal",
    "is_flagged",
    "reason",
)

BUILD_MONTH_CAUSE_COLUMNS = (
    "product",
    "build_month",
    "failure_code",
    "observed_returns",
    "expected_returns",
    "ratio",
    "p_value",
    "excess_returns",
    "share_of_excess",
    "baseline_share",
)


class Baseline(Protocol):
    """A life distribution in months: F(t) for t >= 0."""

    def cdf(self, t: np.ndarray) -> np.ndarray: ...

    def log_survival(self, t: np.ndarray) -> np.ndarray: ...


@dataclass(frozen=True)
class ProductBaseline:
    """The baseline a product's months were judged against: the fit, the build months left out of it,
    the rounds it took, and a note when it is not what it should be (a failed refit, no settling)."""

    product: str
    fit: FitResult
    excluded_build_months: tuple[object, ...]
    rounds: int
    note: str = ""


@dataclass(frozen=True)
class BuildMonthAlerts:
    """The stage's result: one row per product x build month (BUILD_MONTH_ALERT_COLUMNS), the baselines,
    and one warning per flagged month (plus any note on a baseline)."""

    table: pd.DataFrame
    baselines: Mapping[str, ProductBaseline]
    warnings: tuple[str, ...]
    causes: pd.DataFrame = field(default_factory=lambda: _empty_causes())
    concentrated_codes: Mapping[tuple[str, str], str] = field(default_factory=dict)  # (product, code) -> sentence

    @property
    def flagged(self) -> pd.DataFrame:
        """The flagged rows of the table."""
        return self.table[self.table["is_flagged"]]

    @property
    def flagged_by_product(self) -> dict[str, tuple[object, ...]]:
        """product -> its flagged build months (products with none left out)."""
        flagged = self.flagged
        return {
            str(product): tuple(sorted(rows["build_month"])) for product, rows in flagged.groupby("product", sort=True)
        }

    @property
    def summary(self) -> str:
        """One line for the run log."""
        return f"{len(self.table)} build months of {len(self.baselines)} products, {len(self.flagged)} flagged"


# -- the statistics ----------------------------------------------------------------------------------


def poisson_excess_p_value(observed: np.ndarray, expected: np.ndarray) -> np.ndarray:
    """One-sided exact Poisson p-value P(X >= O) for X ~ Poisson(E); 1 when O = 0 (also when E = 0)."""
    observed = np.asarray(observed, dtype=float)
    expected = np.asarray(expected, dtype=float)
    p = np.ones_like(observed)
    tested = (observed > 0) & (expected > 0)
    # P(X >= O) = P(X > O - 1), the survival function at O - 1
    p[tested] = stats.poisson.sf(observed[tested] - 1, expected[tested])
    p[(observed > 0) & (expected <= 0)] = 0.0  # returns where none can occur
    return p


def garwood_ratio_interval(
    observed: np.ndarray, expected: np.ndarray, confidence_level: float
) -> tuple[np.ndarray, np.ndarray]:
    """Exact (Garwood 1936) two-sided interval for O / E, E known: chi-square quantiles of the Poisson mean
    divided by E. Lower 0 when O = 0; both NaN when E = 0."""
    observed = np.asarray(observed, dtype=float)
    expected = np.asarray(expected, dtype=float)
    alpha = 1.0 - confidence_level
    with np.errstate(divide="ignore", invalid="ignore"):
        lower_mean = np.where(observed > 0, stats.chi2.ppf(alpha / 2, 2 * observed) / 2, 0.0)
        upper_mean = stats.chi2.ppf(1 - alpha / 2, 2 * observed + 2) / 2
        positive = expected > 0
        lower = np.where(positive, lower_mean / np.where(positive, expected, 1.0), np.nan)
        upper = np.where(positive, upper_mean / np.where(positive, expected, 1.0), np.nan)
    return lower, upper


def benjamini_hochberg(p_values: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg (1995) q-values: q_(i) = min over j >= i of p_(j) m / j, at most 1, for the
    p-values sorted ascending; returned in the input's order."""
    p = np.asarray(p_values, dtype=float)
    m = len(p)
    if m == 0:
        return p.copy()
    order = np.argsort(p, kind="stable")
    scaled = p[order] * m / np.arange(1, m + 1)
    q_sorted = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
    q = np.empty(m)
    q[order] = q_sorted
    return q


# -- one product's months against one baseline ------------------------------------------------------


def score_build_months(
    returns: pd.DataFrame,
    suspensions: pd.DataFrame,
    baseline: Baseline,
    settings: AlertSettings,
    confidence_level: float,
) -> pd.DataFrame:
    """One product's build months judged against `baseline`: both views' O, E, ratio with Garwood bounds,
    p, BH q, the flag and its reason (columns BUILD_MONTH_ALERT_COLUMNS without `product`)."""
    k = float(settings.early_life_months)
    early_end = float(month_interval_ends(k)[1])  # the end of month K on the day grid, about K months
    ages = suspensions["observed_age_months"].to_numpy(dtype=float)
    units = suspensions["units"].to_numpy(dtype=float)
    exposure = pd.DataFrame(
        {
            "build_month": suspensions["build_month"].to_numpy(),
            "units": units,
            "window_expected_returns": units * baseline.cdf(ages),
            "early_expected_returns": units * baseline.cdf(np.minimum(ages, early_end)),
        }
    ).groupby("build_month", as_index=False).sum()
    early = returns["months_in_service"].to_numpy() <= k
    counted = pd.DataFrame(
        {
            "build_month": returns["build_month"].to_numpy(),
            "window_observed_returns": returns["returns"].to_numpy(dtype=float),
            "early_observed_returns": np.where(early, returns["returns"].to_numpy(dtype=float), 0.0),
        }
    ).groupby("build_month", as_index=False).sum()
    table = exposure.merge(counted, on="build_month", how="outer").sort_values("build_month", ignore_index=True)
    table = table.fillna(0.0)
    reasons: list[list[str]] = [[] for _ in range(len(table))]
    for view in VIEWS:
        observed = table[f"{view}_observed_returns"].to_numpy(dtype=float)
        expected = table[f"{view}_expected_returns"].to_numpy(dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(expected > 0, observed / np.where(expected > 0, expected, 1.0), np.nan)
        lower, upper = garwood_ratio_interval(observed, expected, confidence_level)
        p = poisson_excess_p_value(observed, expected)
        tested = expected > 0
        q = np.ones(len(table))
        q[tested] = benjamini_hochberg(p[tested])  # months with no exposure are not tested
        table[f"{view}_ratio"] = ratio
        table[f"{view}_ratio_lower"] = lower
        table[f"{view}_ratio_upper"] = upper
        table[f"{view}_p_value"] = p
        table[f"{view}_q_value"] = q
    table["early_life_months"] = int(settings.early_life_months)
    tests = _hazard_ratio_tests(returns, suspensions, baseline, table["build_month"], confidence_level)
    table = pd.concat([table, tests], axis=1)
    # one test per month: the smaller p of its two views (early life, own scale), doubled (Bonferroni)
    tested = table["units"].to_numpy(dtype=float) > 0
    view_p = {
        "early": table["early_p_value"].to_numpy(dtype=float),
        "scale": table["scale_test_p_value"].to_numpy(dtype=float),
    }
    view_ratio = {"early": table["early_ratio"].to_numpy(dtype=float), "scale": table["hazard_ratio"].to_numpy(dtype=float)}
    month_p = np.minimum(1.0, 2.0 * np.minimum(view_p["early"], view_p["scale"]))
    q = np.ones(len(table))
    q[tested] = benjamini_hochberg(month_p[tested])
    table["month_p_value"] = month_p
    table["month_q_value"] = q
    rejected = tested & (q <= settings.false_discovery_rate)
    # BH rejects every month p at or below k* alpha / m (k* months rejected of m tested): a view carries the
    # flag when its own doubled p is under that line
    cutoff = rejected.sum() * settings.false_discovery_rate / max(int(tested.sum()), 1) if rejected.any() else -1.0
    flags = np.zeros(len(table), dtype=bool)
    for view, words in (("early", f"returns in its first {settings.early_life_months} months in service {{:.2f}}"
                                  " times the expected"),
                        ("scale", "its own Weibull scale {:.2f} times the product's hazard (likelihood-ratio test)")):
        with np.errstate(invalid="ignore"):
            carries = rejected & (2.0 * view_p[view] <= cutoff) & (view_ratio[view] >= settings.min_ratio)
        flags |= carries
        for i in np.flatnonzero(carries):
            reasons[i].append(words.format(view_ratio[view][i]))
    cusum, threshold, signals, run_starts = production_order_cusum(
        table["window_observed_returns"].to_numpy(dtype=float), table["window_expected_returns"].to_numpy(dtype=float),
        settings.cusum_shift, settings.cusum_in_control_run_length,
    )
    table["cusum"] = cusum
    table["cusum_threshold"] = threshold
    table["cusum_signal"] = signals
    for i in np.flatnonzero(signals):
        since = _month(table["build_month"].iloc[run_starts[i]])
        reasons[i].append(
            f"the CUSUM of returns over production order passed its threshold ({cusum[i]:.1f} > {threshold:.1f};"
            f" excess building since {since})"
        )
    table["is_flagged"] = flags | signals
    table["reason"] = ["; ".join(r) for r in reasons]
    return table


def production_order_cusum(
    observed: np.ndarray, expected: np.ndarray, shift: float, in_control_run_length: float
) -> tuple[np.ndarray, float, np.ndarray, np.ndarray]:
    """The upper Poisson CUSUM over a product's build months in production order (whole-window O and E):
    S_t = max(0, S_{t-1} + O_t ln r - (r - 1) E_t), restarted at 0 after each signal (S_t > h), with h set
    by simulation (build_month_cusum.design_threshold, seeded with CUSUM_SEED) so that a product without a
    defect signals on average once in `in_control_run_length` build months.

    Returns S_t (before any restart), h (NaN when no month expects returns), the signal flags, and for
    each month the index where its run began (the month after S was last 0)."""
    n = len(observed)
    path = np.zeros(n)
    signals = np.zeros(n, dtype=bool)
    run_starts = np.zeros(n, dtype=np.int64)
    if not np.any(expected > 0):
        return path, math.nan, signals, run_starts
    threshold = design_threshold(expected[expected > 0], shift, in_control_run_length, seed=CUSUM_SEED).threshold
    log_r = math.log(shift)
    value, start = 0.0, 0
    for t in range(n):
        if value == 0.0:
            start = t
        value = max(0.0, value + observed[t] * log_r - (shift - 1.0) * expected[t])
        path[t], run_starts[t] = value, start
        if value > threshold:
            signals[t] = True
            value = 0.0
    return path, threshold, signals, run_starts


def _hazard_ratio_tests(
    returns: pd.DataFrame, suspensions: pd.DataFrame, baseline: Baseline, months: pd.Series, confidence_level: float
) -> pd.DataFrame:
    """Per build month (in the order of `months`): the month's own-scale hazard ratio against `baseline`
    with its likelihood-ratio interval and one-sided p-value (`month_life.hazard_ratio_test`)."""
    data = month_data_by_build_month(returns, suspensions)
    rows = []
    for month in months:
        month_data = data.get(month)
        if month_data is None or month_data.units == 0:
            rows.append((math.nan, math.nan, math.nan, 1.0))
            continue
        test = hazard_ratio_test(baseline, month_data, confidence_level)
        rows.append((test.hazard_ratio, test.lower, test.upper, test.p_value))
    return pd.DataFrame(
        rows, columns=["hazard_ratio", "hazard_ratio_lower", "hazard_ratio_upper", "scale_test_p_value"],
        index=months.index,
    )


# -- pointing at the cause ----------------------------------------------------------------------------


def _empty_causes() -> pd.DataFrame:
    return pd.DataFrame({column: pd.Series(dtype=object) for column in BUILD_MONTH_CAUSE_COLUMNS})


def cause_table(alerts: pd.DataFrame, returns_by_code: pd.DataFrame) -> pd.DataFrame:
    """Per flagged product x build month of `alerts` (the alert table), one row per failure code with
    returns in that month (BUILD_MONTH_CAUSE_COLUMNS), largest excess first within each month.

    `returns_by_code` has columns product, build_month, failure_code, returns (returns_by_build_month_and_code).
    """
    frames = []
    codes_of = rows_by_product(returns_by_code)
    for product, flagged in alerts[alerts["is_flagged"]].groupby("product", sort=True):
        rows = codes_of[product]
        in_baseline = rows[~rows["build_month"].isin(set(flagged["build_month"]))]
        by_code = in_baseline.groupby("failure_code")["returns"].sum()
        total = float(by_code.sum())
        share = (by_code / total) if total > 0 else by_code * 0.0
        for month in flagged.itertuples(index=False):
            observed = rows[rows["build_month"] == month.build_month].groupby("failure_code")["returns"].sum()
            if not len(observed):
                continue
            o = observed.to_numpy(dtype=float)
            s = share.reindex(observed.index, fill_value=0.0).to_numpy(dtype=float)
            e = float(month.window_expected_returns) * s
            excess = np.clip(o - e, 0.0, None)
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio = np.where(e > 0, o / np.where(e > 0, e, 1.0), np.nan)
            frames.append(pd.DataFrame({
                "product": product,
                "build_month": month.build_month,
                "failure_code": observed.index.astype(str),
                "observed_returns": o,
                "expected_returns": e,
                "ratio": ratio,
                "p_value": poisson_excess_p_value(o, e),
                "excess_returns": excess,
                "share_of_excess": excess / excess.sum() if excess.sum() > 0 else np.full(len(o), np.nan),
                "baseline_share": s,
            }))
    if not frames:
        return _empty_causes()
    table = pd.concat(frames, ignore_index=True)
    return table.sort_values(
        ["product", "build_month", "excess_returns", "failure_code"], ascending=[True, True, False, True],
        kind="stable", ignore_index=True,
    )[list(BUILD_MONTH_CAUSE_COLUMNS)]


def concentrated_codes(alerts: pd.DataFrame, returns_by_code: pd.DataFrame) -> dict[tuple[str, str], str]:
    """(product, failure code) -> "failure code X: N of its M returns are in flagged build month(s) ...", for each code with at least CONCENTRATED_SHARE of its returns
    (and at least MIN_CONCENTRATED_RETURNS) in its product's flagged build months."""
    flagged = alerts[alerts["is_flagged"]]
    months_of = {product: set(rows["build_month"]) for product, rows in flagged.groupby("product", sort=False)}
    found = {}
    # only a product with flagged months can have a code concentrated in them: the others are not read
    candidates = returns_by_code[returns_by_code["product"].isin(set(months_of))]
    for (product, code), rows in candidates.groupby(["product", "failure_code"], sort=True):
        months = months_of[product]
        in_flagged = rows[rows["build_month"].isin(months)]
        n, m = int(in_flagged["returns"].sum()), int(rows["returns"].sum())
        if n >= MIN_CONCENTRATED_RETURNS and n >= CONCENTRATED_SHARE * m:
            where = ", ".join(_month(b) for b in sorted(set(in_flagged["build_month"])))
            found[(str(product), str(code))] = (
                f"failure code {code}: {n:,} of its {m:,} returns are in flagged build month(s) {where}"
            )
    return found


# -- the stage -----------------------------------------------------------------------------------------


def find_bad_build_months(
    fit_returns: pd.DataFrame,
    fit_suspensions: pd.DataFrame,
    published: Mapping[str, FitResult],
    settings: AlertSettings,
    life_model: LifeModelSettings,
    returns_by_code: pd.DataFrame | None = None,
    workers: int = 1,
) -> BuildMonthAlerts:
    """Judge every build month of every product that has a published fit in `published` (products
    without one are not judged); with `returns_by_code` (returns_by_build_month_and_code) also point each
    flagged month at its failure codes. Never raises for one product's data. `workers` > 1: the products
    are judged in that many processes (stages.parallel.map_products; the same result: each product's
    CUSUM threshold has its own fixed seed)."""
    frames, baselines, notes = [], {}, []
    returns_of, suspensions_of = rows_by_product(fit_returns), rows_by_product(fit_suspensions)
    judged = sorted(published.items())
    results = map_products(
        _judge_product,
        [(product, returns_of[product], suspensions_of[product], fit, settings, life_model) for product, fit in judged],
        workers,
    )
    for (product, _), (table, baseline) in zip(judged, results):
        frames.append(table.assign(product=product))
        baselines[product] = baseline
        if baseline.note:
            notes.append(f"product {product}: {baseline.note}")
    table = (
        pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=list(BUILD_MONTH_ALERT_COLUMNS))
    )[list(BUILD_MONTH_ALERT_COLUMNS)]
    table["is_flagged"] = table["is_flagged"].astype(bool)
    table["early_life_months"] = table["early_life_months"].astype(np.int64)
    table["units"] = table["units"].astype(np.int64)
    causes, concentrated = _empty_causes(), {}
    if returns_by_code is not None:
        causes, concentrated = cause_table(table, returns_by_code), concentrated_codes(table, returns_by_code)
    top = causes.drop_duplicates(["product", "build_month"])  # sorted by excess: the first row is the top code
    top_by_month = {(row.product, row.build_month): row for row in top.itertuples(index=False)}
    warnings = [
        _warning(row, life_model.confidence_level, top_by_month.get((row.product, row.build_month)))
        for row in table[table["is_flagged"]].itertuples(index=False)
    ]
    return BuildMonthAlerts(
        table=table, baselines=baselines,
        warnings=(*warnings, *(f"product {product}, {text}{_CONCENTRATED_SUFFIX}" for (product, _), text in concentrated.items()), *notes),
        causes=causes, concentrated_codes=concentrated,
    )


_CONCENTRATED_SUFFIX = (
    ": a defect confined to those months rather than a life of the whole product (see build_month_causes.parquet)"
)


def alert_build_months(
    shaped_fit_returns: pd.DataFrame,
    shaped_fit_suspensions: pd.DataFrame,
    lives: FittedLives,
    settings: AlertSettings,
    life_model: LifeModelSettings,
    returns_by_code: pd.DataFrame | None = None,
    workers: int = 1,
) -> BuildMonthAlerts:
    """The stage as the run calls it: every product with a published fit, starting from that fit; flagged
    months pointed at their failure codes when `returns_by_code` is given; `workers` as find_bad_build_months."""
    published = {
        product: outcome.fit
        for product, outcome in lives.products.items()
        if outcome.status in PUBLISHED_STATUSES and outcome.fit is not None
    }
    return find_bad_build_months(
        shaped_fit_returns, shaped_fit_suspensions, published, settings, life_model, returns_by_code, workers
    )


def _judge_product(
    product: str,
    returns: pd.DataFrame,
    suspensions: pd.DataFrame,
    published: FitResult,
    settings: AlertSettings,
    life_model: LifeModelSettings,
) -> tuple[pd.DataFrame, ProductBaseline]:
    baseline, excluded, note = published, frozenset(), ""
    fitter = Fitter("weibull", confidence_level=life_model.confidence_level, min_returns=life_model.min_returns)
    fixed = {"shape": published.shape} if "shape" in published.fixed else None
    rounds = 0
    while True:
        rounds += 1
        table = score_build_months(returns, suspensions, baseline, settings, life_model.confidence_level)
        flagged = frozenset(table.loc[table["is_flagged"], "build_month"])
        if flagged == excluded:
            break
        if rounds == MAX_ROUNDS:
            note = (
                f"the set of flagged build months did not settle within {MAX_ROUNDS} rounds of refitting the"
                " baseline; the last round's flags are shown"
            )
            break
        kept_returns = returns[~returns["build_month"].isin(flagged)]
        kept_suspensions = suspensions[~suspensions["build_month"].isin(flagged)]
        data = life_data_by_product(kept_returns, kept_suspensions).get(product)
        try:
            if data is None:
                raise FitError("no data left once the flagged build months are set aside")
            refit = fitter.fit(data, fixed=fixed)
        except FitError as error:
            note = (
                "the baseline could not be refitted without the flagged build months"
                f" ({', '.join(_month(m) for m in sorted(flagged))}): {error}; the months were judged against the"
                " previous baseline"
            )
            break
        baseline, excluded = refit, flagged
    return table, ProductBaseline(product, baseline, tuple(sorted(excluded)), rounds, note)


def _month(value: object) -> str:
    return value.strftime("%Y-%m") if hasattr(value, "strftime") else str(value)


def _warning(row, confidence_level: float, top=None) -> str:  # type: ignore[no-untyped-def]
    """One sentence for engineers about one flagged build month (with its top failure code when known)."""
    parts = []
    for view, words in (("early", f"in the first {row.early_life_months} months in service"),
                        ("window", "over the whole observation window")):
        observed = getattr(row, f"{view}_observed_returns")
        expected = getattr(row, f"{view}_expected_returns")
        ratio = getattr(row, f"{view}_ratio")
        if not math.isfinite(ratio):
            continue
        parts.append(
            f"{observed:,.0f} returns {words} against {expected:,.1f} expected (ratio {ratio:.2f},"
            f" {confidence_level:.0%} interval {getattr(row, f'{view}_ratio_lower'):.2f} to"
            f" {getattr(row, f'{view}_ratio_upper'):.2f})"
        )
    if math.isfinite(row.hazard_ratio):
        parts.append(
            f"its own scale gives {row.hazard_ratio:.2f} times the product's hazard ({confidence_level:.0%}"
            f" interval {row.hazard_ratio_lower:.2f} to {row.hazard_ratio_upper:.2f})"
        )
    return (
        f"product {row.product} build month {_month(row.build_month)} flagged ({row.reason}; q = {row.month_q_value:.2g}): "
        + ", ".join(parts)
        + _top_cause(top)
        + "; a statistical signal for engineers to review, not a finding"
    )


def _top_cause(top) -> str:  # type: ignore[no-untyped-def]
    """The clause naming a flagged month's top failure code (empty when no code returns above its share)."""
    if top is None or not math.isfinite(top.share_of_excess):
        return ""
    expected = (
        f"against {top.expected_returns:,.1f} expected from its baseline share" if top.expected_returns > 0
        else "where none were expected (no return of the code in the unflagged build months)"
    )
    return (
        f"; top failure code {top.failure_code}: {top.observed_returns:,.0f} returns {expected},"
        f" {top.share_of_excess:.0%} of the month's excess"
    )
