"""The output root: one folder per published run, a `latest` pointer, and the history database beside them.

    <root>/runs/<run id>/    one published run: tables, charts, reports, manifest.json (never replaced)
    <root>/latest            symbolic link to runs/<run id> of the run in effect for the newest as-of date
    <root>/history.duckdb    every published run's tables keyed by run id and as-of date (outputs.history)
    .<root name>.lock        beside the root: held by the run from its preflight to its end

A run's folder is written aside (`runs/.<run id>.incoming-<hex>`), manifest.json last and synced, then
renamed into place in one step; the history database is updated next; the `latest` link is replaced
last (a new link renamed over the old one, atomic). A run whose id is already published (same extracts,
settings, version and as-of date) compares its tables with the published ones byte for byte: identical,
it changes nothing and says so; different, it stops with OUTPUT_FAILED and keeps the published folder
(the same inputs must give the same numbers). A published folder is never replaced or removed.

An as-of date is closed once a run for it is published. A later run for a closed date with other
extracts or settings gets its own run id and folder, and records why (`--reason`, and what changed); the
run in effect for a date is its newest published run (by the manifest's finished_utc).

The run's preflight (`lock_output_root`) creates the root and runs/, takes the lock, removes what an
interrupted run left (incoming folders, half-made links), and moves the outputs of a version before run
folders (a real folder at <root>/latest written by this tool) into runs/ so that `latest` can become a link.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
import os
import re
import secrets
import shutil
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator, Mapping

import pandas as pd
from matplotlib.figure import Figure

from warranty_forecast.errors import OutputError
from warranty_forecast.outputs import publish
from warranty_forecast.outputs.publish import MANIFEST_NAME, PRODUCER_NAME, write_outputs

log = logging.getLogger(__name__)

RUNS_FOLDER = "runs"
LATEST_LINK = "latest"
HISTORY_FILE = "history.duckdb"

_RUN_NAME = re.compile(r"[0-9A-Za-z][0-9A-Za-z._-]{0,127}")
_INCOMING = re.compile(r"\.(.+)\.incoming-[0-9a-f]{8}")
_LINK_IN_MAKING = re.compile(rf"\.{LATEST_LINK}\.[0-9a-f]{{8}}")


@dataclass(frozen=True)
class PublishedRun:
    """A run as its folder's manifest tells it (dates as dates; `finished_utc` as written, ISO 8601)."""

    run_id: str
    as_of_date: dt.date
    finished_utc: str
    folder: Path
    inputs: Mapping[str, str]  # extract -> SHA-256
    settings: Mapping[str, Any]
    version: str
    code: str = ""
    rerun_of: str | None = None
    reason: str | None = None
    document: Mapping[str, Any] = field(default_factory=dict, repr=False, compare=False)

    @property
    def order(self) -> tuple[dt.date, dt.datetime, str]:
        """Sort key: as-of date, then publishing time; the last run of a date is the one in effect."""
        return self.as_of_date, _utc(self.finished_utc), self.run_id


@dataclass(frozen=True)
class PublishOutcome:
    """What publishing did: `changed` False when an identical run was already published."""

    root: Path
    folder: Path
    run_id: str
    changed: bool
    written: Mapping[str, Mapping[str, Any]]


def _utc(text: str) -> dt.datetime:
    try:
        moment = dt.datetime.fromisoformat(text)
    except (TypeError, ValueError):
        return dt.datetime.min.replace(tzinfo=dt.timezone.utc)
    return moment if moment.tzinfo else moment.replace(tzinfo=dt.timezone.utc)


# ---------------------------------------------------------------------------------------------- reading


def read_published_run(folder: Path) -> PublishedRun | None:
    """The run in `folder` from its manifest.json, or None when it holds no readable manifest of this tool."""
    try:
        with open(folder / MANIFEST_NAME, encoding="utf-8") as handle:
            document = json.load(handle)
    except (OSError, UnicodeDecodeError, ValueError):
        return None
    if not isinstance(document, dict) or (document.get("producer") or {}).get("name") != PRODUCER_NAME:
        return None
    try:
        as_of = dt.date.fromisoformat(str(document["as_of_date"]))
        run_id = str(document["run_id"])
    except (KeyError, ValueError):
        return None
    config = document.get("config") or {}
    return PublishedRun(
        run_id=run_id,
        as_of_date=as_of,
        finished_utc=str(document.get("finished_utc", "")),
        folder=folder,
        inputs={str(item.get("extract")): str(item.get("sha256")) for item in document.get("inputs", [])
                if isinstance(item, dict)},
        settings={k: v for k, v in config.items() if k != "path"} if isinstance(config, dict) else {},
        version=str((document.get("versions") or {}).get(PRODUCER_NAME, "")),
        code=str((document.get("versions") or {}).get(f"{PRODUCER_NAME}-code", "")),
        rerun_of=document.get("rerun_of"),
        reason=document.get("rerun_reason"),
        document=document,
    )


