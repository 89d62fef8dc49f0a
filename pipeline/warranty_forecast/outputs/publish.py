"""Atomic writing of a run's outputs, and the output folder's lock, checks and recovery.

Everything is written into a fresh hidden folder beside the output folder (`.<name>.incoming-*`); the
manifest is written last; then that folder takes the output folder's place. On Linux the two are
exchanged by one `renameat2(RENAME_EXCHANGE)` call, so the output folder never disappears, and the old
outputs (now in the hidden folder) are removed; where the exchange is unsupported, the old folder is
renamed aside (`.<name>.previous-*`) and the new one renamed in. A failure at any point removes the
hidden folder and leaves the previous outputs untouched, so a reader never sees a mix of two runs.

`lock_output_folder` is the run's preflight and lock, taken before any computing and held until the
outputs are published: it finds the real folder (through a symbolic link), checks that its parent can
be written, takes an exclusive lock on `.<name>.lock` beside it (never deleted), recovers what an
interrupted run left beside it, and checks that the folder may be replaced: it is missing, empty, or
holds only a manifest.json written by this tool and the files that manifest lists.

Folders and files are created with the process umask (0o777 and 0o666 masked), like any other file.
"""

from __future__ import annotations

import ctypes
import errno
import fcntl
import hashlib
import io
import json
import logging
import os
import re
import secrets
import shutil
import stat
import sys
from contextlib import contextmanager
from functools import lru_cache
from pathlib import Path
from typing import Any, Callable, Iterator, Mapping

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from matplotlib.figure import Figure

from warranty_forecast import __version__
from warranty_forecast.errors import AlreadyRunningError, OutputError

log = logging.getLogger(__name__)

MANIFEST_NAME = "manifest.json"
PRODUCER_NAME = "warranty-forecast"
INCOMING = "incoming"
PREVIOUS = "previous"

# Locks this process holds: resolved output folder -> [lock file descriptor, depth]. A nested
# lock_output_folder on the same folder (the CLI holds it, publish_outputs asks again) reuses it.
_held_locks: dict[Path, list[int]] = {}


def sha256_of(path: Path) -> str:
    """Hex SHA-256 of a file, read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def figure_png(figure: Figure) -> bytes:
    """The PNG bytes the run publishes for a figure (110 dpi, no software stamp, so reruns match)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=110, metadata={"Software": None})
    return buffer.getvalue()


def producer() -> dict[str, str]:
    """The manifest's mark that this tool wrote the folder (checked before a folder is replaced)."""
    return {"name": PRODUCER_NAME, "version": __version__}


def lock_file_of(folder: Path) -> Path:
    """The lock file of a (resolved) output folder: `.<name>.lock` beside it."""
    return folder.parent / f".{folder.name}.lock"


def resolve_output_folder(out_dir: Path) -> Path:
    """The real folder behind `out_dir`: absolute, every symbolic link followed (the link is kept)."""
    folder = Path(os.path.realpath(out_dir))
    if folder.name in ("", ".", "..") or folder.parent == folder:
        raise OutputError(f"output folder {out_dir} cannot be the root folder")
    if folder.is_symlink():  # realpath stops at a loop
        raise OutputError(f"output path {out_dir} is a symbolic link that never reaches a folder (a loop)")
    return folder


@contextmanager
def lock_output_folder(out_dir: Path) -> Iterator[Path]:
    """Preflight, lock and recovery of an output folder; yields the resolved folder, locked.

    Raises OutputError when the folder cannot be written or must not be replaced, and
    AlreadyRunningError when another process holds the lock. Re-entrant within one process.
    """
    folder = resolve_output_folder(out_dir)
    held = _held_locks.get(folder)
    if held is not None:
        held[1] += 1
        try:
            yield folder
        finally:
            held[1] -= 1
        return
    if os.path.lexists(folder) and not folder.is_dir():
        raise OutputError(f"output path {_shown(out_dir, folder)} is a file, not a folder")
    _create_parent(out_dir, folder)
    descriptor = _acquire_lock(out_dir, folder)
    _held_locks[folder] = [descriptor, 1]
    try:
        recover_leftovers(folder)
        check_replaceable(folder)
        _check_writable(out_dir, folder)
        if Path(out_dir).is_symlink():
            log.info("output folder %s is a symbolic link: publishing into its target %s", out_dir, folder)
        yield folder
    finally:
        del _held_locks[folder]
        os.close(descriptor)  # releases the lock; the lock file stays


