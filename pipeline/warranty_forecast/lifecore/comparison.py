"""Comparison of two families fitted to the same data by AIC (the Weibull against the lognormal)."""

from __future__ import annotations

from dataclasses import dataclass

from warranty_forecast.lifecore.result import aic


@dataclass(frozen=True)
class FamilyComparison:
    """AIC comparison of a Weibull and a lognormal fit of the same data (both 2 parameters).

    delta_aic = weibull_aic - lognormal_aic; positive favours the lognormal.
    """

    weibull_aic: float
    lognormal_aic: float
    delta_aic: float
    threshold: float
    prefers_lognormal: bool
    message: str


def compare_families(
    weibull_log_likelihood: float, lognormal_log_likelihood: float, threshold: float = 10.0
) -> FamilyComparison:
    """Compare the Weibull and lognormal families by AIC (two parameters each).

    The lognormal is preferred only when the Weibull AIC exceeds the lognormal AIC by more than
    `threshold`; otherwise the Weibull (the pipeline's default family) is kept. The default 10 is a
    rule of thumb: Burnham & Anderson (2002, Model Selection and Multimodel Inference) describe an
    AIC difference above about 10 as essentially no support for the worse model (quoted from
    memory, not checked against the book). Both log-likelihoods must come from the same data in the
    same age unit.
    """
    if not threshold >= 0.0:
        raise ValueError(f"threshold must be >= 0, got {threshold!r}")
    weibull_aic = aic(weibull_log_likelihood, 2)
    lognormal_aic = aic(lognormal_log_likelihood, 2)
    delta = weibull_aic - lognormal_aic
    prefers = bool(delta > threshold)
    figures = f"AIC Weibull {weibull_aic:.1f}, lognormal {lognormal_aic:.1f}, difference {delta:+.1f}"
    if prefers:
        message = f"Lognormal preferred ({figures}, above the threshold {threshold:g})."
    elif delta < -threshold:
        message = f"Weibull preferred ({figures})."
    else:
        message = f"No clear preference, Weibull kept ({figures}, within +/-{threshold:g})."
    return FamilyComparison(weibull_aic, lognormal_aic, delta, float(threshold), prefers, message)
