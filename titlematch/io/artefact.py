"""Saved artefacts (dictionaries, confidence models, register indexes) in a safe, versioned layout.

An artefact is a directory of Parquet tables and ``.npy`` arrays (and, for a table read row by row
from many processes, an uncompressed Arrow IPC file, memory-mapped when loaded) plus ``manifest.json``
with the kind, format version, library version, build metadata and a SHA-256 for every
file, and a SHA-256 of the manifest's own content, so that settings kept there (a model's
threshold, a dictionary's options) cannot be edited unnoticed either. Loading verifies all of
it, checks each array's shape and table's row count against the manifest, and reads only data
(``allow_pickle=False``), so a crafted artefact can make loading fail, with a one-line
``ArtefactError``, but cannot run code.
"""
from __future__ import annotations

import ctypes
import glob
import hashlib
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
import scipy.sparse as sp

from .. import __version__
from . import file_sha256

FORMAT_VERSION = 2  # 2: the manifest carries a checksum of its own content
MANIFEST = "manifest.json"


class ArtefactError(ValueError):
    """A saved artefact is missing, of another kind or version, or was altered since it was saved."""


class _Parts(dict):
    """The tables, arrays or meta of a loaded artefact: asking for one that is not there is an
    ``ArtefactError`` naming the artefact, not a ``KeyError`` deep inside a loader."""

    def __init__(self, data: dict, what: str, directory: Path) -> None:
        super().__init__(data)
        self._what, self._directory = what, directory

    def __missing__(self, key):
        raise ArtefactError(f"{self._directory}: the manifest lists no {self._what} {key!r}; "
                            "the artefact is incomplete or was altered")


def manifest_checksum(manifest: dict) -> str:
    """SHA-256 of the manifest's content (every key but ``checksum``) as canonical JSON."""
    content = {k: v for k, v in manifest.items() if k != "checksum"}
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


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
                   arrays: dict[str, np.ndarray] | None = None, meta: dict | None = None,
                   mapped: tuple[str, ...] = ()) -> dict:
    """Write an artefact's files into an existing ``directory`` (a staging directory: no atomicity here);
    the manifest is written last, so a directory without one was never finished. Tables named in
    ``mapped`` are written as uncompressed Arrow IPC files, which ``load_artefact`` memory-maps."""
    directory = Path(directory)
    files = {}
    for name, table in tables.items():
        if name in mapped:
            target = directory / f"{name}.arrow"
            _write_arrow(table.reset_index(drop=True), target)
        else:
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
    manifest = json.loads(json.dumps(manifest, default=str))  # the checksum covers what is written
    manifest["checksum"] = manifest_checksum(manifest)
    (directory / MANIFEST).write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    return manifest


@contextmanager
def staged_directory(directory: str | os.PathLike):
    """Yield an empty staging directory beside ``directory``; on success it takes ``directory``'s place.

    A process killed at any moment leaves at ``directory`` either what was there before or the
    finished new directory: where the kernel can swap two paths in one step (Linux
    ``renameat2(RENAME_EXCHANGE)``) it does; elsewhere the old directory is moved aside first, and
    a kill in between leaves nothing at ``directory`` (the old one stays in ``.NAME.old.*``).
    Staging directories are hidden (``.NAME.*``), never read, and named after the process that
    writes them: those of killed runs (their process gone) are removed when the next run starts.
    """
    directory = Path(directory)
    directory.parent.mkdir(parents=True, exist_ok=True)
    remove_abandoned_staging(directory)
    staging = Path(tempfile.mkdtemp(prefix=f".{directory.name}.{_owner_tag()}.", dir=directory.parent))
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