def published_runs(root: Path) -> list[PublishedRun]:
    """Every published run under `root`/runs, oldest first (as-of date, then publishing time)."""
    runs_folder = Path(root) / RUNS_FOLDER
    try:
        entries = sorted(runs_folder.iterdir())
    except FileNotFoundError:
        return []
    except OSError as error:
        raise OutputError(f"cannot read {runs_folder}: {error.strerror}") from None
    runs = []
    for entry in entries:
        if entry.name.startswith(".") or not entry.is_dir() or entry.is_symlink():
            continue
        run = read_published_run(entry)
        if run is None:
            log.warning("%s holds no manifest.json of %s: not a published run, left alone", entry, PRODUCER_NAME)
            continue
        runs.append(run)
    return sorted(runs, key=lambda run: run.order)


def run_in_effect(runs: list[PublishedRun], as_of_date: dt.date) -> PublishedRun | None:
    """The newest published run for `as_of_date`, or None."""
    same_date = [run for run in runs if run.as_of_date == as_of_date]
    return max(same_date, key=lambda run: run.order) if same_date else None


def previous_run(runs: list[PublishedRun], as_of_date: dt.date) -> PublishedRun | None:
    """The run in effect for the newest as-of date before `as_of_date` (the last run before this one)."""
    earlier = [run for run in runs if run.as_of_date < as_of_date]
    return max(earlier, key=lambda run: run.order) if earlier else None


def is_month_end(day: dt.date) -> bool:
    return (day + dt.timedelta(days=1)).day == 1


def opening_run(runs: list[PublishedRun], as_of_date: dt.date) -> PublishedRun | None:
    """The roll-forward's opening: the run in effect for the newest month-end as-of date before `as_of_date`
    (finance's last close); when no earlier month end was run, the run in effect for the newest earlier date."""
    month_ends = [run for run in runs if run.as_of_date < as_of_date and is_month_end(run.as_of_date)]
    if month_ends:
        return max(month_ends, key=lambda run: run.order)
    return previous_run(runs, as_of_date)


def latest_run(runs: list[PublishedRun]) -> PublishedRun | None:
    """The run `latest` points at: the one in effect for the newest as-of date."""
    return max(runs, key=lambda run: run.order) if runs else None


def what_changed(
    earlier: PublishedRun, inputs: Mapping[str, str], settings: Mapping[str, Any], version: str, code: str = ""
) -> str:
    """Words for what differs between a published run and a new one for the same as-of date."""
    changes = [
        f"the {extract} extract changed" for extract in sorted(set(earlier.inputs) | set(inputs))
        if earlier.inputs.get(extract) != inputs.get(extract)
    ]
    sections = sorted(
        name for name in set(earlier.settings) | set(settings)
        if json.dumps(earlier.settings.get(name), sort_keys=True, default=str)
        != json.dumps(settings.get(name), sort_keys=True, default=str)
    )
    if sections:
        changes.append("settings changed in " + ", ".join(f"[{name}]" for name in sections))
    if earlier.version != version:
        changes.append(f"version {earlier.version or '?'} -> {version}")
    elif earlier.code != code:
        changes.append(f"the program changed (code {earlier.code or '?'} -> {code})")
    return "; ".join(changes) or "nothing that enters the run id differs"


# ------------------------------------------------------------------------------------ lock and recovery


@contextmanager
def lock_output_root(out_dir: Path) -> Iterator[Path]:
    """Preflight, lock and recovery of an output root; yields the resolved root, locked (re-entrant).

    Raises OutputError when the root cannot be used (a file; the outputs of a single run of a version
    before run folders, which would be mixed with run folders; not writable) and AlreadyRunningError when
    another process holds the lock."""
    root = publish.resolve_output_folder(out_dir)
    held = publish._held_locks.get(root)
    if held is not None:
        held[1] += 1
        try:
            yield root
        finally:
            held[1] -= 1
        return
    if os.path.lexists(root) and not root.is_dir():
        raise OutputError(f"output root {out_dir} is a file, not a folder")
    publish._create_parent(out_dir, root)
    descriptor = publish._acquire_lock(out_dir, root)
    publish._held_locks[root] = [descriptor, 1]
    try:
        # what a version before run folders left beside the root when it was stopped (its hidden folders)
        publish.recover_leftovers(root)
        if root.is_dir():
            _check_root(root)
            _check_writable(root)
            recover_root(root)
        elif not os.access(root.parent, os.W_OK | os.X_OK):
            raise OutputError(f"cannot create output root {root}: {root.parent} is not writable; nothing was changed")
        yield root
    finally:
        del publish._held_locks[root]
        os.close(descriptor)


