"""Saved artefacts (dictionaries, confidence models, register indexes) in a safe, versioned layout.

An artefact is a directory of Parquet tables and ``.npy`` arrays plus ``manifest.json``
with the kind, format version, library version, build metadata and a SHA-256 for every
file. Loading verifies all of it and reads only data (``allow_pickle=False``), so a
crafted artefact can make loading fail but cannot run code.
"""
from __future__ import annotations

import ctypes
import json
import os
import shutil
import sys
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .. import __version__
from . import file_sha256

FORMAT_VERSION = 1
MANIFEST = "manifest.json"


class ArtefactError(ValueError):
    """A saved artefact is missing, of another kind or version, or was altered since it was saved."""


@dataclass
class Artefact:
    kind: str
    tables: dict[str, pd.DataFrame]
    arrays: dict[str, np.ndarray]
    meta: dict
    manifest: dict = field(default_factory=dict)


def save_artefact(directory: str | os.PathLike, kind: str, tables: dict[str, pd.DataFrame], *,
                  arrays: dict[str, np.ndarray] | None = None, meta: dict | None = None) -> Path:
    """Write an artefact to ``directory`` atomically (built beside it, then swapped into place); returns
    the directory (its manifest: :func:`read_manifest`)."""
    with staged_directory(directory) as staging:
        write_artefact(staging, kind, tables, arrays=arrays, meta=meta)
    return Path(directory)


def write_artefact(directory: str | os.PathLike, kind: str, tables: dict[str, pd.DataFrame], *,
                   arrays: dict[str, np.ndarray] | None = None, meta: dict | None = None) -> dict:
    """Write an artefact's files into an existing ``directory`` (a staging directory: no atomicity here);
    the manifest is written last, so a directory without one was never finished."""
    directory = Path(directory)
    files = {}
    for name, table in tables.items():
        target = directory / f"{name}.parquet"
        table.reset_index(drop=True).to_parquet(target, index=False)
        files[target.name] = {"sha256": file_sha256(target), "rows": int(len(table))}
    for name, array in (arrays or {}).items():
        array = np.asarray(array)
        if array.dtype == object:
            raise TypeError(f"array {name!r} has dtype object; artefacts hold numeric arrays only")
        target = directory / f"{name}.npy"
        np.save(target, array, allow_pickle=False)
        files[target.name] = {"sha256": file_sha256(target), "shape": list(array.shape)}
    manifest = {"kind": kind, "format_version": FORMAT_VERSION, "library_version": __version__,
                "files": files, "meta": meta or {}}
    (directory / MANIFEST).write_text(json.dumps(manifest, indent=2, sort_keys=True, default=str) + "\n",
                                      encoding="utf-8")
    return manifest


@contextmanager
def staged_directory(directory: str | os.PathLike):
    """Yield an empty staging directory beside ``directory``; on success it takes ``directory``'s place.

    A process killed at any moment leaves at ``directory`` either what was there before or the
    finished new directory: where the kernel can swap two paths in one step (Linux
    ``renameat2(RENAME_EXCHANGE)``) it does; elsewhere the old directory is moved aside first, and
    a kill in between leaves nothing at ``directory`` (the old one stays in ``.NAME.old.*``).
    Staging directories of killed runs are hidden (``.NAME.*``) and never read.
    """
    directory = Path(directory)
    directory.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{directory.name}.", dir=directory.parent))
    try:
        yield staging
        if directory.exists() and _exchange(staging, directory):
            shutil.rmtree(staging, ignore_errors=True)  # now holds the old directory
        elif directory.exists():
            retired = Path(tempfile.mkdtemp(prefix=f".{directory.name}.old.", dir=directory.parent))
            os.replace(directory, retired / directory.name)
            os.replace(staging, directory)
            shutil.rmtree(retired, ignore_errors=True)
        else:
            os.replace(staging, directory)
    finally:
        if staging.exists():
            shutil.rmtree(staging, ignore_errors=True)


def _exchange(a: Path, b: Path) -> bool:
    """Atomically swap two paths (Linux renameat2 with RENAME_EXCHANGE); False where unsupported."""
    if sys.platform != "linux":
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    at_fdcwd, rename_exchange = -100, 2
    return renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0


def read_manifest(directory: str | os.PathLike) -> dict:
    path = Path(directory) / MANIFEST
    if not path.is_file():
        raise ArtefactError(f"{path}: no manifest; {directory} is not a titlematch artefact")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise ArtefactError(f"{path}: manifest is not valid JSON: {exc}") from exc


def load_artefact(directory: str | os.PathLike, kind: str) -> Artefact:
    """Load and verify an artefact of ``kind``; raise ``ArtefactError`` naming the offending file."""
    directory = Path(directory)
    manifest = read_manifest(directory)
    if manifest.get("kind") != kind:
        raise ArtefactError(f"{directory}: holds a {manifest.get('kind')!r}, expected a {kind!r}")
    if manifest.get("format_version") != FORMAT_VERSION:
        raise ArtefactError(f"{directory}: format version {manifest.get('format_version')!r}; "
                            f"this titlematch reads version {FORMAT_VERSION}")
    tables, arrays = {}, {}
    for name, info in manifest.get("files", {}).items():
        path = directory / name
        if Path(name).name != name or not path.is_file():
            raise ArtefactError(f"{path}: listed in the manifest but missing")
        if file_sha256(path) != info.get("sha256"):
            raise ArtefactError(f"{path}: checksum mismatch; the file was altered after it was saved")
        if name.endswith(".parquet"):
            tables[name[: -len(".parquet")]] = pd.read_parquet(path)
        elif name.endswith(".npy"):
            arrays[name[: -len(".npy")]] = np.load(path, allow_pickle=False)
        else:
            raise ArtefactError(f"{path}: unexpected file type in an artefact")
    return Artefact(kind, tables, arrays, manifest.get("meta", {}), manifest)
