"""How the command behaves under a scheduler: preflight of the output folder, the lock, signals and
what an interrupted run leaves behind (common practice, no source).

Most tests replace the computing (run.run_nightly) by a stand-in that publishes a small table, so
they show what happens around it without the demo run's seconds; the SIGTERM test runs the real
command on the demo data in a subprocess.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

import warranty_forecast.outputs.publish as publish  # noqa: E402
import warranty_forecast.run as run_module  # noqa: E402
from warranty_forecast import exit_codes  # noqa: E402
from warranty_forecast.cli import main  # noqa: E402
from warranty_forecast.errors import ContractError  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SHIPMENTS = ROOT / "data_demo" / "shipments.parquet"
CLAIMS = ROOT / "data_demo" / "claims.csv"


def run_cli(out: Path, *extra: str) -> int:
    return main(["run", "--shipments", str(SHIPMENTS), "--claims", str(CLAIMS), "--out", str(out), *extra])


def hidden_folders(parent: Path) -> list[str]:
    """Leftovers beside an output folder (lock files, which stay by design, are not leftovers)."""
    return sorted(p.name for p in parent.iterdir() if p.name.startswith(".") and p.is_dir())


def previous_outputs(out: Path, generation: int = 1) -> None:
    publish.publish_outputs(out, {"old": pd.DataFrame({"a": [1]})}, {}, {"old.md": "old"}, {"generation": generation})


def generation(out: Path) -> int:
    return json.loads((out / "manifest.json").read_text())["generation"]


class StandIn:
    """Replaces run.run_nightly: records calls, optionally does something, then publishes a small table."""

    def __init__(self, action=None) -> None:
        self.calls = 0
        self.action = action

    def __call__(self, config):
        self.calls += 1
        if self.action is not None:
            self.action(config)
        publish.publish_outputs(config.out_dir, {"new": pd.DataFrame({"a": [2]})}, {}, {}, {"generation": 2})
        return run_module.RunResult(config.out_dir, dt.date(2026, 11, 30), {}, ())


@pytest.fixture
def stand_in(monkeypatch) -> StandIn:
    fake = StandIn()
    monkeypatch.setattr(run_module, "run_nightly", fake)
    return fake


# --- preflight: found before the run's stages ---------------------------------------------------


def test_foreign_folder_is_refused_before_any_computing(tmp_path, stand_in, capsys):
    out = tmp_path / "site"
    out.mkdir()
    (out / "manifest.json").write_text('{"name": "website"}')
    (out / "index.html").write_text("<p>keep</p>")
    assert run_cli(out) == exit_codes.OUTPUT_FAILED
    assert stand_in.calls == 0
    assert sorted(p.name for p in out.iterdir()) == ["index.html", "manifest.json"]
    errors = [line for line in capsys.readouterr().err.splitlines() if "ERROR" in line]
    assert len(errors) == 1 and str(out) in errors[0] and "no producer marker" in errors[0]


@pytest.mark.parametrize("case", ["out_is_a_file", "out_under_a_file"])
def test_output_path_through_a_file_is_refused_before_any_computing(tmp_path, stand_in, capsys, case):
    a_file = tmp_path / "notes"
    a_file.write_text("keep")
    out = a_file if case == "out_is_a_file" else a_file / "sub" / "out"
    assert run_cli(out) == exit_codes.OUTPUT_FAILED
    assert stand_in.calls == 0
    assert a_file.read_text() == "keep"
    errors = [line for line in capsys.readouterr().err.splitlines() if "ERROR" in line]
    assert len(errors) == 1 and str(a_file) in errors[0] and "is a file" in errors[0]
    assert "Traceback" not in capsys.readouterr().err


def _without_file_permission_override() -> list[str]:
    """A command prefix under which the kernel's file permissions apply (root ignores them otherwise)."""
    if os.geteuid() != 0:
        return []
    setpriv = shutil.which("setpriv")
    if setpriv is None:
        pytest.skip("running as root without setpriv: a read-only folder cannot be made read-only here")
    return [setpriv, "--inh-caps=-all", "--bounding-set=-dac_override,-dac_read_search,-fowner", "--"]


