"""Reading and writing tables: CSV, Parquet and spreadsheets in; rejects kept; outputs atomic.

Every reader returns strings (missing values as ``""``) plus the source row number in
``ROW_COLUMN``, so a later stage can name the file and row of anything it refuses.
Row numbers are what a person sees: the CSV line where the record starts (header = 1),
or the 1-based row of a Parquet or spreadsheet table below its header.

Hostile CSV input is read, not trusted. The encoding is chosen over the whole file and logged
(UTF-8 with or without BOM, else cp1252, else latin-1; or as given). A record is set aside in
the rejects with its row number and reason when it has the wrong number of fields, bad quoting,
a NUL byte, an undecodable or over-long physical line (``MAX_LINE_BYTES``) or a cell over the
csv module's field limit (131,072 characters); a cell over ``MAX_CELL_CHARS`` is truncated and
flagged there while its row is kept. A record that cannot be read sets aside its first line
only, and reading restarts on the next line, so one stray quote cannot swallow the rows after
it. Blank lines are not records. Nothing else is dropped.
"""
from __future__ import annotations

import codecs
import contextlib
import hashlib
import csv
import io
import logging
import os
import tempfile
from collections import deque
from dataclasses import dataclass
from itertools import accumulate
from pathlib import Path
from typing import Iterable, Iterator, Sequence

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

log = logging.getLogger(__name__)

ROW_COLUMN = "_row"
REJECT_COLUMNS = ["file", "row", "column", "reason", "value"]
MAX_CELL_CHARS = 10_000  # longer cells are truncated and the row flagged in rejects
MAX_LINE_BYTES = 4 << 20  # a longer physical CSV line is set aside unread, so memory stays bounded
_BLOCK_BYTES = 1 << 20
_CP1252_UNDEFINED = (0x81, 0x8D, 0x8F, 0x90, 0x9D)
CSV_SUFFIXES = {".csv", ".txt", ".tsv"}
PARQUET_SUFFIXES = {".parquet", ".pq"}
EXCEL_SUFFIXES = {".xlsx"}


class InputError(ValueError):
    """Bad input a person must fix; the message names the file, and the row and column when known."""


class Rejects:
    """Collects rows set aside, each with file, row, column and reason; nothing is dropped silently."""

    def __init__(self) -> None:
        self._rows: list[dict] = []

    def add(self, file, row, column: str, reason: str, value: object = "") -> None:
        text = "" if value is None else str(value)
        self._rows.append({"file": str(file), "row": row, "column": column,
                           "reason": reason, "value": text[:200]})

    def add_frame(self, frame: pd.DataFrame, file, column: str, reason: str) -> None:
        """Reject every row of ``frame`` (which carries ``ROW_COLUMN``) for the same reason."""
        values = frame[column] if column in frame.columns else pd.Series([""] * len(frame), index=frame.index)
        for row, value in zip(frame[ROW_COLUMN], values):
            self.add(file, int(row), column, reason, value)

    def extend(self, other: "Rejects") -> None:
        self._rows.extend(other._rows)

    def __len__(self) -> int:
        return len(self._rows)

    def rows(self) -> set[tuple[str, int]]:
        """Distinct (file, row) pairs rejected: several reasons for one row count once."""
        return {(r["file"], r["row"]) for r in self._rows}

    def frame(self) -> pd.DataFrame:
        return pd.DataFrame(self._rows, columns=REJECT_COLUMNS)

    def write(self, path: str | os.PathLike) -> Path:
        path = Path(path)
        write_table(self.frame(), path)
        return path


def rejects_path_for(out: str | os.PathLike) -> Path:
    """``OUT.rejects.csv`` beside an output file."""
    out = Path(out)
    return out.with_name(out.stem + ".rejects.csv")


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB blocks (inputs, artefact files, run checks)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def detect_encoding(data: bytes, encoding: str | None = None) -> str:
    """Return the encoding to decode ``data`` with: the one given, else UTF-8 (with or without BOM), else cp1252."""
    if encoding:
        return encoding
    if data.startswith(b"\xef\xbb\xbf"):
        return "utf-8-sig"
    try:
        data.decode("utf-8")
        return "utf-8"
    except UnicodeDecodeError:
        pass
    try:
        data.decode("cp1252")
        return "cp1252"
    except UnicodeDecodeError:
        return "latin-1"  # decodes any byte; cp1252 leaves five bytes undefined