def check_replaceable(folder: Path) -> None:
    """Raise OutputError unless `folder` is missing, empty, or only holds outputs this tool wrote.

    A non-empty folder is replaced only if its manifest.json parses as a JSON object, carries the
    producer marker {"name": "warranty-forecast"}, and every other entry is a regular file listed in
    its "outputs"; anything else someone dropped in would be deleted, so the folder is refused.
    """
    try:
        entries = sorted(os.listdir(folder))
    except FileNotFoundError:
        return
    except NotADirectoryError:
        raise OutputError(f"output path {folder} is a file, not a folder") from None
    except OSError as error:
        raise OutputError(f"cannot read output folder {folder}: {error.strerror}") from None
    if not entries:
        return

    def refuse(reason: str) -> OutputError:
        return OutputError(
            f"refusing to replace output folder {folder}: {reason}; nothing was changed"
            " (choose another --out, or move the folder away)"
        )

    if MANIFEST_NAME not in entries:
        raise refuse(f"it is not empty and holds no {MANIFEST_NAME}")
    try:
        with open(folder / MANIFEST_NAME, encoding="utf-8") as handle:
            document = json.load(handle)
    except (OSError, UnicodeDecodeError, ValueError):
        raise refuse(f"its {MANIFEST_NAME} is not readable JSON") from None
    if not isinstance(document, dict):
        raise refuse(f"its {MANIFEST_NAME} is not a JSON object")
    outputs = document.get("outputs")
    mark = document.get("producer")
    if not (isinstance(mark, dict) and mark.get("name") == PRODUCER_NAME):
        versions = document.get("versions")
        if not (isinstance(versions, dict) and PRODUCER_NAME in versions):
            raise refuse(f"its {MANIFEST_NAME} was not written by {PRODUCER_NAME} (no producer marker)")
        # written before outputs were marked: accepted only if every file is one it lists, byte for byte
        if not _holds_exactly_its_listed_files(folder, entries, outputs):
            raise refuse(
                f"its {MANIFEST_NAME} has no producer marker (written before {PRODUCER_NAME} marked its"
                " outputs) and the folder's files differ from the ones it lists; check the folder and remove it once"
            )
        log.info("replacing %s: outputs of an earlier version, every file matching its manifest's checksum", folder)
        return
    if not isinstance(outputs, dict):
        raise refuse(f"its {MANIFEST_NAME} lists no outputs")
    strangers = [
        name
        for name in entries
        if name != MANIFEST_NAME and (name not in outputs or not _is_regular_file(folder / name))
    ]
    if strangers:
        shown = ", ".join(strangers[:5]) + (f" and {len(strangers) - 5} more" if len(strangers) > 5 else "")
        entries_word = "entry" if len(strangers) == 1 else "entries"
        raise refuse(f"it holds {len(strangers)} {entries_word} the last run did not write ({shown})")


def _holds_exactly_its_listed_files(folder: Path, entries: list[str], outputs: object) -> bool:
    """Every entry but the manifest is a regular file listed in `outputs` with the same size and SHA-256."""
    if not isinstance(outputs, dict):
        return False
    for name in entries:
        if name == MANIFEST_NAME:
            continue
        facts = outputs.get(name)
        path = folder / name
        if not (isinstance(facts, dict) and _is_regular_file(path)):
            return False
        if facts.get("bytes") != path.stat().st_size or facts.get("sha256") != sha256_of(path):
            return False
    return True


def recover_leftovers(folder: Path) -> list[str]:
    """Clean up after interrupted runs, beside `folder` (call under its lock); return what was done.

    `.<name>.incoming-*` (a run stopped while writing, or its old outputs after an exchange) is removed.
    `.<name>.previous-*` (a run stopped between the two renames) is moved back to `<name>` when that
    is missing (the newest one, by modification time), and removed otherwise. Each action is logged.
    """
    pattern = re.compile(rf"\.{re.escape(folder.name)}\.({INCOMING}|{PREVIOUS})-[a-z0-9_]{{8}}")
    incoming, previous = [], []
    for entry in folder.parent.iterdir():
        match = pattern.fullmatch(entry.name)
        if match and entry.is_dir() and not entry.is_symlink():
            (incoming if match.group(1) == INCOMING else previous).append(entry)
    done = []
    try:
        for path in sorted(incoming):
            shutil.rmtree(path)
            done.append(f"removed {path}, left by an interrupted run")
            log.warning("%s", done[-1])
        previous.sort(key=lambda path: path.stat().st_mtime_ns, reverse=True)
        if previous and not os.path.lexists(folder):
            newest = previous.pop(0)
            os.rename(newest, folder)
            done.append(f"restored {folder} from {newest}: a run was stopped between its two renames")
            log.warning("%s", done[-1])
        for path in previous:
            shutil.rmtree(path)
            done.append(f"removed {path}, the outputs an interrupted run had already replaced")
            log.warning("%s", done[-1])
    except OSError as error:
        raise OutputError(f"cannot clean up beside {folder} after an interrupted run: {error}") from error
    return done


