"""Typed errors of the life-model core; all are `warranty_forecast.errors.FitError` (exit-code mapping)."""

from __future__ import annotations

from warranty_forecast.errors import FitError


class InsufficientDataError(FitError):
    """Too few returns, or no suspensions / exposure, to fit a life model."""


class FitNotConvergedError(FitError):
    """The fit did not reach a trustworthy maximum; the message says why and what to try."""


class UnidentifiableError(FitNotConvergedError):
    """The likelihood is (near-)flat: these data cannot identify the parameters together.

    Raised instead of the plain FitNotConvergedError when the end point's checks find a flat or
    saddle likelihood, ill-conditioned information, a runaway location far beyond the data, or a
    shape (dispersion) running off to its plausible limits. The usual remedy is a fit with the shape
    fixed from engineering experience (`Fitter.fit(data, fixed={"shape": ...})`).
    """


class ProfileLikelihoodError(FitError):
    """A profile likelihood could not be maximised reliably, so no likelihood-ratio bound is given."""
