"""Command line of the pipeline: `warranty-forecast run | backtest | demo-data | bench` (also `python -m warranty_forecast`).

Logging is configured here only (stderr, one line per record: control characters in messages are
escaped). Known errors map to the exit codes of `warranty_forecast.exit_codes` with one clear log
line; anything else is logged with its traceback and exits 1. SIGINT and SIGTERM stop the run through
an exception, so every clean-up runs, and exit 128 + the signal number.

`run` checks and locks the output root before computing anything (see
`warranty_forecast.outputs.run_folders.lock_output_root`) and holds the lock until the run is published in
its own folder, recorded in the history database and `latest` points where it should.
"""

from __future__ import annotations

import argparse
import datetime as dt
import logging
import signal
import sys
from contextlib import contextmanager
from pathlib import Path
from types import FrameType
from typing import Iterator, Sequence

from warranty_forecast import __version__, exit_codes
from warranty_forecast.config import ENGINES, load_config, parse_date
from warranty_forecast.outputs.safe_text import one_line
from warranty_forecast.errors import (
    AlreadyRunningError,
    ConfigError,
    ContractError,
    InputUnreadableError,
    OutputError,
    PipelineError,
    QuarantineCeilingError,
)

log = logging.getLogger("warranty_forecast")

DEFAULT_OUT = Path("reports")

_EXIT_CODE_BY_ERROR: tuple[tuple[type[PipelineError], int], ...] = (
    (ConfigError, exit_codes.BAD_ARGUMENTS),
    (InputUnreadableError, exit_codes.INPUT_UNREADABLE),
    (ContractError, exit_codes.INPUT_CONTRACT),
    (OutputError, exit_codes.OUTPUT_FAILED),
    (QuarantineCeilingError, exit_codes.TOO_MANY_QUARANTINED),
    (AlreadyRunningError, exit_codes.ALREADY_RUNNING),
)

# What each constant of exit_codes means, for --help; the epilog lists the module's constants in
# order of value (a constant missing here still shows, by its name; tests/test_cli.py checks none is).
EXIT_CODE_HELP: dict[str, str] = {
    "SUCCESS": "success (warnings are in the log, the manifest and the report)",
    "UNEXPECTED_ERROR": "unexpected error (a bug or the environment): the log has the traceback",
    "BAD_ARGUMENTS": "bad command-line arguments or configuration file",
    "INPUT_UNREADABLE": "an input file is missing, unreadable, or not .csv/.parquet",
    "INPUT_CONTRACT": "an input breaks the contract as a whole (missing column, nothing usable)",
    "OUTPUT_FAILED": "the outputs could not be written, or --out is a root this tool must not use",
    "TOO_MANY_QUARANTINED": "an extract has more quarantined rows than the configured ceiling",
    "ALREADY_RUNNING": "another run holds the lock on the same output root",
    "INTERRUPTED_BASE": "stopped by signal N (130 SIGINT, 143 SIGTERM); outputs unchanged unless already published",
}

_STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


def exit_codes_epilog() -> str:
    """The exit-code table of --help, generated from the constants of `warranty_forecast.exit_codes`."""
    constants = sorted(
        (value, name)
        for name, value in vars(exit_codes).items()
        if name.isupper() and isinstance(value, int) and not isinstance(value, bool)
    )
    lines = ["exit codes:"]
    for value, name in constants:
        label = f"{value}+N" if name.endswith("_BASE") else str(value)  # a base: the code is base + N
        lines.append(f"  {label:<6} {EXIT_CODE_HELP.get(name, name.lower().replace('_', ' '))}")
    return "\n".join(lines)


class _ArgumentParser(argparse.ArgumentParser):
    """argparse that takes no abbreviated options and exits with BAD_ARGUMENTS (2) and one line on stderr."""

    def __init__(self, *args, **kwargs) -> None:  # type: ignore[no-untyped-def]
        kwargs["allow_abbrev"] = False
        super().__init__(*args, **kwargs)

    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        self.exit(exit_codes.BAD_ARGUMENTS, f"{self.prog}: error: {message}\n")


