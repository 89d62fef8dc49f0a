"""Atomic writing of a run's outputs: Parquet tables, PNG charts, text files and the manifest.

Everything is written into a fresh hidden folder beside the output folder; the manifest is written
last; then the folder replaces the previous output folder by two renames on the same file system.
A failure at any point removes the hidden folder and leaves the previous outputs untouched, so a
reader never sees a mix of two runs (between the two renames the output folder is briefly absent).
An existing output folder is replaced only if it is empty or holds a previous run's manifest.json.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import shutil
import tempfile
from pathlib import Path
from typing import Any, Mapping

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from matplotlib.figure import Figure

from warranty_forecast.errors import OutputError

log = logging.getLogger(__name__)

MANIFEST_NAME = "manifest.json"


def sha256_of(path: Path) -> str:
    """Hex SHA-256 of a file, read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def publish_outputs(
    out_dir: Path,
    tables: Mapping[str, pd.DataFrame],
    figures: Mapping[str, Figure],
    texts: Mapping[str, str],
    manifest: Mapping[str, Any],
) -> dict[str, dict[str, Any]]:
    """Write all outputs to `out_dir` atomically; return what was written (file -> sha256, bytes, rows).

    Tables go to `<name>.parquet`, figures to `<name>.png`, texts to the given file names; the
    manifest (with the written files added under "outputs") goes to manifest.json, last.
    """
    out_dir = Path(out_dir)
    _check_replaceable(out_dir)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    incoming = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.incoming-", dir=out_dir.parent))
    try:
        written: dict[str, dict[str, Any]] = {}
        for name, frame in tables.items():
            path = incoming / f"{name}.parquet"
            pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path)
            written[path.name] = {"rows": int(len(frame))}
        for name, figure in figures.items():
            path = incoming / f"{name}.png"
            figure.savefig(path, dpi=110, metadata={"Software": None})
            written[path.name] = {}
        for file_name, text in texts.items():
            (incoming / file_name).write_text(text, encoding="utf-8")
            written[file_name] = {}
        for file_name, facts in written.items():
            path = incoming / file_name
            facts["bytes"] = path.stat().st_size
            facts["sha256"] = sha256_of(path)
        document = dict(manifest)
        document["outputs"] = written
        with open(incoming / MANIFEST_NAME, "w", encoding="utf-8") as handle:
            json.dump(document, handle, indent=2, sort_keys=False, default=str)
            handle.write("\n")
            handle.flush()
            os.fsync(handle.fileno())
        _swap_into_place(incoming, out_dir)
    except OSError as error:
        shutil.rmtree(incoming, ignore_errors=True)
        raise OutputError(f"cannot write outputs to {out_dir}: {error}") from error
    except BaseException:
        shutil.rmtree(incoming, ignore_errors=True)
        raise
    return written


def _check_replaceable(out_dir: Path) -> None:
    if not out_dir.exists():
        return
    if not out_dir.is_dir():
        raise OutputError(f"output path {out_dir} exists and is not a folder")
    if any(out_dir.iterdir()) and not (out_dir / MANIFEST_NAME).is_file():
        raise OutputError(
            f"output folder {out_dir} is not empty and holds no {MANIFEST_NAME} from an earlier run;"
            " refusing to replace it (choose another --out)"
        )


def _swap_into_place(incoming: Path, out_dir: Path) -> None:
    if not out_dir.exists():
        os.replace(incoming, out_dir)
        return
    previous = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.previous-", dir=out_dir.parent))
    os.rmdir(previous)
    os.replace(out_dir, previous)
    try:
        os.replace(incoming, out_dir)
    except OSError:
        os.replace(previous, out_dir)
        raise
    shutil.rmtree(previous, ignore_errors=True)