def publish_outputs(
    out_dir: Path,
    tables: Mapping[str, pd.DataFrame],
    figures: Mapping[str, Figure | bytes],
    texts: Mapping[str, str],
    manifest: Mapping[str, Any],
) -> dict[str, dict[str, Any]]:
    """Write all outputs to `out_dir` atomically; return what was written (file -> sha256, bytes, rows).

    Tables go to `<name>.parquet`, figures to `<name>.png` (a Figure is drawn as `figure_png` draws it; bytes, its
    PNG drawn earlier, are written as they are), texts to the given file names; the
    manifest (with the producer marker first and the written files under "outputs") goes to
    manifest.json, last. Takes the folder's lock unless this process already holds it.
    """
    with lock_output_folder(out_dir) as folder:
        check_replaceable(folder)
        incoming = _new_hidden_folder(folder, INCOMING)
        try:
            written = write_outputs(incoming, tables, figures, texts, manifest)
            _swap_into_place(incoming, folder)
        except OSError as error:
            shutil.rmtree(incoming, ignore_errors=True)
            raise OutputError(f"cannot write outputs to {_shown(out_dir, folder)}: {error}") from error
        except BaseException:
            shutil.rmtree(incoming, ignore_errors=True)
            raise
    return written


def write_outputs(
    folder: Path,
    tables: Mapping[str, pd.DataFrame],
    figures: Mapping[str, Figure | bytes],
    texts: Mapping[str, str],
    manifest: Mapping[str, Any],
) -> dict[str, dict[str, Any]]:
    """Write a run's files into the existing empty `folder` (not yet visible to readers), manifest.json last
    and synced; return what was written (file -> rows, bytes, sha256). See `publish_outputs` for the names."""
    written: dict[str, dict[str, Any]] = {}
    for name, frame in tables.items():
        path = folder / f"{name}.parquet"
        pq.write_table(_typed_nulls(pa.Table.from_pandas(frame, preserve_index=False)), path)
        written[path.name] = {"rows": int(len(frame))}
    for name, figure in figures.items():
        path = folder / f"{name}.png"
        if isinstance(figure, bytes):
            path.write_bytes(figure)
        else:  # the same settings as figure_png
            figure.savefig(path, dpi=110, metadata={"Software": None})
        written[path.name] = {}
    for file_name, text in texts.items():
        (folder / file_name).write_text(text, encoding="utf-8")
        written[file_name] = {}
    for file_name, facts in written.items():
        path = folder / file_name
        facts["bytes"] = path.stat().st_size
        facts["sha256"] = sha256_of(path)
    document = {"producer": producer(), **{k: v for k, v in manifest.items() if k != "producer"}}
    document["outputs"] = written
    with open(folder / MANIFEST_NAME, "w", encoding="utf-8") as handle:
        json.dump(document, handle, indent=2, sort_keys=False, default=str)
        handle.write("\n")
        handle.flush()
        os.fsync(handle.fileno())
    return written


def _typed_nulls(table: pa.Table) -> pa.Table:
    """`table` with every column of Arrow's null type (an empty or all-missing text or date column of pandas)
    given a real type: date for a name ending in "date", text otherwise, so stacked runs' tables line up."""
    for index, column in enumerate(table.schema):
        if pa.types.is_null(column.type):
            wanted = pa.date32() if column.name.endswith("date") else pa.string()
            table = table.set_column(index, pa.field(column.name, wanted), table.column(index).cast(wanted))
    return table


def _is_regular_file(path: Path) -> bool:
    try:
        return stat.S_ISREG(os.lstat(path).st_mode)
    except OSError:
        return False


def _shown(out_dir: Path, folder: Path) -> str:
    """The folder as the user named it, with the real folder when a link or a relative path differs."""
    return str(out_dir) if Path(out_dir) == folder else f"{out_dir} ({folder})"


