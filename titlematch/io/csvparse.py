"""Hostile CSV parsing: physical lines read block by block, records that restart after a bad line.

A record the parser cannot read (bad quoting, undecodable or over-long line), or one spanning
several lines with the wrong number of fields, sets aside its first line only; reading restarts
on the next line, so one stray quote cannot swallow the rows after it.
"""
from __future__ import annotations

import codecs
import csv
from collections import deque
from itertools import accumulate
from pathlib import Path
from typing import Iterator

from .encoding import _BLOCK_BYTES

MAX_LINE_BYTES = 4 << 20  # a longer physical CSV line is set aside unread, so memory stays bounded


def _sniff_delimiter(path: Path, first_line: str) -> str:
    if path.suffix.lower() == ".tsv":
        return "\t"
    counts = {d: first_line.count(d) for d in (",", "\t", ";", "|")}
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else ","

class _BadLine(Exception):
    """A physical line that cannot be parsed at all (undecodable or over-long)."""

class _Lines:
    """Physical lines of a CSV file read block by block, decoded one at a time, numbered, with byte offsets.

    Lines end at ``\\n``, ``\\r\\n`` or ``\\r`` (the csv module's ``newline=""`` convention). Lines handed
    to the parser since :meth:`mark` are kept, so a record the parser refuses can give back all but its
    first line to be read again (see :func:`_records`).
    """

    def __init__(self, handle, codec: str, *, line: int = 0, offset: int = 0,
                 max_bytes: int | None = None, block: int = _BLOCK_BYTES) -> None:
        self.handle = handle
        self.strip_bom = codec == "utf-8-sig" and offset == 0
        self.codec = "utf-8" if codec == "utf-8-sig" else codec
        self.max_bytes = max_bytes if max_bytes is not None else MAX_LINE_BYTES
        self.block = block
        self.taken: list[tuple] = []
        self._ahead: deque[tuple] = deque()
        self._returned: deque[tuple] = deque()
        self._tail = b""
        self._skipped = 0  # bytes of an over-long line already dropped
        self._eof = False
        self._line, self._offset = line, offset  # last line read from the file
        self.last: tuple = (line, offset, offset, "")  # last line handed out
        handle.seek(offset)

    def __iter__(self) -> "_Lines":
        return self

    def __next__(self) -> str:
        if self._returned:
            item = self._returned.popleft()
        else:
            while not self._ahead and not self._eof:
                self._read_block()
            if not self._ahead:
                raise StopIteration
            item = self._ahead.popleft()
        self.last = item
        self.taken.append(item)
        payload = item[3]
        if payload.__class__ is _BadLine:
            raise payload
        return payload

    def peek(self) -> tuple | None:
        """The next line without taking it, or None at the end."""
        if self._returned:
            return self._returned[0]
        while not self._ahead and not self._eof:
            self._read_block()
        return self._ahead[0] if self._ahead else None

    def skip(self) -> None:
        """Take the line :meth:`peek` returned, outside the csv parser."""
        self.last = (self._returned or self._ahead).popleft()

    def mark(self) -> None:
        self.taken.clear()

    def give_back(self, items: list[tuple]) -> None:
        self._returned.extendleft(reversed(items))

    def position(self) -> tuple[int, int]:
        """(lines before the next unread line, byte offset of it)."""
        if self._returned:
            first = self._returned[0]
            return first[0] - 1, first[1]
        return self.last[0], self.last[2]

    def _read_block(self) -> None:
        block = self.handle.read(self.block)
        if not block:
            self._eof = True
            if self._tail or self._skipped:
                self._emit(self._tail)
            self._tail = b""
            return
        pieces = (self._tail + block).splitlines(keepends=True)
        tail = pieces.pop()
        if tail.endswith(b"\n"):  # complete; a final b"\r" may still be half of b"\r\n"
            pieces.append(tail)
            tail = b""
        if pieces and (self._skipped or (self.strip_bom and self._offset == 0)):
            self._emit(pieces.pop(0))  # the end of an over-long line, or the line with the BOM
        if pieces:
            self._emit_many(pieces)
        if len(tail) > self.max_bytes:
            self._skipped += len(tail)
            tail = b""
        self._tail = tail

    def _emit_many(self, pieces: list[bytes]) -> None:
        """Number and decode a block's lines in one go (the common case); line by line if one is bad."""
        lengths = list(map(len, pieces))
        codec = self.codec
        try:
            if max(lengths) > self.max_bytes:
                raise ValueError
            texts = [piece.decode(codec) for piece in pieces]
        except (UnicodeDecodeError, ValueError):
            for piece in pieces:
                self._emit(piece)
            return
        ends = list(accumulate(lengths, initial=self._offset))
        first = self._line + 1
        self._ahead.extend(zip(range(first, first + len(pieces)), ends, ends[1:], texts))
        self._line += len(pieces)
        self._offset = ends[-1]

    def _emit(self, raw: bytes) -> None:
        size = self._skipped + len(raw)
        start = self._offset
        self._line += 1
        self._offset += size
        if size > self.max_bytes:
            payload = _BadLine(f"line longer than {self.max_bytes:,} bytes, not read")
            self._skipped = 0
        else:
            if self.strip_bom and start == 0 and raw.startswith(codecs.BOM_UTF8):
                raw = raw[len(codecs.BOM_UTF8):]
            try:
                payload = raw.decode(self.codec)
            except UnicodeDecodeError as exc:
                payload = _BadLine(f"cannot decode as {self.codec}: byte {raw[exc.start]:#04x} "
                                   f"at position {exc.start}")
                payload.sample = raw[:400].decode(self.codec, "backslashreplace")  # shown in the rejects
        self._ahead.append((self._line, start, self._offset, payload))

