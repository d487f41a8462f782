"""Choosing a CSV file's encoding in one streaming pass, with the evidence logged by the reader.

The rule: the encoding given, else UTF-8 with BOM, else UTF-8 when at least as many lines hold
valid UTF-8 non-ASCII text as lines that are not UTF-8 (the few that are not are then set aside
in the rejects, line by line, instead of garbling every accented row of the file), else cp1252
when no byte is undefined there, else latin-1. UTF-16/32 files are refused with a message, with
or without a byte-order mark, since rows are split on bytes.
"""
from __future__ import annotations

import codecs
import os
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError

_BLOCK_BYTES = 1 << 20

_CP1252_UNDEFINED = (0x81, 0x8D, 0x8F, 0x90, 0x9D)


def detect_file_encoding(path: str | os.PathLike, encoding: str | None = None) -> str:
    """Choose the encoding of a text file by streaming through it once (memory stays flat)."""
    path = Path(path)
    with open(path, "rb") as handle:
        return _scan(handle, path, encoding)[0]


@dataclass
class Evidence:
    """What the scan saw: lines with non-ASCII text that is valid UTF-8, and lines that are not UTF-8."""

    utf8_lines: int = 0
    bad_lines: int = 0

    def count(self, data: bytes) -> None:
        """Count the complete lines of ``data`` (a whole number of lines)."""
        try:
            text = data.decode("utf-8")
        except UnicodeDecodeError:
            for line in data.splitlines():
                try:
                    self.utf8_lines += len(line.decode("utf-8")) != len(line)
                except UnicodeDecodeError:
                    self.bad_lines += 1
            return
        if len(text) != len(data):  # some multi-byte characters: count the lines that hold them
            self.utf8_lines += sum(1 for line in data.splitlines() if not line.isascii())


def _utf16_without_bom(head: bytes) -> str | None:
    """``"little-endian"`` or ``"big-endian"`` when the file's start reads as UTF-16 text without a BOM:
    most ASCII characters then come with a NUL byte beside them, always on the same side."""
    sample = head[: len(head) // 2 * 2]
    if len(sample) < 8:
        return None
    even, odd = sample[0::2].count(0), sample[1::2].count(0)
    half = len(sample) // 2
    if odd >= 0.6 * half and even <= 0.05 * half:
        return "little-endian"
    if even >= 0.6 * half and odd <= 0.05 * half:
        return "big-endian"
    return None


def _scan(handle, path: Path, encoding: str | None) -> tuple[str, int, bool, Evidence]:
    """One pass over a file: (encoding, newline count, whether it ends with a newline, evidence)."""
    head = handle.read(4096)
    evidence = Evidence()
    if encoding:
        chosen = _checked_encoding(encoding, path)
        if chosen == "utf-8" and head.startswith(codecs.BOM_UTF8):
            chosen = "utf-8-sig"  # a BOM is not part of the first column's name
    else:
        if head[:2] in (codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE):
            raise InputError(f"{path}: the file is UTF-16 or UTF-32 (byte-order mark found); "
                             "save it as UTF-8 and try again")
        order = _utf16_without_bom(head)
        if order:
            raise InputError(f"{path}: the file looks like UTF-16 ({order}) without a byte-order mark "
                             "(a NUL byte beside every letter); save it as UTF-8 and try again")
        chosen = "utf-8-sig" if head.startswith(codecs.BOM_UTF8) else None
    handle.seek(0)
    scan = chosen is None
    cp1252 = scan
    newlines, last, tail = 0, b"\n", b""
    for block in iter(lambda: handle.read(_BLOCK_BYTES), b""):
        newlines += max(block.count(b"\n"), block.count(b"\r"))
        last = block[-1:]
        if scan:
            data = tail + block
            cut = max(data.rfind(b"\n"), data.rfind(b"\r")) + 1
            evidence.count(data[:cut])
            tail = data[cut:]
        if cp1252 and any(byte in block for byte in _CP1252_UNDEFINED):
            cp1252 = False
    if scan and tail:
        evidence.count(tail)
    if chosen is None:
        utf8 = evidence.bad_lines == 0 or evidence.utf8_lines >= evidence.bad_lines
        chosen = "utf-8" if utf8 else "cp1252" if cp1252 else "latin-1"
    return chosen, newlines, last in (b"\n", b"\r"), evidence


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