def decode_bytes(data: bytes, path: str | os.PathLike = "<bytes>", encoding: str | None = None) -> str:
    chosen = detect_encoding(data, encoding)
    log.info("%s: decoded as %s", path, chosen)
    try:
        return data.decode(chosen)
    except (UnicodeDecodeError, LookupError) as exc:
        raise InputError(f"{path}: cannot decode as {chosen}: {exc}") from exc


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


def _sniff_delimiter(path: Path, first_line: str) -> str:
    if path.suffix.lower() == ".tsv":
        return "\t"
    counts = {d: first_line.count(d) for d in (",", "\t", ";", "|")}
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else ","


@dataclass(frozen=True)
class ReadPosition:
    """Where a table reader stands between two chunks, so a later reader can continue from there.

    ``records`` counts the records read (kept or set aside); for CSV, ``line`` is the number of
    physical lines before the next record and ``offset`` the byte offset of that line.
    """

    records: int = 0
    line: int = 0
    offset: int = 0

    def to_dict(self) -> dict:
        return {"records": self.records, "line": self.line, "offset": self.offset}

    @classmethod
    def from_dict(cls, data: dict) -> "ReadPosition":
        return cls(int(data["records"]), int(data.get("line", 0)), int(data.get("offset", 0)))


@dataclass
class TableChunk:
    """One chunk of a table: kept rows (strings + ``_row``), what was set aside or flagged, and positions."""

    index: int
    frame: pd.DataFrame
    rejects: Rejects
    records: int
    start: ReadPosition
    end: ReadPosition


class _BadLine(Exception):
    """A physical line that cannot be parsed at all (undecodable or over-long)."""


# A physical line is a tuple (number, start offset, end offset, payload), payload the decoded
# text or a _BadLine; plain tuples because there is one per line of a file of millions.


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
        self._ahead.append((self._line, start, self._offset, payload))


def _line_sample(item: tuple) -> str:
    text = item[3] if isinstance(item[3], str) else ""
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


def _clean_header(header: list, path: Path, strip: bool = True) -> list[str]:
    names = [str(h).strip().replace("\x00", "") if strip else str(h) for h in header]
    if ROW_COLUMN in names:
        raise InputError(f"{path}: column name {ROW_COLUMN!r} is reserved for row numbers; rename that column")
    seen: dict[str, int] = {}
    unique = []
    for name in names:  # duplicate names get .1, .2 ... as pandas does, so no column is lost
        if name in seen:
            seen[name] += 1
            new = f"{name}.{seen[name]}"
            while new in names or new in seen:
                seen[name] += 1
                new = f"{name}.{seen[name]}"
            log.warning("%s: duplicate column name %r renamed %r", path, name, new)
            seen[new] = 0
            unique.append(new)
        else:
            seen[name] = 0
            unique.append(name)
    return unique


def _check_cells(fields: list[str], header: list[str], row: int, path: Path, rejects: Rejects,
                 max_cell: int) -> bool:
    """Reject a record with a NUL byte (False); truncate and flag over-long cells (True, kept)."""
    for i, field in enumerate(fields):
        if "\x00" in field:
            rejects.add(path, row, header[i], "cell contains a NUL byte", field.replace("\x00", "\\0"))
            return False
    for i, field in enumerate(fields):
        if len(field) > max_cell:
            rejects.add(path, row, header[i], f"cell longer than {max_cell} characters, truncated", field[:50])
            fields[i] = field[:max_cell]
    return True


def _check_frame(frame: pd.DataFrame, path: Path, rejects: Rejects, max_cell: int) -> pd.DataFrame:
    """The same cell checks as :func:`_check_cells`, column-wise, for Parquet and spreadsheet chunks."""
    keep = pd.Series(True, index=frame.index)
    for column in frame.columns.drop(ROW_COLUMN):
        values = frame[column]
        nul = values.str.contains("\x00", regex=False) & keep
        for row, value in zip(frame.loc[nul, ROW_COLUMN], values[nul]):
            rejects.add(path, int(row), column, "cell contains a NUL byte", value.replace("\x00", "\\0"))
        keep &= ~nul
    for column in frame.columns.drop(ROW_COLUMN):
        values = frame[column]
        long = (values.str.len() > max_cell) & keep
        if long.any():
            for row, value in zip(frame.loc[long, ROW_COLUMN], values[long]):
                rejects.add(path, int(row), column, f"cell longer than {max_cell} characters, truncated", value[:50])
            frame.loc[long, column] = values[long].str.slice(0, max_cell)
    return frame[keep].reset_index(drop=True)