def _process_start(pid: int) -> str:
    """When process ``pid`` started, in clock ticks since boot (Linux), "" where unknown or gone."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return ""
    return stat.rsplit(")", 1)[-1].split()[19]  # field 22, counted after the command name


def _owner_tag() -> str:
    """This process, as written into its staging directories' names: host, pid and start time (a pid
    reused by a later process has another start time)."""
    host = hashlib.sha256(os.uname().nodename.encode()).hexdigest()[:8] if hasattr(os, "uname") else "0"
    return f"w{host}-{os.getpid()}-{_process_start(os.getpid()) or 0}"


def remove_abandoned_staging(directory: str | os.PathLike) -> list[Path]:
    """Remove staging directories of ``directory`` left by killed runs on this machine: named after a
    process that no longer runs. Another machine's (a shared disk) and a live process's are left
    alone; so is everything where the process table cannot be read. Returns what was removed."""
    directory = Path(directory)
    if not Path("/proc/self/stat").exists():
        return []
    host = _owner_tag().split("-")[0]
    removed = []
    for path in directory.parent.glob(f".{glob.escape(directory.name)}.w*-*-*.*"):
        tag = path.name[len(directory.name) + 2:].split(".")[0]
        parts = tag.split("-")
        if len(parts) != 3 or parts[0] != host or not parts[1].isdigit() or not path.is_dir():
            continue
        if _process_start(int(parts[1])) == parts[2]:
            continue  # that run is still writing
        shutil.rmtree(path, ignore_errors=True)
        removed.append(path)
    return removed


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
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError, RecursionError) as exc:
        raise ArtefactError(f"{path}: manifest is not valid JSON: {exc}") from exc
    if not isinstance(manifest, dict):
        raise ArtefactError(f"{path}: manifest is not a JSON object")
    return manifest


def _checked_manifest(directory: Path, kind: str) -> dict:
    manifest = read_manifest(directory)
    path = directory / MANIFEST
    if manifest.get("kind") != kind:
        raise ArtefactError(f"{directory}: holds a {manifest.get('kind')!r}, expected a {kind!r}")
    if manifest.get("format_version") != FORMAT_VERSION:
        raise ArtefactError(f"{directory}: format version {manifest.get('format_version')!r}; "
                            f"this titlematch reads version {FORMAT_VERSION}: build it again")
    if manifest.get("checksum") != manifest_checksum(manifest):
        raise ArtefactError(f"{path}: checksum mismatch; the manifest (its file list or settings) "
                            "was altered after it was saved")
    files, meta = manifest.get("files"), manifest.get("meta")
    if not isinstance(files, dict) or not all(isinstance(v, dict) for v in files.values()):
        raise ArtefactError(f"{path}: 'files' must map each file name to its checksum")
    if not isinstance(meta, dict):
        raise ArtefactError(f"{path}: 'meta' must be a JSON object")
    return manifest


def load_artefact(directory: str | os.PathLike, kind: str, arrow_tables=()) -> Artefact:
    """Load and verify an artefact of ``kind``; raise ``ArtefactError`` naming the offending file.
    Tables named in ``arrow_tables`` keep Arrow's columns (``pd.ArrowDtype``): a text column of
    millions of rows then takes its bytes and offsets, not a Python string object per value."""
    directory = Path(directory)
    manifest = _checked_manifest(directory, kind)
    tables, arrays = {}, {}
    for name, info in manifest["files"].items():
        path = directory / name
        if Path(name).name != name or not path.is_file():
            raise ArtefactError(f"{path}: listed in the manifest but missing")
        if file_sha256(path) != info.get("sha256"):
            raise ArtefactError(f"{path}: checksum mismatch; the file was altered after it was saved")
        try:
            stem, suffix = os.path.splitext(name)
            if suffix in (".parquet", ".arrow"):
                if suffix == ".arrow":
                    table = read_mapped_table(path)
                elif stem in arrow_tables:
                    table = pd.read_parquet(path, dtype_backend="pyarrow")
                else:
                    table = pd.read_parquet(path)
                if "rows" in info and len(table) != info["rows"]:
                    raise ArtefactError(f"{path}: {len(table)} rows; the manifest says {info['rows']}")
                tables[stem] = table
            elif name.endswith(".npy"):
                array = np.load(path, allow_pickle=False)
                if "shape" in info and list(array.shape) != info["shape"]:
                    raise ArtefactError(f"{path}: shape {list(array.shape)}; the manifest says {info['shape']}")
                arrays[name[: -len(".npy")]] = array
            else:
                raise ArtefactError(f"{path}: unexpected file type in an artefact")
        except ArtefactError:
            raise
        except Exception as exc:  # pyarrow and numpy raise several types for a damaged file
            raise ArtefactError(f"{path}: cannot be read: {exc}") from None
    return Artefact(kind, _Parts(tables, "table", directory), _Parts(arrays, "array", directory),
                    _Parts(manifest["meta"], "setting", directory), manifest)


def _write_arrow(frame: pd.DataFrame, target: Path) -> None:
    import pyarrow as pa

    table = pa.Table.from_pandas(frame, preserve_index=False)
    with pa.OSFile(str(target), "wb") as sink, pa.ipc.new_file(sink, table.schema) as writer:
        writer.write_table(table)


def read_mapped_table(path: str | os.PathLike) -> pd.DataFrame:
    """An Arrow IPC file as a frame of Arrow columns (``pd.ArrowDtype``) over a memory map of the file:
    nothing is copied, pages are read when rows are taken, and processes reading the same file
    share them (the operating system's page cache) instead of each holding a copy."""
    import pyarrow as pa

    table = pa.ipc.open_file(pa.memory_map(str(path), "r")).read_all()
    return table.to_pandas(types_mapper=pd.ArrowDtype, self_destruct=False)


def csr_arrays(name: str, matrix: sp.csr_matrix) -> dict[str, np.ndarray]:
    """A CSR matrix as the plain arrays an artefact stores: ``{name}_data``, ``_indices``, ``_indptr``, ``_shape``."""
    return {f"{name}_data": matrix.data, f"{name}_indices": matrix.indices, f"{name}_indptr": matrix.indptr,
            f"{name}_shape": np.asarray(matrix.shape, dtype=np.int64)}


def csr_from(arrays, name: str) -> sp.csr_matrix:
    """The CSR matrix ``csr_arrays`` stored under ``name``."""
    shape = tuple(int(x) for x in arrays[f"{name}_shape"])
    return sp.csr_matrix((arrays[f"{name}_data"], arrays[f"{name}_indices"], arrays[f"{name}_indptr"]),
                         shape=shape)
