"""Command line of the pipeline: `warranty-forecast run | demo-data | bench` (also `python -m warranty_forecast`).

Logging is configured here only (stderr, one line per stage). Known errors map to the exit codes of
`warranty_forecast.exit_codes` with one clear log line; anything else is logged with its traceback and exits 1.
"""

from __future__ import annotations

import argparse
import logging
import sys
from pathlib import Path
from typing import Sequence

from warranty_forecast import exit_codes
from warranty_forecast.config import load_config, parse_date
from warranty_forecast.errors import (
    ConfigError,
    ContractError,
    InputUnreadableError,
    OutputError,
    PipelineError,
)

log = logging.getLogger("warranty_forecast")

DEFAULT_OUT = Path("reports") / "latest"

_EXIT_CODE_BY_ERROR: tuple[tuple[type[PipelineError], int], ...] = (
    (ConfigError, exit_codes.BAD_ARGUMENTS),
    (InputUnreadableError, exit_codes.INPUT_UNREADABLE),
    (ContractError, exit_codes.INPUT_CONTRACT),
    (OutputError, exit_codes.OUTPUT_FAILED),
)


class _ArgumentParser(argparse.ArgumentParser):
    """argparse that exits with BAD_ARGUMENTS (2) and one line on stderr."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        self.exit(exit_codes.BAD_ARGUMENTS, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _ArgumentParser(
        prog="warranty-forecast",
        description="Nightly warranty-returns forecast: validate extracts, fit a Weibull life model, "
        "project returns and the reserve.",
    )
    parser.add_argument("-v", "--verbose", action="store_true", help="log debug detail")
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_ArgumentParser)

    run = commands.add_parser("run", help="run the nightly job on a shipments and a claims extract")
    run.add_argument("--shipments", type=Path, required=True, help="shipments extract (.csv or .parquet)")
    run.add_argument("--claims", type=Path, required=True, help="claims extract (.csv or .parquet)")
    run.add_argument("--config", type=Path, default=None, help="TOML settings (see README: Configuration)")
    run.add_argument(
        "--as-of", dest="as_of", default=None, help="as-of date YYYY-MM-DD (default: latest valid claim_date)"
    )
    run.add_argument("--out", type=Path, default=DEFAULT_OUT, help=f"output folder (default {DEFAULT_OUT})")

    bench = commands.add_parser(
        "bench", help="benchmark the grouped fit against per-unit fits (options: see python -m warranty_forecast.bench -h)"
    )

    demo = commands.add_parser("demo-data", help="write the seeded demo extracts")
    demo.add_argument("--out", type=Path, default=Path("data_demo"), help="folder to write (default data_demo)")
    demo.add_argument("--seed", type=int, default=20261130, help="random seed (default 20261130)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point; returns the process exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv[:1] == ["bench"]:  # the benchmark has its own options (python -m warranty_forecast.bench -h)
        from warranty_forecast.bench import main as bench_main

        return bench_main(argv[1:])
    parser = build_parser()
    arguments = parser.parse_args(argv)
    logging.basicConfig(
        level=logging.DEBUG if arguments.verbose else logging.INFO,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
        stream=sys.stderr,
        force=True,
    )
    logging.getLogger("matplotlib").setLevel(logging.WARNING)
    try:
        if arguments.command == "run":
            return _run(arguments)
        return _demo_data(arguments)
    except PipelineError as error:
        for error_type, code in _EXIT_CODE_BY_ERROR:
            if isinstance(error, error_type):
                log.error("%s", error)
                return code
        log.exception("unexpected pipeline error")
        return exit_codes.UNEXPECTED_ERROR
    except Exception:  # noqa: BLE001 - the scheduler needs a code, the log needs the traceback
        log.exception("unexpected error")
        return exit_codes.UNEXPECTED_ERROR


def _run(arguments: argparse.Namespace) -> int:
    from warranty_forecast.run import run_nightly

    as_of = parse_date(arguments.as_of, "--as-of") if arguments.as_of else None
    config = load_config(
        shipments_path=arguments.shipments,
        claims_path=arguments.claims,
        out_dir=arguments.out,
        as_of_date=as_of,
        config_path=arguments.config,
    )
    result = run_nightly(config)
    log.info("done: outputs in %s (as of %s, %d warning(s))", result.out_dir, result.as_of_date, len(result.warnings))
    return exit_codes.SUCCESS


def _demo_data(arguments: argparse.Namespace) -> int:
    from warranty_forecast.demo_data import write_demo_data

    demo = write_demo_data(arguments.out, seed=arguments.seed)
    log.info(
        "demo data written to %s: %d shipment rows, %d claim rows (as of %s)",
        arguments.out,
        len(demo.shipments),
        len(demo.claims),
        demo.as_of_date,
    )
    return exit_codes.SUCCESS