def _check_root(root: Path) -> None:
    if (root / MANIFEST_NAME).is_file():
        mine = read_published_run(root) is not None or _is_old_output_folder(root)
        what = (
            "the outputs of a single run (the layout of a version before run folders)" if mine
            else f"a {MANIFEST_NAME} this tool did not write"
        )
        raise OutputError(
            f"output root {root} holds {what} at its top; nothing was changed. Runs go to"
            f" <root>/{RUNS_FOLDER}/<run id>/ with <root>/{LATEST_LINK} pointing at the newest: "
            + ("pass the folder above it as --out, or move it away" if mine else "choose another --out")
        )
    latest = root / LATEST_LINK
    if os.path.lexists(latest) and not latest.is_symlink() and not latest.is_dir():
        raise OutputError(f"{latest} is a file, not this tool's link to the latest run; nothing was changed")


def _is_old_output_folder(folder: Path) -> bool:
    """A folder of this tool's outputs in the layout before run folders (its checks allow replacing it)."""
    try:
        publish.check_replaceable(folder)
    except OutputError:
        return False
    return True


def _check_writable(root: Path) -> None:
    for folder in (root, root / RUNS_FOLDER):
        if folder.is_dir() and not os.access(folder, os.W_OK | os.X_OK):
            raise OutputError(f"cannot write in {folder}: permission denied; nothing was changed")


def recover_root(root: Path) -> list[str]:
    """Clean up under a locked root after interrupted runs; return what was done (each action logged).

    Removes `runs/.<id>.incoming-*` folders and half-made `.latest.*` links; moves a real folder at
    <root>/latest holding this tool's outputs (the layout before run folders) to runs/<its run id>."""
    done: list[str] = []
    runs_folder = root / RUNS_FOLDER
    try:
        for entry in sorted(runs_folder.iterdir()) if runs_folder.is_dir() else []:
            if _INCOMING.fullmatch(entry.name) and entry.is_dir() and not entry.is_symlink():
                shutil.rmtree(entry)
                done.append(f"removed {entry}, left by an interrupted run")
        for entry in sorted(root.iterdir()):
            if _LINK_IN_MAKING.fullmatch(entry.name) and entry.is_symlink():
                entry.unlink()
                done.append(f"removed {entry}, a link an interrupted run was making")
        mine = list(done)
        latest = root / LATEST_LINK
        if latest.is_dir() and not latest.is_symlink():
            done.extend(publish.recover_leftovers(latest))  # logged there
            moved = _move_legacy_latest(latest, runs_folder)
            mine.extend(moved)
            done.extend(moved)
    except OSError as error:
        raise OutputError(f"cannot clean up under {root} after an interrupted run: {error}") from error
    for text in mine:
        log.warning("%s", text)
    return done


def _move_legacy_latest(latest: Path, runs_folder: Path) -> list[str]:
    try:
        publish.check_replaceable(latest)
    except OutputError:
        raise OutputError(
            f"{latest} is a folder that does not hold only this tool's outputs; it must become the link to the"
            " latest run: move it away; nothing was changed"
        ) from None
    if not any(latest.iterdir()):
        latest.rmdir()
        return [f"removed the empty folder {latest}; it becomes the link to the latest run"]
    run = read_published_run(latest)
    stem = run.run_id if run is not None and _RUN_NAME.fullmatch(run.run_id) else "before-run-folders"
    name = stem
    for number in range(2, 1000):
        if not os.path.lexists(runs_folder / name):
            break
        name = f"{stem}.{number}"
    runs_folder.mkdir(exist_ok=True)  # only now: a refused root is left as it was
    os.rename(latest, runs_folder / name)
    return [f"moved {latest}, the outputs of a version before run folders, to {runs_folder / name}"]


# ------------------------------------------------------------------------------------------- publishing


