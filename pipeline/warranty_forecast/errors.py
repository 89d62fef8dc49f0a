"""Typed errors the command maps to exit codes (see `warranty_forecast.exit_codes`)."""

from __future__ import annotations


class PipelineError(Exception):
    """Base class of the errors the command reports in one line and maps to an exit code."""


class ConfigError(PipelineError):
    """The configuration file or a command-line value is invalid."""


class InputUnreadableError(PipelineError):
    """An input file is missing, unreadable, or of an unsupported type."""


class ContractError(PipelineError):
    """An input file breaks the input contract as a whole (not a single bad row)."""


class OutputError(PipelineError):
    """The outputs could not be written."""


class FitError(PipelineError):
    """A life-model fit failed; the message says why and what to try."""


class QuarantineCeilingError(PipelineError):
    """An extract has more quarantined rows than the configured ceiling allows; nothing is published."""


class AlreadyRunningError(PipelineError):
    """Another run holds the lock on the same output folder."""
