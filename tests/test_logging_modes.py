"""Log lines for the two kinds of run: a scheduled run (no terminal) writes one line per record with an ISO
8601 timestamp and the UTC offset of its zone; an interactive run on a terminal shows short stage-by-stage
progress. Both stay one line per record (control characters escaped). Expected formats: common practice,
no source (ISO 8601 for the timestamp)."""

from __future__ import annotations

import io
import logging
import re
import time

import pytest

from warranty_forecast.cli import configure_logging


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


@pytest.fixture
def paris(monkeypatch):
    monkeypatch.setenv("TZ", "Europe/Paris")
    time.tzset()
    yield
    monkeypatch.undo()
    time.tzset()


def test_a_scheduled_run_logs_iso_timestamps_with_the_zone_offset(paris):
    stream = io.StringIO()  # not a terminal
    configure_logging(verbose=False, stream=stream)
    logging.getLogger("warranty_forecast.run").info("stage %-9s %s in %.2f s", "fit", "3 products", 0.99)
    logging.getLogger("warranty_forecast.run").warning("product %s: no life model", "A\nB")
    first, second = stream.getvalue().splitlines()
    # Paris in winter is UTC+01:00 (the test's dates are the run's own clock: any date from November to March)
    stamp = r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}\.\d{3}[+-]\d{2}:\d{2}"
    assert re.fullmatch(stamp + r" INFO warranty_forecast\.run: stage fit       3 products in 0\.99 s", first)
    assert re.fullmatch(stamp + r" WARNING warranty_forecast\.run: product A\\nB: no life model", second)
    offset = first.split(" ", 1)[0][-6:]
    assert offset == time.strftime("%z")[:3] + ":" + time.strftime("%z")[3:]


def test_an_interactive_run_shows_short_stage_progress():
    stream = Terminal()
    configure_logging(verbose=False, stream=stream)
    logging.getLogger("warranty_forecast.run").info("stage %-9s %s in %.2f s", "fit", "3 products", 0.99)
    logging.getLogger("warranty_forecast.run").warning("product %s: no life model", "A\nB")
    first, second = stream.getvalue().splitlines()
    assert re.fullmatch(r"\d{2}:\d{2}:\d{2} stage fit       3 products in 0\.99 s", first)
    assert re.fullmatch(r"\d{2}:\d{2}:\d{2} WARNING: product A\\nB: no life model", second)


def test_the_choice_follows_the_stream_unless_told():
    plain = io.StringIO()
    configure_logging(verbose=False, stream=plain, interactive=True)
    logging.getLogger("warranty_forecast").info("hello")
    assert re.fullmatch(r"\d{2}:\d{2}:\d{2} hello\n", plain.getvalue())
    terminal = Terminal()
    configure_logging(verbose=False, stream=terminal, interactive=False)
    logging.getLogger("warranty_forecast").info("hello")
    assert terminal.getvalue().rstrip().endswith("INFO warranty_forecast: hello")