def publish_run(
    out_dir: Path,
    run_id: str,
    tables: Mapping[str, pd.DataFrame],
    figures: Mapping[str, Figure | bytes],
    texts: Mapping[str, str],
    manifest: Mapping[str, Any],
) -> PublishOutcome:
    """Publish a run as `<root>/runs/<run_id>/` (written aside, renamed into place); nothing is replaced.

    When the folder exists (an identical rerun) the new tables (*.parquet, *.csv) are compared with the
    published ones: identical, the published folder is kept and `changed` is False; different, OutputError
    (the folder is kept as it was)."""
    if not _RUN_NAME.fullmatch(run_id):
        raise OutputError(f"run id {run_id!r} cannot name a folder")
    with lock_output_root(out_dir) as root:
        runs_folder = root / RUNS_FOLDER
        try:
            runs_folder.mkdir(parents=True, exist_ok=True)
        except OSError as error:
            raise OutputError(f"cannot create {runs_folder}: {error.strerror}") from None
        target = runs_folder / run_id
        incoming = publish._new_hidden_folder(target, publish.INCOMING)
        try:
            written = write_outputs(incoming, tables, figures, texts, manifest)
            if os.path.lexists(target):
                differing = _differing_tables(target, written)
                if differing:
                    raise OutputError(
                        f"run {run_id} is already published in {target} and this run's tables differ from it"
                        f" ({', '.join(differing[:5])}{' and more' if len(differing) > 5 else ''}): the same"
                        " extracts, settings and version must give the same numbers; the published folder is"
                        " kept as it was. Check it was not edited, and report the difference"
                    )
                shutil.rmtree(incoming, ignore_errors=True)
                return PublishOutcome(root, target, run_id, False, _listed_outputs(target))
            os.rename(incoming, target)
            _sync_folder(runs_folder)
        except OSError as error:
            shutil.rmtree(incoming, ignore_errors=True)
            raise OutputError(f"cannot publish run {run_id} in {runs_folder}: {error}") from error
        except BaseException:
            shutil.rmtree(incoming, ignore_errors=True)
            raise
    return PublishOutcome(root, target, run_id, True, written)


def _listed_outputs(folder: Path) -> dict[str, Any]:
    run = read_published_run(folder)
    outputs = run.document.get("outputs") if run is not None else None
    return dict(outputs) if isinstance(outputs, dict) else {}


def _differing_tables(published: Path, written: Mapping[str, Mapping[str, Any]]) -> list[str]:
    """The table files (.parquet, .csv) whose bytes differ between the published folder and this run."""
    listed = _listed_outputs(published)
    names = sorted(
        name for name in set(written) | set(listed) if name.endswith((".parquet", ".csv"))
    )
    differing = []
    for name in names:
        path = published / name
        facts = written.get(name)
        if facts is None or not path.is_file() or publish.sha256_of(path) != facts.get("sha256"):
            differing.append(name)
    return differing


def _sync_folder(folder: Path) -> None:
    try:
        descriptor = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(descriptor)
    except OSError:
        pass
    finally:
        os.close(descriptor)


def point_latest(root: Path) -> PublishedRun | None:
    """Point <root>/latest at the run in effect for the newest as-of date (a new link renamed over the old
    one); return that run, or None when nothing is published. Call under the root's lock."""
    run = latest_run(published_runs(root))
    if run is None:
        return None
    link = root / LATEST_LINK
    target = f"{RUNS_FOLDER}/{run.folder.name}"
    if link.is_symlink() and os.readlink(link) == target:
        return run
    making = root / f".{LATEST_LINK}.{secrets.token_hex(4)}"
    try:
        os.symlink(target, making)
        os.replace(making, link)
        _sync_folder(root)
    except OSError as error:
        try:
            making.unlink()
        except OSError:
            pass
        raise OutputError(f"cannot point {link} at {target}: {error.strerror}") from None
    return run


def read_reserve(run: PublishedRun | None) -> "OpeningReserve | None":
    """A published run's reserve per product (for the roll-forward and the change since the last run), or
    None when there is no run or its folder has no readable reserve_by_product.parquet (logged)."""
    from warranty_forecast.stages.roll_forward import OpeningReserve

    if run is None:
        return None
    path = run.folder / "reserve_by_product.parquet"
    try:
        frame = pd.read_parquet(path)
    except (OSError, ValueError) as error:
        log.warning("cannot read %s (%s): the reserve of run %s is left out of the movement", path, error, run.run_id)
        return None
    if not {"product", "reserve"} <= set(frame.columns):
        log.warning("%s has no product and reserve columns: the reserve of run %s is left out", path, run.run_id)
        return None
    return OpeningReserve(run.run_id, run.as_of_date, frame)