def _as_strings(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame.astype(object)
    return frame.where(frame.notna(), "").astype(str)


class TableReader:
    """Read a CSV, Parquet or .xlsx table in chunks of rows, with flat memory for CSV and Parquet.

    Each chunk holds up to ``chunk_rows`` records (kept or set aside) as strings plus ``_row``,
    the source row number, exactly as :func:`read_table` would number them. CSV is decoded line
    by line after one streaming pass that chooses the encoding (:func:`detect_file_encoding`,
    logged); Parquet is read by row groups; .xlsx is read whole and then cut into chunks.

    Parameters
    ----------
    path : the table; the format is chosen by suffix (.parquet/.pq, .xlsx, else CSV).
    chunk_rows : records per chunk.
    required : columns that must exist (InputError naming the file and its columns otherwise).
    encoding : CSV encoding; None to detect.
    max_cell : longer cells are truncated and flagged in the chunk's rejects (the row is kept).

    Example::

        reader = TableReader("titles.csv", chunk_rows=10_000, required=["title"])
        for chunk in reader.chunks():
            print(chunk.index, len(chunk.frame), len(chunk.rejects))
    """

    def __init__(self, path: str | os.PathLike, *, chunk_rows: int = 50_000, required: Sequence[str] = (),
                 encoding: str | None = None, max_cell: int = MAX_CELL_CHARS) -> None:
        self.path = Path(path)
        if not isinstance(chunk_rows, int) or chunk_rows < 1:
            raise ValueError(f"chunk_rows must be a positive integer, got {chunk_rows!r}")
        if not self.path.exists():
            raise InputError(f"{self.path}: no such file")
        if not self.path.is_file():
            raise InputError(f"{self.path}: not a file")
        self.chunk_rows = chunk_rows
        self.max_cell = max_cell
        self.encoding: str | None = None
        suffix = self.path.suffix.lower()
        self.format = "parquet" if suffix in PARQUET_SUFFIXES else "xlsx" if suffix in EXCEL_SUFFIXES else "csv"
        getattr(self, f"_open_{self.format}")(encoding)
        probe = pd.DataFrame(columns=self.columns)
        require_columns(probe, required, self.path)

    # -- opening: columns, row count (exact, or estimated from newlines for CSV) ------------------
    def _open_csv(self, encoding: str | None) -> None:
        with self._open_binary() as handle:
            self.encoding, newlines, complete = _scan(handle, self.path, encoding)
            log.info("%s: decoded as %s (%s)", self.path, self.encoding, "as requested" if encoding else "detected")
            lines = _Lines(handle, self.encoding, block=1 << 14)  # the header only
            try:
                first = next(lines)
            except StopIteration:
                raise InputError(f"{self.path}: the file is empty (no header row)") from None
            except _BadLine as exc:
                raise InputError(f"{self.path}: cannot read the header row: {exc}") from None
            self.delimiter = _sniff_delimiter(self.path, first)
            lines.give_back(list(lines.taken))
            try:
                header = next(csv.reader(lines, delimiter=self.delimiter, strict=True))
            except (csv.Error, _BadLine) as exc:
                raise InputError(f"{self.path}: cannot read the header row: {exc}") from None
            self._body = ReadPosition(0, *lines.position())
        self.columns = _clean_header(header, self.path)
        # an estimate for progress bars: blank lines and quoted newlines make it high
        self.total_rows = max(newlines - self._body.line + (not complete), 0)

    def _open_binary(self):
        return open(self.path, "rb")

    def _open_parquet(self, encoding: str | None) -> None:
        try:
            self._parquet = pq.ParquetFile(self.path)
        except Exception as exc:  # pyarrow raises several types for a damaged file
            raise InputError(f"{self.path}: not a readable Parquet file: {exc}") from exc
        schema = self._parquet.schema_arrow
        index = (schema.pandas_metadata or {}).get("index_columns", [])
        self._fields = [n for n in schema.names if n not in {i for i in index if isinstance(i, str)}]
        self.columns = _clean_header(self._fields, self.path, strip=False)
        self.total_rows = self._parquet.metadata.num_rows

    def _open_xlsx(self, encoding: str | None) -> None:
        frame = pd.read_excel(self.path, dtype=str, keep_default_na=False)
        self.columns = _clean_header(list(frame.columns), self.path, strip=False)
        frame.columns = self.columns
        self._sheet = frame.fillna("").astype(str)
        self.total_rows = len(frame)

    # -- reading --------------------------------------------------------------------------------
    def chunks(self, start: ReadPosition | None = None, first_index: int = 0) -> Iterator[TableChunk]:
        """Yield :class:`TableChunk` objects, from the beginning or from ``start`` (an earlier chunk's ``end``)."""
        start = start or ReadPosition()
        yield from getattr(self, f"_chunks_{self.format}")(start, first_index)

    def _chunks_csv(self, start: ReadPosition, index: int) -> Iterator[TableChunk]:
        if start.records == 0:
            start = self._body
        width = len(self.columns)
        with self._open_binary() as handle:
            lines = _Lines(handle, self.encoding, line=start.line, offset=start.offset)
            records: list[list[str]] = []
            rows: list[int] = []
            rejects = Rejects()
            count = 0
            max_cell = self.max_cell
            for row, fields, reason, text in _records(lines, self.delimiter, width):
                count += 1
                if fields is None:
                    rejects.add(self.path, row, "", reason, text.replace("\x00", "\\0"))
                elif (text is not None and len(text) <= max_cell and "\x00" not in text) or \
                        _check_cells(fields, self.columns, row, self.path, rejects, max_cell):
                    records.append(fields)
                    rows.append(row)
                if count == self.chunk_rows:
                    end = ReadPosition(start.records + count, *lines.position())
                    yield self._csv_chunk(index, records, rows, rejects, count, start, end)
                    index, start = index + 1, end
                    records, rows, rejects, count = [], [], Rejects(), 0
            if count:
                end = ReadPosition(start.records + count, *lines.position())
                yield self._csv_chunk(index, records, rows, rejects, count, start, end)

    def _csv_chunk(self, index, records, rows, rejects, count, start, end) -> TableChunk:
        frame = pd.DataFrame(records, columns=self.columns, dtype=object) if records \
            else pd.DataFrame({c: pd.Series([], dtype=object) for c in self.columns})
        frame[ROW_COLUMN] = pd.Series(rows, dtype="int64")
        return TableChunk(index, frame, rejects, count, start, end)

    def _chunks_parquet(self, start: ReadPosition, index: int) -> Iterator[TableChunk]:
        groups, first_row, skip = [], 0, start.records
        for g in range(self._parquet.num_row_groups):
            n = self._parquet.metadata.row_group(g).num_rows
            if first_row + n <= skip and not groups:
                first_row += n
                continue
            groups.append(g)
        drop = skip - first_row
        pending: pa.Table | None = None
        done = start.records
        batches = self._parquet.iter_batches(batch_size=min(self.chunk_rows, 1 << 16), row_groups=groups,
                                             columns=self._fields) if groups else iter(())
        for batch in batches:
            table = pa.Table.from_batches([batch])
            if drop:
                cut = min(drop, table.num_rows)
                table, drop = table.slice(cut), drop - cut
            pending = table if pending is None else pa.concat_tables([pending, table])
            while pending.num_rows >= self.chunk_rows:
                yield self._table_chunk(index, pending.slice(0, self.chunk_rows), done)
                pending = pending.slice(self.chunk_rows)
                index, done = index + 1, done + self.chunk_rows
        if pending is not None and pending.num_rows:
            yield self._table_chunk(index, pending, done)

    def _table_chunk(self, index: int, table, done: int) -> TableChunk:
        frame = table if isinstance(table, pd.DataFrame) else table.to_pandas()
        frame = _as_strings(frame)
        frame.columns = self.columns
        first = done + (2 if self.format == "xlsx" else 1)  # spreadsheet rows count the header row
        frame[ROW_COLUMN] = pd.RangeIndex(first, first + len(frame)).to_numpy(dtype="int64")
        rejects = Rejects()
        frame = _check_frame(frame.reset_index(drop=True), self.path, rejects, self.max_cell)
        end = ReadPosition(done + len(table))
        return TableChunk(index, frame, rejects, len(table), ReadPosition(done), end)

    def _chunks_xlsx(self, start: ReadPosition, index: int) -> Iterator[TableChunk]:
        for done in range(start.records, len(self._sheet), self.chunk_rows):
            yield self._table_chunk(index, self._sheet.iloc[done:done + self.chunk_rows], done)
            index += 1


def iter_table_chunks(path: str | os.PathLike, chunk_rows: int = 50_000, *, required: Sequence[str] = (),
                      encoding: str | None = None, rejects: Rejects | None = None,
                      max_cell: int = MAX_CELL_CHARS) -> Iterator[pd.DataFrame]:
    """Stream a table as DataFrames of up to ``chunk_rows`` records, numbered as :func:`read_table` numbers them.

    Rows set aside or flagged go to ``rejects``. Chunks whose records were all set aside are not
    yielded (their rejects still are collected).

    Example::

        rejects = Rejects()
        for frame in iter_table_chunks("titles.csv", 10_000, rejects=rejects):
            print(frame["_row"].iloc[0], len(frame))
    """
    reader = TableReader(path, chunk_rows=chunk_rows, required=required, encoding=encoding, max_cell=max_cell)
    for chunk in reader.chunks():
        if rejects is not None:
            rejects.extend(chunk.rejects)
        if len(chunk.frame):
            yield chunk.frame


class _TextTable(TableReader):
    """A CSV held in memory as text, read by the same parser as files."""

    def __init__(self, text: str, path: Path, max_cell: int) -> None:
        self.path, self.chunk_rows, self.max_cell, self.format = Path(path), 1 << 62, max_cell, "csv"
        self._data = text.encode("utf-8")
        self._open_csv("utf-8")

    def _open_binary(self):
        return io.BytesIO(self._data)


def _csv_records(text: str, path: Path, rejects: Rejects, max_cell: int) -> tuple[list[str], list[list[str]], list[int]]:
    """Parse CSV ``text`` already decoded into (header, records, row numbers)."""
    table = _TextTable(text, path, max_cell)
    records: list[list[str]] = []
    rows: list[int] = []
    for chunk in table.chunks():
        rejects.extend(chunk.rejects)
        records.extend(chunk.frame.drop(columns=[ROW_COLUMN]).values.tolist())
        rows.extend(chunk.frame[ROW_COLUMN].tolist())
    return table.columns, records, rows


def read_table(path: str | os.PathLike, *, required: Sequence[str] = (), encoding: str | None = None,
               rejects: Rejects | None = None, max_cell: int = MAX_CELL_CHARS) -> pd.DataFrame:
    """Read a CSV, Parquet or .xlsx table as strings with a ``_row`` column of source row numbers.

    Unreadable rows go to ``rejects`` (a fresh collector if none is given) and are not returned;
    over-long cells are truncated to ``max_cell`` characters and flagged there (the row is kept).
    Raises ``InputError`` naming the file when it is missing, empty or lacks a ``required`` column.
    For files too big for memory, use :class:`TableReader` or :func:`iter_table_chunks`.
    """
    rejects = rejects if rejects is not None else Rejects()
    reader = TableReader(path, chunk_rows=1 << 62, required=required, encoding=encoding, max_cell=max_cell)
    frames = []
    for chunk in reader.chunks():
        rejects.extend(chunk.rejects)
        frames.append(chunk.frame)
    if not frames:
        frame = pd.DataFrame({c: pd.Series([], dtype=object) for c in reader.columns})
        frame[ROW_COLUMN] = pd.Series([], dtype="int64")
        return frame
    return pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0].reset_index(drop=True)


def require_columns(frame: pd.DataFrame, required: Iterable[str], path: str | os.PathLike = "<table>") -> None:
    missing = [c for c in required if c not in frame.columns]
    if missing:
        have = [c for c in frame.columns if c != ROW_COLUMN]
        raise InputError(f"{path}: missing column(s) {', '.join(repr(m) for m in missing)}; "
                         f"the file has: {', '.join(have) if have else '(no columns)'}")


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


def write_table(frame: pd.DataFrame, path: str | os.PathLike) -> Path:
    """Write ``frame`` as CSV, Parquet or .xlsx (by the suffix), atomically; ``_row`` is not written."""
    path = Path(path)
    frame = frame.drop(columns=[ROW_COLUMN], errors="ignore")
    suffix = path.suffix.lower()
    with atomic_path(path) as tmp:
        if suffix in PARQUET_SUFFIXES:
            frame.to_parquet(tmp, index=False)
        elif suffix in EXCEL_SUFFIXES:
            frame.to_excel(tmp, index=False, engine="openpyxl")
        else:
            frame.to_csv(tmp, index=False, lineterminator="\n")
    return path