def test_read_only_parent_is_refused_before_any_computing(tmp_path):
    parent = tmp_path / "read-only"
    parent.mkdir()
    parent.chmod(0o555)
    try:
        result = subprocess.run(
            [*_without_file_permission_override(), sys.executable, "-m", "warranty_forecast", "run",
             "--shipments", str(SHIPMENTS), "--claims", str(CLAIMS), "--out", str(parent / "out")],
            capture_output=True, text=True, cwd=ROOT, timeout=120,
        )
    finally:
        parent.chmod(0o755)
    assert result.returncode == exit_codes.OUTPUT_FAILED, result.stderr
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "cannot write in" in lines[0] and str(parent) in lines[0], result.stderr
    assert "stage" not in result.stderr  # found before the first stage
    assert list(parent.iterdir()) == []


# --- the lock ----------------------------------------------------------------------------------

HOLD_THE_LOCK = textwrap.dedent(
    """
    import sys
    from pathlib import Path
    from warranty_forecast.outputs.publish import lock_output_folder
    with lock_output_folder(Path(sys.argv[1])):
        print("locked", flush=True)
        sys.stdin.read()  # hold it until the test closes our stdin
    """
)


def test_second_run_into_the_same_folder_is_refused_at_once(tmp_path, stand_in, capsys):
    out = tmp_path / "out"
    previous_outputs(out)
    holder = subprocess.Popen(
        [sys.executable, "-c", HOLD_THE_LOCK, str(out)], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True
    )
    try:
        assert holder.stdout.readline().strip() == "locked"
        assert run_cli(out) == exit_codes.ALREADY_RUNNING
        assert stand_in.calls == 0
        errors = [line for line in capsys.readouterr().err.splitlines() if "ERROR" in line]
        assert len(errors) == 1 and str(out) in errors[0] and f"held by process {holder.pid}" in errors[0]
        assert generation(out) == 1
    finally:
        holder.stdin.close()
        holder.wait(timeout=30)
    assert run_cli(out) == exit_codes.SUCCESS  # the lock went with the holder; its file stays
    assert stand_in.calls == 1 and generation(out) == 2
    assert (tmp_path / ".out.lock").is_file()


def test_the_lock_is_held_while_the_run_computes(tmp_path, monkeypatch):
    out = tmp_path / "out"
    seen = []

    def second_process_tries(config):
        attempt = subprocess.run([sys.executable, "-c", HOLD_THE_LOCK, str(out)], input="", capture_output=True,
                                 text=True, timeout=60)
        seen.append(attempt.stderr)

    monkeypatch.setattr(run_module, "run_nightly", StandIn(second_process_tries))
    assert run_cli(out) == exit_codes.SUCCESS
    assert "AlreadyRunningError" in seen[0] and str(out) in seen[0]


# --- leftovers of interrupted runs ---------------------------------------------------------------


def test_leftover_incoming_and_previous_folders_are_removed_with_a_log_line(tmp_path, stand_in, capsys):
    out = tmp_path / "out"
    previous_outputs(out)
    for name in (".out.incoming-k3j9x_2a", ".out.previous-0badf00d", ".other.incoming-12345678"):
        (tmp_path / name).mkdir()
        (tmp_path / name / "t.parquet").write_text("half")
    assert run_cli(out) == exit_codes.SUCCESS
    assert hidden_folders(tmp_path) == [".other.incoming-12345678"]  # another folder's: not ours to touch
    err = capsys.readouterr().err
    assert f"removed {tmp_path / '.out.incoming-k3j9x_2a'}, left by an interrupted run" in err
    assert f"removed {tmp_path / '.out.previous-0badf00d'}" in err
    assert generation(out) == 2


CRASH_BETWEEN_THE_RENAMES = textwrap.dedent(
    """
    import os, sys
    from pathlib import Path
    import pandas as pd
    from warranty_forecast.outputs import publish
    publish._exchange_folders = lambda first, second: False  # the two-rename fallback
    publish._move_in = lambda incoming, folder: os._exit(9)  # killed after the first rename
    publish.publish_outputs(Path(sys.argv[1]), {"new": pd.DataFrame({"a": [2]})}, {}, {}, {"generation": 2})
    """
)


