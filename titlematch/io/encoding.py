"""Choosing a CSV file's encoding in one streaming pass, with the evidence logged by the reader.

The rule: the encoding given, else UTF-8 with BOM, else UTF-8 when every byte sequence is
valid, else cp1252 when no byte is undefined there, else latin-1. UTF-16/32 files are refused
with a message, since rows are split on bytes.
"""
from __future__ import annotations

import codecs
import os
from pathlib import Path

from .errors import InputError

_BLOCK_BYTES = 1 << 20

_CP1252_UNDEFINED = (0x81, 0x8D, 0x8F, 0x90, 0x9D)


def detect_file_encoding(path: str | os.PathLike, encoding: str | None = None) -> str:
    """Choose the encoding of a text file by streaming through it once (memory stays flat).

    The rule is :func:`detect_encoding`'s: the one given, else UTF-8 with BOM, else UTF-8 when
    every byte sequence is valid, else cp1252 when no byte is undefined there, else latin-1.
    UTF-16/32 files (by their BOM) are refused with a message, since rows are split on bytes.
    """
    path = Path(path)
    with open(path, "rb") as handle:
        return _scan(handle, path, encoding)[0]

def _scan(handle, path: Path, encoding: str | None) -> tuple[str, int, bool]:
    """One pass over a file: (encoding, newline count, whether it ends with a newline)."""
    head = handle.read(4)
    if encoding:
        chosen = _checked_encoding(encoding, path)
        if chosen == "utf-8" and head.startswith(codecs.BOM_UTF8):
            chosen = "utf-8-sig"  # a BOM is not part of the first column's name
    else:
        if head[:2] in (codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE):
            raise InputError(f"{path}: the file is UTF-16 or UTF-32 (byte-order mark found); "
                             "save it as UTF-8 and try again")
        chosen = "utf-8-sig" if head.startswith(codecs.BOM_UTF8) else None
    handle.seek(0)
    decoder = codecs.getincrementaldecoder("utf-8")()
    utf8 = cp1252 = chosen is None
    newlines, last = 0, b"\n"
    for block in iter(lambda: handle.read(_BLOCK_BYTES), b""):
        newlines += max(block.count(b"\n"), block.count(b"\r"))
        last = block[-1:]
        if utf8:
            try:
                decoder.decode(block)
            except UnicodeDecodeError:
                utf8 = False
        if cp1252 and any(byte in block for byte in _CP1252_UNDEFINED):
            cp1252 = False
    if utf8:
        try:
            decoder.decode(b"", final=True)
        except UnicodeDecodeError:
            utf8 = False
    if chosen is None:
        chosen = "utf-8" if utf8 else "cp1252" if cp1252 else "latin-1"
    return chosen, newlines, last in (b"\n", b"\r")

def _checked_encoding(encoding: str, path: Path) -> str:
    try:
        name = codecs.lookup(encoding).name
    except LookupError:
        raise InputError(f"{path}: unknown encoding {encoding!r}") from None
    # Rows are split on newline bytes, so only encodings that keep ASCII as single bytes can stream.
    if name != "utf-8-sig" and "a,\r\n".encode(name, errors="replace") != b"a,\r\n":
        raise InputError(f"{path}: encoding {encoding!r} is not supported for CSV input; "
                         "save the file as UTF-8 and try again")
    return name
