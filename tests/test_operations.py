"""How the command behaves under a scheduler: preflight of the output root, the lock, signals and what an
interrupted run leaves behind (common practice, no source).

The output root's layout is `warranty_forecast.outputs.run_folders`: runs/<run id>/ per published run,
`latest` a link to the newest, history.duckdb, the lock `.<root name>.lock` beside the root.

Most tests replace the computing (run.run_nightly) by a stand-in that publishes a small run the way
run_nightly's last steps do (publish_run, then record_published_runs, then point_latest), so they show
what happens around it without the demo run's seconds; the SIGTERM test runs the real command on the
demo data in a subprocess.
"""

from __future__ import annotations

import datetime as dt
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
import duckdb  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

import warranty_forecast.outputs.publish as publish  # noqa: E402
import warranty_forecast.outputs.run_folders as run_folders  # noqa: E402
import warranty_forecast.run as run_module  # noqa: E402
from warranty_forecast import exit_codes  # noqa: E402
from warranty_forecast.cli import main  # noqa: E402
from warranty_forecast.outputs.history import record_published_runs  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SHIPMENTS = ROOT / "data_demo" / "shipments.parquet"
CLAIMS = ROOT / "data_demo" / "claims.csv"

PREVIOUS_ID = "2026-11-29-aaaaaaaaaaaa"  # the run already published when the test's run starts
NEW_ID = "2026-11-30-bbbbbbbbbbbb"  # the stand-in's run


def run_cli(out: Path, *extra: str) -> int:
    return main(["run", "--shipments", str(SHIPMENTS), "--claims", str(CLAIMS), "--out", str(out), *extra])


def hidden_folders(parent: Path) -> list[str]:
    """Leftovers in a folder (lock files, which stay by design, are not leftovers)."""
    return sorted(p.name for p in parent.iterdir() if p.name.startswith(".") and p.is_dir())


def hidden_entries(parent: Path) -> list[str]:
    """Every hidden entry of a folder: folders, files and links."""
    return sorted(p.name for p in parent.iterdir() if p.name.startswith("."))



def publish_small_run(root: Path, run_id: str, reserve: float, figures=None) -> run_folders.PublishOutcome:
    """Publish a small run under `root` as run_nightly does, without recording it or pointing `latest`."""
    as_of = dt.date.fromisoformat(run_id[:10])
    table = pd.DataFrame({"run_id": [run_id], "as_of_date": [as_of], "product": ["QCP-140"], "reserve": [reserve]})
    manifest = {
        "run_id": run_id, "as_of_date": as_of.isoformat(),
        "finished_utc": dt.datetime.now(dt.timezone.utc).isoformat(timespec="milliseconds"),
    }
    return run_folders.publish_run(root, run_id, {"reserve_by_product": table}, figures or {}, {"report.md": run_id},
                                   manifest)


def publish_and_record(root: Path, run_id: str, reserve: float, figures=None) -> run_folders.PublishOutcome:
    """What run_nightly does once it has computed (run.py): publish, record in the history, point `latest`."""
    outcome = publish_small_run(root, run_id, reserve, figures)
    assert record_published_runs(outcome.root).error is None
    run_folders.point_latest(outcome.root)
    return outcome


def previous_run(out: Path) -> None:
    publish_and_record(out, PREVIOUS_ID, 100.0)


def latest_target(out: Path) -> str:
    return os.readlink(out / "latest")


def run_folder_names(out: Path) -> list[str]:
    return sorted(p.name for p in (out / "runs").iterdir())


def recorded_runs(out: Path) -> list[str]:
    with duckdb.connect(str(out / "history.duckdb"), read_only=True) as con:
        return [row[0] for row in con.execute("select run_id from runs order by as_of_date, run_id").fetchall()]