def _line_sample(item: tuple) -> str:
    text = item[3] if isinstance(item[3], str) else getattr(item[3], "sample", "")
    return text.rstrip("\r\n").replace("\x00", "\\0")

def _records(lines: _Lines, delimiter: str, width: int) -> Iterator[tuple[int, list[str] | None, str, str | None]]:
    """Yield ``(row, fields, reason, text)`` per record; ``fields`` is None for a record set aside.

    ``text`` is the record's line when it is a single line read directly, else None (kept records)
    or a sample of the line (records set aside).

    A record the parser cannot read (bad quoting, undecodable or over-long line), or one spanning
    several lines with the wrong number of fields (a stray quote swallowing the lines after it),
    sets aside its first line only; reading restarts on the next line, so every other physical
    line is still read and accounted for.
    """
    reader = csv.reader(lines, delimiter=delimiter, strict=True)
    limit = csv.field_size_limit()
    ahead, returned = lines._ahead, lines._returned
    while True:
        if ahead and not returned:
            item = ahead[0]
        else:
            item = lines.peek()
            if item is None:
                return
        text = item[3]
        if text.__class__ is str and '"' not in text:
            # No quote on its first line: the record is this one line, and csv would split it on the
            # delimiter; done here directly (it is most lines), with the same results and messages.
            lines.last = (returned or ahead).popleft()
            text = text.rstrip("\r\n")
            if not text:
                continue  # a blank line is not a record
            fields = text.split(delimiter)
            if len(fields) != width:
                yield item[0], None, f"row has {len(fields)} fields, header has {width}", text
            elif len(text) > limit and any(len(f) > limit for f in fields):
                yield item[0], None, f"unreadable CSV row: field larger than field limit ({limit})", text
            else:
                yield item[0], fields, "", text
            continue
        lines.mark()
        try:
            fields = next(reader)
        except StopIteration:
            return
        except (csv.Error, _BadLine) as exc:
            taken = list(lines.taken)
            first = taken[0]
            lines.give_back(taken[1:])
            if isinstance(first[3], _BadLine):
                reason = str(first[3])
            elif len(taken) > 1:
                reason = f"unreadable CSV record over lines {first[0]}-{taken[-1][0]}: {exc}"
            else:
                reason = f"unreadable CSV row: {exc}"
            yield first[0], None, reason, _line_sample(first)
            continue
        if not fields or (len(fields) == 1 and fields[0] == "" and width > 1):
            continue  # a blank line is not a record
        first = lines.taken[0]
        if len(fields) != width:
            if len(lines.taken) > 1:
                lines.give_back(lines.taken[1:])
                yield first[0], None, (f"record over lines {first[0]}-{lines.taken[-1][0]} has "
                                           f"{len(fields)} fields, header has {width} (unbalanced quote?)"), \
                    _line_sample(first)
            else:
                yield first[0], None, f"row has {len(fields)} fields, header has {width}", \
                    delimiter.join(fields)
            continue
        yield first[0], fields, "", None