def _create_parent(out_dir: Path, folder: Path) -> None:
    for ancestor in (folder.parent, *folder.parent.parents):
        if os.path.lexists(ancestor):
            if not ancestor.is_dir():
                raise OutputError(f"output folder {_shown(out_dir, folder)} cannot be created: {ancestor} is a file")
            break
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise OutputError(
            f"cannot create {folder.parent}, the folder that holds output folder {_shown(out_dir, folder)}:"
            f" {error.strerror}"
        ) from None


def _acquire_lock(out_dir: Path, folder: Path) -> int:
    lock_path = lock_file_of(folder)
    try:
        descriptor = os.open(lock_path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o666)
    except OSError as error:
        try:  # another account's lock file: flock works on a read-only descriptor too
            descriptor = os.open(lock_path, os.O_RDONLY | os.O_CLOEXEC)
        except OSError:
            raise OutputError(
                f"cannot write in {folder.parent} (for the lock file {lock_path.name} and the new outputs of"
                f" {_shown(out_dir, folder)}): {error.strerror}"
            ) from None
    try:
        fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        holder = os.pread(descriptor, 32, 0).decode("ascii", "replace").strip()
        os.close(descriptor)
        by = f" by process {holder}" if holder.isdigit() else ""
        raise AlreadyRunningError(
            f"another run is writing to output folder {_shown(out_dir, folder)} (its lock {lock_path} is"
            f" held{by}); this run stopped before doing anything"
        ) from None
    except OSError as error:
        os.close(descriptor)
        raise OutputError(f"cannot lock {lock_path}: {error.strerror}") from None
    try:  # the holder's process id, for the message of a refused run
        os.ftruncate(descriptor, 0)
        os.pwrite(descriptor, f"{os.getpid()}\n".encode("ascii"), 0)
    except OSError:
        pass  # a read-only descriptor: the lock holds all the same
    return descriptor


def _check_writable(out_dir: Path, folder: Path) -> None:
    """Probe now what publishing will need: a new folder beside the output folder, its old files removable."""
    try:
        os.rmdir(_new_hidden_folder(folder, INCOMING))
    except OSError as error:
        raise OutputError(
            f"cannot write in {folder.parent} (for {_shown(out_dir, folder)}): {error.strerror}"
        ) from None
    if folder.is_dir() and not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(
            f"output folder {_shown(out_dir, folder)} is not writable: its old files could not be removed"
        )


def _new_hidden_folder(folder: Path, kind: str) -> Path:
    """A new empty `.<name>.<kind>-<8 hex>` beside `folder`, mode 0o777 less the umask."""
    for _ in range(100):
        path = folder.parent / f".{folder.name}.{kind}-{secrets.token_hex(4)}"
        try:
            os.mkdir(path, 0o777)
        except FileExistsError:
            continue
        return path
    raise FileExistsError(errno.EEXIST, "no free name for a hidden folder", str(folder.parent))


def _swap_into_place(incoming: Path, folder: Path) -> None:
    if not os.path.lexists(folder):
        os.rename(incoming, folder)
        return
    if _exchange_folders(incoming, folder):
        shutil.rmtree(incoming, ignore_errors=True)  # now the old outputs; a leftover is removed next run
        return
    previous = _new_hidden_folder(folder, PREVIOUS)
    os.rmdir(previous)
    os.rename(folder, previous)
    try:
        _move_in(incoming, folder)
    except BaseException:
        if not os.path.lexists(folder):
            os.rename(previous, folder)
        raise
    shutil.rmtree(previous, ignore_errors=True)


def _move_in(incoming: Path, folder: Path) -> None:
    """The second rename of the fallback swap (a seam for tests that stop a run between the two)."""
    os.rename(incoming, folder)


_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


@lru_cache(maxsize=1)
def _renameat2() -> Callable[..., int] | None:
    if not sys.platform.startswith("linux"):
        return None
    try:
        function = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):  # a C library without renameat2 (glibc before 2.28, some others)
        return None
    function.argtypes = (ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint)
    function.restype = ctypes.c_int
    return function


def _exchange_folders(first: Path, second: Path) -> bool:
    """Exchange two paths atomically with renameat2(RENAME_EXCHANGE); False where that is unsupported."""
    function = _renameat2()
    if function is None:
        return False
    if function(_AT_FDCWD, os.fsencode(first), _AT_FDCWD, os.fsencode(second), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False  # old kernel, or a file system that cannot exchange
    raise OSError(code, os.strerror(code), str(first), None, str(second))