def snapshot(out: Path) -> dict[str, bytes | str]:
    """Every file's bytes, every link's target and every folder under `out` (links not followed)."""
    seen: dict[str, bytes | str] = {}
    for folder, names, files in os.walk(out):
        for name in names + files:
            path = Path(folder) / name
            key = str(path.relative_to(out))
            if path.is_symlink():
                seen[key] = "-> " + os.readlink(path)
            elif path.is_dir():
                seen[key] = "folder"
            elif path.is_file():
                seen[key] = path.read_bytes()
    return seen


class StandIn:
    """Replaces run.run_nightly: records calls, optionally does something, then publishes a small run the way
    run_nightly does (publish_run, record_published_runs, point_latest)."""

    def __init__(self, action=None, run_id: str = NEW_ID, reserve: float = 200.0, figures=None) -> None:
        self.calls = 0
        self.action = action
        self.run_id = run_id
        self.reserve = reserve
        self.figures = figures
        self.reasons: list[str | None] = []

    def __call__(self, config, reason=None):
        self.calls += 1
        self.reasons.append(reason)
        if self.action is not None:
            self.action(config)
        outcome = publish_and_record(config.out_dir, self.run_id, self.reserve, self.figures)
        return run_module.RunResult(
            outcome.root, dt.date.fromisoformat(self.run_id[:10]), None, (), run_folder=outcome.folder,
            changed=outcome.changed,
        )


@pytest.fixture
def stand_in(monkeypatch) -> StandIn:
    fake = StandIn()
    monkeypatch.setattr(run_module, "run_nightly", fake)
    return fake


# --- preflight: found before the run's stages ---------------------------------------------------


def _foreign_latest(out: Path) -> str:
    (out / "latest").mkdir()
    (out / "latest" / "index.html").write_text("<p>keep</p>")
    return f"{out / 'latest'} is a folder that does not hold only this tool's outputs"


def _website(out: Path) -> str:
    (out / "manifest.json").write_text('{"name": "website"}')
    (out / "index.html").write_text("<p>keep</p>")
    return "a manifest.json this tool did not write at its top"


def _old_single_run_layout(out: Path) -> str:
    publish.publish_outputs(out, {"old": pd.DataFrame({"a": [1]})}, {}, {"old.md": "old"}, {"generation": 1})
    return "the layout of a version before run folders"