def test_next_run_restores_outputs_stranded_by_a_crash_between_the_renames(tmp_path, monkeypatch, capsys):
    out = tmp_path / "out"
    previous_outputs(out)
    crashed = subprocess.run([sys.executable, "-c", CRASH_BETWEEN_THE_RENAMES, str(out)], timeout=60)
    assert crashed.returncode == 9
    assert not out.exists()  # the state the operator found: outputs gone, stranded beside
    stranded = [name for name in hidden_folders(tmp_path) if name.startswith(".out.previous-")]
    assert len(stranded) == 1 and len(hidden_folders(tmp_path)) == 2  # and the new, never moved in

    def fails(config):
        raise ContractError("the next night's claims extract is broken")

    monkeypatch.setattr(run_module, "run_nightly", fails)
    assert run_cli(out) == exit_codes.INPUT_CONTRACT  # even a failing next run puts the outputs back
    assert generation(out) == 1 and sorted(p.name for p in out.iterdir()) == ["manifest.json", "old.md", "old.parquet"]
    assert hidden_folders(tmp_path) == []
    err = capsys.readouterr().err
    assert f"restored {out} from {tmp_path / stranded[0]}" in err
    assert "left by an interrupted run" in err


# --- signals ------------------------------------------------------------------------------------


def _send(signum):
    def action(config):
        os.kill(os.getpid(), signum)
        time.sleep(30)  # the handler interrupts this at once

    return action


class KillingFigure:
    """A figure whose saving is interrupted by a signal: the run is stopped while publishing."""

    def __init__(self, signum) -> None:
        self.signum = signum

    def savefig(self, path, **_kwargs):
        Path(path).write_bytes(b"half a png")
        os.kill(os.getpid(), self.signum)
        time.sleep(30)


@pytest.mark.parametrize(("signum", "code"), [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
@pytest.mark.parametrize("when", ["computing", "publishing"])
def test_signal_stops_the_run_with_128_plus_signal_and_cleans_up(tmp_path, monkeypatch, capsys, signum, code, when):
    out = tmp_path / "out"
    previous_outputs(out)

    def publishing(config):
        publish.publish_outputs(config.out_dir, {"new": pd.DataFrame({"a": [2]})}, {"f": KillingFigure(signum)}, {}, {})

    handler_before = signal.getsignal(signum)
    monkeypatch.setattr(run_module, "run_nightly", StandIn(_send(signum) if when == "computing" else publishing))
    assert exit_codes.INTERRUPTED_BASE + signum == code
    assert run_cli(out) == code
    assert generation(out) == 1 and hidden_folders(tmp_path) == []
    err = capsys.readouterr().err
    assert "Traceback" not in err
    errors = [line for line in err.splitlines() if "ERROR" in line]
    assert len(errors) == 1 and f"stopped by {signal.Signals(signum).name} (exit {code})" in errors[0]
    assert signal.getsignal(signum) == handler_before  # main() puts the handlers back


def test_sigterm_to_a_real_run_exits_143_and_keeps_the_previous_outputs(tmp_path):
    out = tmp_path / "out"
    previous_outputs(out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    process = subprocess.Popen(
        [sys.executable, "-m", "warranty_forecast", "run", "--shipments", str(SHIPMENTS), "--claims", str(CLAIMS),
         "--out", str(out)],
        cwd=ROOT, stderr=subprocess.PIPE, text=True,
    )
    lines = []
    for line in process.stderr:  # wait until the computing has begun
        lines.append(line)
        if "stage shaping" in line:
            break
    process.send_signal(signal.SIGTERM)
    lines.extend(process.stderr)
    assert process.wait(timeout=120) == 143, "".join(lines)
    err = "".join(lines)
    assert "Traceback" not in err and "stopped by SIGTERM (exit 143)" in lines[-1]
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert hidden_folders(tmp_path) == []
