"""Files on disk: table formats by suffix, checksums, and atomic replacement."""
from __future__ import annotations

import contextlib
import hashlib
import os
import tempfile
from pathlib import Path
from typing import Iterable, Iterator

from .errors import InputError

CSV_SUFFIXES = {".csv", ".txt", ".tsv"}

PARQUET_SUFFIXES = {".parquet", ".pq"}

EXCEL_SUFFIXES = {".xlsx"}


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB blocks (inputs, artefact files, run checks)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def refuse_overwrite(out: str | os.PathLike, inputs: Iterable, option: str = "--out") -> None:
    """Raise ``InputError`` when writing ``out`` would replace one of ``inputs`` (None entries are
    skipped): the same file by path or by inode (a hard link), or a directory that holds an input,
    since an artefact directory is replaced whole. The one check every command that writes runs."""
    out = Path(out)
    target = out.resolve()
    for given in inputs:
        if given is None or str(given) == "":
            continue
        source = Path(given)
        resolved = source.resolve()
        same = target == resolved or (out.exists() and source.exists() and os.path.samefile(out, source))
        if same or target in resolved.parents:
            what = "is" if same else "holds"
            raise InputError(f"{option} {out} {what} the input {source}: the output would overwrite the input; "
                             f"choose another {option}")


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path`` in one rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp_path, 0o666 & ~umask)  # mkstemp makes owner-only files; outputs are meant to be shared
        os.replace(tmp_path, path)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()