@pytest.mark.parametrize("make", [_foreign_latest, _website, _old_single_run_layout])
def test_a_root_that_cannot_take_run_folders_is_refused_before_any_computing(tmp_path, stand_in, capsys, make):
    out = tmp_path / "site"
    out.mkdir()
    words = make(out)
    before = snapshot(out)
    assert run_cli(out) == exit_codes.OUTPUT_FAILED
    assert stand_in.calls == 0
    assert snapshot(out) == before  # nothing was changed: no runs/, no latest, no history
    errors = [line for line in capsys.readouterr().err.splitlines() if "ERROR" in line]
    assert len(errors) == 1 and str(out) in errors[0] and words in errors[0], errors


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
    from warranty_forecast.outputs.run_folders import lock_output_root
    with lock_output_root(Path(sys.argv[1])):
        print("locked", flush=True)
        sys.stdin.read()  # hold it until the test closes our stdin
    """
)


def test_second_run_into_the_same_root_is_refused_at_once(tmp_path, stand_in, capsys):
    out = tmp_path / "out"
    previous_run(out)
    holder = subprocess.Popen(
        [sys.executable, "-c", HOLD_THE_LOCK, str(out)], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True
    )
    try:
        assert holder.stdout.readline().strip() == "locked"
        assert run_cli(out) == exit_codes.ALREADY_RUNNING
        assert stand_in.calls == 0
        errors = [line for line in capsys.readouterr().err.splitlines() if "ERROR" in line]
        assert len(errors) == 1 and str(out) in errors[0] and f"held by process {holder.pid}" in errors[0]
        assert run_folder_names(out) == [PREVIOUS_ID] and latest_target(out) == f"runs/{PREVIOUS_ID}"
    finally:
        holder.stdin.close()
        holder.wait(timeout=30)
    assert run_cli(out) == exit_codes.SUCCESS  # the lock went with the holder; its file stays, beside the root
    assert stand_in.calls == 1 and latest_target(out) == f"runs/{NEW_ID}"
    assert run_folder_names(out) == [PREVIOUS_ID, NEW_ID] and recorded_runs(out) == [PREVIOUS_ID, NEW_ID]
    assert (tmp_path / ".out.lock").is_file() and not (out / ".out.lock").exists()


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


def test_leftover_incoming_folders_and_half_made_links_are_removed_with_a_log_line(tmp_path, stand_in, capsys):
    out = tmp_path / "out"
    previous_run(out)
    incoming = [out / "runs" / f".{NEW_ID}.incoming-0badf00d", out / "runs" / ".2026-11-28-x.incoming-12345678"]
    for folder in incoming:
        folder.mkdir()
        (folder / "reserve_by_product.parquet").write_text("half")
    half_made = out / ".latest.0badf00d"
    os.symlink(f"runs/{PREVIOUS_ID}", half_made)
    (tmp_path / ".other.incoming-12345678").mkdir()  # beside the root: not the root's, not ours to touch
    assert run_cli(out) == exit_codes.SUCCESS
    assert hidden_entries(out / "runs") == [] and hidden_entries(out) == []
    assert hidden_folders(tmp_path) == [".other.incoming-12345678"]
    err = capsys.readouterr().err
    for folder in incoming:
        assert f"removed {folder}, left by an interrupted run" in err
    assert f"removed {half_made}, a link an interrupted run was making" in err
    assert run_folder_names(out) == [PREVIOUS_ID, NEW_ID] and latest_target(out) == f"runs/{NEW_ID}"


def test_outputs_of_a_version_before_run_folders_move_into_runs_and_latest_becomes_a_link(tmp_path, stand_in, capsys):
    out = tmp_path / "out"
    legacy_id = "2026-11-28-dddddddddddd"
    table = pd.DataFrame({"run_id": [legacy_id], "as_of_date": [dt.date(2026, 11, 28)], "product": ["QCP-140"],
                          "reserve": [50.0]})
    publish.publish_outputs(  # what the version before run folders wrote, with --out <root>/latest
        out / "latest", {"reserve_by_product": table}, {}, {"report.md": "old"},
        {"run_id": legacy_id, "as_of_date": "2026-11-28", "finished_utc": "2026-11-28T23:00:00+00:00"},
    )
    (out / ".latest.incoming-0badf00d").mkdir()  # and what an interrupted run of that version left beside it
    legacy = snapshot(out / "latest")
    assert run_cli(out) == exit_codes.SUCCESS
    assert run_folder_names(out) == [legacy_id, NEW_ID]
    assert snapshot(out / "runs" / legacy_id) == legacy  # moved as it was, byte for byte
    assert (out / "latest").is_symlink() and latest_target(out) == f"runs/{NEW_ID}"
    assert recorded_runs(out) == [legacy_id, NEW_ID]  # the old run is in the history too
    assert hidden_folders(out) == []  # (its old lock file .latest.lock stays, like every lock file)
    err = capsys.readouterr().err
    assert f"moved {out / 'latest'}, the outputs of a version before run folders, to {out / 'runs' / legacy_id}" in err
    assert f"removed {out / '.latest.incoming-0badf00d'}, left by an interrupted run" in err


KILLED_AFTER_THE_RENAME = textwrap.dedent(
    """
    import os, sys
    from pathlib import Path
    sys.path.insert(0, sys.argv[2])
    import test_operations
    from warranty_forecast.outputs import run_folders
    run_folders._sync_folder = lambda folder: os._exit(9)  # killed right after runs/.<id>.incoming-* -> runs/<id>
    test_operations.publish_small_run(Path(sys.argv[1]), test_operations.NEW_ID, 200.0)
    """
)


def test_a_run_killed_after_publishing_is_recorded_and_pointed_at_by_the_next_run(tmp_path, stand_in, capsys):
    out = tmp_path / "out"
    previous_run(out)
    killed = subprocess.run([sys.executable, "-c", KILLED_AFTER_THE_RENAME, str(out), str(Path(__file__).parent)],
                            cwd=ROOT, timeout=60)
    assert killed.returncode == 9
    # the state the operator found: the run's folder is published, but neither in the history nor `latest`
    assert run_folder_names(out) == [PREVIOUS_ID, NEW_ID] and hidden_entries(out / "runs") == []
    assert recorded_runs(out) == [PREVIOUS_ID] and latest_target(out) == f"runs/{PREVIOUS_ID}"
    published = snapshot(out / "runs" / NEW_ID)
    assert run_cli(out) == exit_codes.SUCCESS  # the same night again: the same run id and tables
    assert snapshot(out / "runs" / NEW_ID) == published  # kept, not rewritten
    assert recorded_runs(out) == [PREVIOUS_ID, NEW_ID] and latest_target(out) == f"runs/{NEW_ID}"
    assert "changed nothing" in capsys.readouterr().err


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
    previous_run(out)
    before = snapshot(out)
    fake = StandIn(_send(signum)) if when == "computing" else StandIn(figures={"f": KillingFigure(signum)})
    handler_before = signal.getsignal(signum)
    monkeypatch.setattr(run_module, "run_nightly", fake)
    assert exit_codes.INTERRUPTED_BASE + signum == code
    assert run_cli(out) == code
    assert fake.calls == 1
    # the previous run's folder, `latest` and the history as they were; no run folder, no incoming leftover
    assert snapshot(out) == before
    assert hidden_entries(out / "runs") == [] and hidden_folders(tmp_path) == []
    err = capsys.readouterr().err
    assert "Traceback" not in err
    errors = [line for line in err.splitlines() if "ERROR" in line]
    assert len(errors) == 1 and f"stopped by {signal.Signals(signum).name} (exit {code})" in errors[0]
    assert signal.getsignal(signum) == handler_before  # main() puts the handlers back


def test_sigterm_to_a_real_run_exits_143_and_keeps_the_previous_outputs(tmp_path):
    out = tmp_path / "out"
    previous_run(out)
    before = snapshot(out)
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
    assert snapshot(out) == before  # the previous run's folder, `latest` and the history
    assert hidden_entries(out / "runs") == [] and hidden_folders(tmp_path) == []


def test_what_a_version_before_run_folders_left_beside_the_root_is_cleaned_up(tmp_path, stand_in, capsys):
    # its interrupted run's hidden folder is removed; its outputs stranded between its two renames come back
    # (as the old single-run layout, which is then refused with a clear line rather than hidden for good)
    out = tmp_path / "out"
    incoming = tmp_path / ".out.incoming-abcd1234"
    incoming.mkdir()
    stranded = tmp_path / ".out.previous-abcd1234"
    publish.publish_outputs(stranded, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {"generation": 1})
    assert run_cli(out) == exit_codes.OUTPUT_FAILED
    assert not incoming.exists() and not stranded.exists()
    assert (out / "manifest.json").is_file() and (out / "old.parquet").is_file()
    err = capsys.readouterr().err
    assert f"removed {incoming}" in err and f"restored {out}" in err
    assert "the layout of a version before run folders" in err and stand_in.calls == 0


def test_each_recovery_step_is_logged_once(tmp_path, stand_in, capsys):
    out = tmp_path / "out"
    previous_outputs_in_old_layout = out / "latest"
    publish.publish_outputs(previous_outputs_in_old_layout, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {"generation": 1})
    leftover = out / ".latest.incoming-abcd1234"
    leftover.mkdir()
    assert run_cli(out) == exit_codes.SUCCESS
    lines = [line for line in capsys.readouterr().err.splitlines() if "WARNING" in line]
    assert sum(f"removed {leftover}" in line for line in lines) == 1
    assert sum("a version before run folders" in line for line in lines) == 1
    assert (out / "latest").is_symlink()