def _add_verbose(parser: argparse.ArgumentParser, *, after_command: bool) -> None:
    # after the command the default is SUPPRESS, so a subcommand never resets a -v given before it
    parser.add_argument(
        "-v",
        "--verbose",
        action="store_true",
        default=argparse.SUPPRESS if after_command else False,
        help="log debug detail (before or after the command)",
    )


def build_parser() -> argparse.ArgumentParser:
    epilog = exit_codes_epilog()
    parser = _ArgumentParser(
        prog="warranty-forecast",
        description="Nightly warranty-returns forecast: validate extracts, fit a Weibull life model, "
        "project returns and the reserve.",
        epilog=epilog,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    _add_verbose(parser, after_command=False)
    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_ArgumentParser)

    run = commands.add_parser(
        "run",
        help="run the nightly job on a shipments and a claims extract",
        description="Run the nightly job. The output folder is checked and locked before any computing.",
        epilog=epilog,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    _add_verbose(run, after_command=True)
    run.add_argument("--shipments", type=Path, required=True, help="shipments extract (.csv or .parquet)")
    run.add_argument("--claims", type=Path, required=True, help="claims extract (.csv or .parquet)")
    run.add_argument("--config", type=Path, default=None, help="TOML settings (see README: Configuration)")
    run.add_argument(
        "--as-of", dest="as_of", default=None, help="as-of date YYYY-MM-DD, not after today (default: the newest valid claim_date or ship_date)"
    )
    run.add_argument(
        "--no-charts", dest="draw_charts", action="store_false",
        help="write the tables, report and manifest without the PNG charts (faster)",
    )
    run.add_argument(
        "--engine", choices=ENGINES, default=None,
        help="the engine of the shaping stage: duckdb (default, or [run] engine of --config) or spark (needs the"
        " extra .[spark]; see README: Running the shaping on Spark)",
    )
    run.add_argument(
        "--spark-master", dest="spark_master", default=None,
        help="Spark master URL for --engine spark (default: [run] spark_master, else $WARRANTY_FORECAST_SPARK_MASTER,"
        " else local[2]; a"
        " Spark Connect address is taken from $SPARK_REMOTE)",
    )
    run.add_argument(
        "--out",
        type=Path,
        default=DEFAULT_OUT,
        help=f"output root (default {DEFAULT_OUT}): each run publishes into <root>/runs/<run id>/, <root>/latest"
        " points at the newest, <root>/history.duckdb holds every run's tables",
    )
    run.add_argument(
        "--reason", default=None,
        help="why an as-of date that already has a published run is run again (recorded in the history with"
        " what changed)",
    )

    backtest = commands.add_parser(
        "backtest",
        help="rerun the job at earlier month ends and compare its forecasts with the returns that came",
        description="Backtest: rerun the nightly job (no charts) with the as-of date moved back month by month,"
        " compare each forecast of the next --horizon months with the counted returns that came, beside a chain"
        " ladder with Mack's standard error; writes backtest.parquet, backtest_by_month.parquet, backtest.png"
        " and prints a table. The output folder is checked and locked before any computing.",
        epilog=epilog,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    _add_verbose(backtest, after_command=True)
    backtest.add_argument("--shipments", type=Path, required=True, help="shipments extract (.csv or .parquet)")
    backtest.add_argument("--claims", type=Path, required=True, help="claims extract (.csv or .parquet)")
    backtest.add_argument("--config", type=Path, default=None, help="TOML settings (see README: Configuration)")
    backtest.add_argument("--out", type=Path, required=True, help="output folder for the backtest's files")
    backtest.add_argument(
        "--origins", type=int, default=12, help="number of origins, one per month end, newest last (default 12)"
    )
    backtest.add_argument(
        "--horizon", type=int, default=12,
        help="months forecast after each origin (default 12); the newest origin is the latest whole month less this",
    )

    bench = commands.add_parser(
        "bench",
        add_help=False,  # -h and every other option go on to the benchmark's own parser
        help="benchmark the grouped fit against per-unit fits (its options: warranty-forecast bench -h)",
    )
    _add_verbose(bench, after_command=True)

    demo = commands.add_parser("demo-data", help="write the seeded demo extracts")
    _add_verbose(demo, after_command=True)
    demo.add_argument("--out", type=Path, default=Path("data_demo"), help="folder to write (default data_demo)")
    demo.add_argument("--seed", type=int, default=20261130, help="random seed (default 20261130)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point; returns the process exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    arguments, rest = parser.parse_known_args(argv)
    if rest and arguments.command != "bench":
        parser.error(f"unrecognized arguments: {' '.join(rest)}")
    configure_logging(verbose=arguments.verbose)
    stop = _StopOnSignal()
    try:
        with stop.installed():
            code = _dispatch(arguments, rest)
    except _Stopped:
        pass
    except PipelineError as error:
        if stop.signum is None:
            return _exit_code_of(error)
        log.debug("after the signal the run ended with: %s", error)
    except Exception as error:  # noqa: BLE001 - the scheduler needs a code, the log needs the traceback
        if stop.signum is None:
            log.exception("unexpected error")
            return exit_codes.UNEXPECTED_ERROR
        # a library may turn the handler's exception into its own (DuckDB: "Query interrupted")
        log.debug("after the signal the run ended with: %r", error)
    if stop.signum is not None:
        return stop.report()
    return code


def _dispatch(arguments: argparse.Namespace, rest: list[str]) -> int:
    if arguments.command == "run":
        return _run(arguments)
    if arguments.command == "backtest":
        return _backtest(arguments)
    if arguments.command == "bench":
        from warranty_forecast.tools.bench import main as bench_main

        return bench_main(rest)
    return _demo_data(arguments)


def _exit_code_of(error: PipelineError) -> int:
    for error_type, code in _EXIT_CODE_BY_ERROR:
        if isinstance(error, error_type):
            log.error("%s", error)
            return code
    log.error("unexpected pipeline error", exc_info=error)
    return exit_codes.UNEXPECTED_ERROR


class OneLineFormatter(logging.Formatter):
    """A Formatter whose records are one line each: control characters in the message are escaped.

    Escaped as `safe_text.one_line` does: \\n, \\r, \\t, the other C0 and C1 controls and DEL, the Unicode
    line and paragraph separators and bidirectional overrides. Text from the data (a product name holding
    a newline) therefore cannot start a forged log line. A traceback keeps its lines.
    """

    def formatMessage(self, record: logging.LogRecord) -> str:  # noqa: N802 - logging's name
        return one_line(super().formatMessage(record))


class ScheduledFormatter(OneLineFormatter):
    """One line per record for a scheduler's log: ISO 8601 local time with its UTC offset (the zone), level,
    logger, message; e.g. `2026-12-03T07:05:12.345+01:00 INFO warranty_forecast.run: stage fit ...`."""

    def __init__(self) -> None:
        super().__init__("%(asctime)s %(levelname)s %(name)s: %(message)s")

    def formatTime(self, record: logging.LogRecord, datefmt: str | None = None) -> str:  # noqa: N802
        return dt.datetime.fromtimestamp(record.created).astimezone().isoformat(timespec="milliseconds")


class TerminalFormatter(OneLineFormatter):
    """Stage-by-stage progress for a person at a terminal: the time of day, then the message (warnings and
    errors named as such); still one line per record."""

    def __init__(self) -> None:
        super().__init__("%(asctime)s %(message)s", datefmt="%H:%M:%S")

    def formatMessage(self, record: logging.LogRecord) -> str:  # noqa: N802
        text = super().formatMessage(record)
        if record.levelno >= logging.WARNING:
            time_of_day, _, message = text.partition(" ")
            text = f"{time_of_day} {record.levelname}: {message}"
        return text


def configure_logging(*, verbose: bool, stream=None, interactive: bool | None = None) -> None:  # type: ignore[no-untyped-def]
    """Log to stderr (or `stream`), one line per record, for the whole process (the only place that
    configures logging). On a terminal (`interactive`, default: the stream is a TTY) the lines are short
    stage-by-stage progress; otherwise (a scheduled run) each line carries its timestamp with the UTC
    offset of the zone it was written in."""
    stream = sys.stderr if stream is None else stream
    if interactive is None:
        is_tty = getattr(stream, "isatty", None)
        interactive = bool(is_tty()) if callable(is_tty) else False
    handler = logging.StreamHandler(stream)
    handler.setFormatter(TerminalFormatter() if interactive else ScheduledFormatter())
    logging.basicConfig(level=logging.DEBUG if verbose else logging.INFO, handlers=[handler], force=True)
    logging.getLogger("matplotlib").setLevel(logging.WARNING)


class _Stopped(BaseException):
    """Raised by the SIGINT/SIGTERM handler; a BaseException so that no `except Exception` swallows it."""


class _StopOnSignal:
    """SIGINT and SIGTERM stop the run by raising _Stopped, so that every finally-block cleans up.

    The signal is remembered (`signum`), because a library may replace the exception by its own on
    the way up. Only the first signal raises; a repeat during the clean-up is ignored (SIGKILL still
    works, and the next run removes what a killed run leaves).
    """

    def __init__(self) -> None:
        self.signum: int | None = None

    def _handle(self, signum: int, _frame: FrameType | None) -> None:
        if self.signum is not None:
            return
        self.signum = signum
        raise _Stopped(signum)

    @contextmanager
    def installed(self) -> Iterator[None]:
        previous = {}
        try:
            for number in _STOP_SIGNALS:
                previous[number] = signal.signal(number, self._handle)
        except ValueError:  # not the main thread: signals stay as they were
            pass
        try:
            yield
        finally:
            for number, handler in previous.items():
                signal.signal(number, handler)

    def report(self) -> int:
        """Log the one line of a stopped run and return its exit code, 128 + the signal number."""
        assert self.signum is not None
        code = exit_codes.INTERRUPTED_BASE + self.signum
        log.error(
            "stopped by %s (exit %d) and cleaned up: the output folder holds the previous outputs, or this"
            " run's if publishing had already finished",
            signal.Signals(self.signum).name,
            code,
        )
        return code


def _run(arguments: argparse.Namespace) -> int:
    from warranty_forecast.outputs.run_folders import lock_output_root
    from warranty_forecast.run import run_nightly

    as_of = parse_date(arguments.as_of, "--as-of") if arguments.as_of else None
    config = load_config(
        shipments_path=arguments.shipments,
        claims_path=arguments.claims,
        out_dir=arguments.out,
        as_of_date=as_of,
        config_path=arguments.config,
        draw_charts=arguments.draw_charts,
        engine=arguments.engine,
        spark_master=arguments.spark_master,
    )
    with lock_output_root(config.out_dir) as root:
        log.debug("output root %s checked and locked", root)
        result = run_nightly(config, reason=arguments.reason)
    log.info(
        "done: %s %s (as of %s, %d warning(s))",
        "outputs in" if result.changed else "changed nothing; the outputs stay in",
        result.run_folder or result.out_dir, result.as_of_date, len(result.warnings),
    )
    return exit_codes.SUCCESS


def _backtest(arguments: argparse.Namespace) -> int:
    from warranty_forecast.tools.backtest_origins import backtest_command, check_origin_counts, format_table

    check_origin_counts(arguments.origins, arguments.horizon)
    result = backtest_command(
        shipments_path=arguments.shipments,
        claims_path=arguments.claims,
        out_dir=arguments.out,
        config_path=arguments.config,
        origins=arguments.origins,
        horizon=arguments.horizon,
    )
    print(format_table(result))
    log.info("done: backtest of %d origin(s) in %s in %.1f s", len(result.origins), arguments.out, result.seconds)
    return exit_codes.SUCCESS


def _demo_data(arguments: argparse.Namespace) -> int:
    from warranty_forecast.tools.demo_files import write_demo_data

    demo = write_demo_data(arguments.out, seed=arguments.seed)
    log.info(
        "demo data written to %s: %d shipment rows, %d claim rows (as of %s)",
        arguments.out,
        len(demo.shipments),
        len(demo.claims),
        demo.as_of_date,
    )
    return exit_codes.SUCCESS
