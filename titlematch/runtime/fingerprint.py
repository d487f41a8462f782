"""What a streaming run's output depends on, as content hashes: the resume identity of every command.

A run directory is resumed only when its options are equal (:func:`titlematch.runtime.runner.run_chunked`).
Options therefore hold the *content* of every artefact and file a command reads besides its input,
never a path: a dictionary, model or register index rebuilt in place under the same name must
make an interrupted run start over rather than splice old chunks onto new ones.
"""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

from ..io import file_sha256
from ..io.artefact import MANIFEST


def fingerprint(path: str | os.PathLike | None) -> str | None:
    """Content hash of an artefact directory or a file; None when not given.

    An artefact's manifest lists the SHA-256 of each of its files and the settings saved with them
    (a model's threshold, a coder's parameters), so the manifest's own SHA-256 stands for all of it.
    A directory without a manifest is hashed file by file, in name order.
    """
    if path is None or str(path) == "":
        return None
    path = Path(path)
    if path.is_file():
        return file_sha256(path)
    if (path / MANIFEST).is_file():
        return file_sha256(path / MANIFEST)
    if path.is_dir():
        digest = hashlib.sha256()
        for item in sorted(p for p in path.rglob("*") if p.is_file()):
            digest.update(item.relative_to(path).as_posix().encode("utf-8") + b"\0")
            digest.update(file_sha256(item).encode("ascii"))
        return digest.hexdigest()
    return None  # missing: the command's own loading reports it


def run_options(command: str, artefacts: dict[str, str | os.PathLike | None], **settings) -> dict:
    """The ``options`` of a run: the command, the fingerprint of each artefact or side file it reads
    (by role: ``dictionary``, ``model``, ``register``, ``training`` ...) and its settings."""
    return {"command": command, **{name: fingerprint(path) for name, path in artefacts.items()}, **settings}
