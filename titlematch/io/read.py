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

import csv
import json
import logging
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator, Sequence

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .csvparse import _BadLine, _Lines, _records, _sniff_delimiter
from .encoding import _scan
from .errors import InputError
from .files import EXCEL_SUFFIXES, PARQUET_SUFFIXES
from .rejects import ROW_COLUMN, Rejects, require_columns

log = logging.getLogger("titlematch.io")

MAX_CELL_CHARS = 10_000  # longer cells are truncated and the row flagged in rejects


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

def _clean_header(header: list, path: Path, strip: bool = True) -> list[str]:
    names = [str(h).strip().replace("\x00", "") if strip else str(h) for h in header]
    nul = [n for n in names if "\x00" in n]
    if nul:  # the library's working columns start with NUL: a read column never may
        raise InputError(f"{path}: column name {nul[0]!r} contains a NUL character; rename that column")
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

def _arrow_column_strings(column: pa.ChunkedArray) -> tuple[np.ndarray, dict[int, str]]:
    """A Parquet column as text, exactly: Arrow casts integers (nullable ones too, which pandas would
    turn into floats), decimals and dates to their digits; binary cells are decoded as UTF-8 and
    the ones that are not valid UTF-8 come back in ``{position: (reason, shown value)}``. Missing
    values are ``""``."""
    kind = column.type
    if pa.types.is_dictionary(kind):
        column = pa.chunked_array([c.dictionary_decode() for c in column.chunks], kind.value_type)
        kind = column.type
    bad: dict[int, tuple[str, str]] = {}
    if pa.types.is_binary(kind) or pa.types.is_large_binary(kind) or pa.types.is_fixed_size_binary(kind):
        values = np.empty(len(column), dtype=object)
        for i, raw in enumerate(column.to_pylist()):
            try:
                values[i] = "" if raw is None else raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                values[i] = ""
                bad[i] = (f"binary cell is not UTF-8 text (byte {raw[exc.start]:#04x} at position {exc.start})",
                          raw[:200].decode("utf-8", "backslashreplace"))
        return values, bad
    if not (pa.types.is_string(kind) or pa.types.is_large_string(kind)):
        try:
            column = pc.cast(column, pa.string())
        except (pa.ArrowNotImplementedError, pa.ArrowInvalid):  # lists, structs, maps: their JSON text
            values = np.array(["" if v is None else json.dumps(v, default=str, ensure_ascii=False)
                               for v in column.to_pylist()], dtype=object)
            return values, bad
    values = column.to_numpy(zero_copy_only=False).astype(object)
    values[pd.isna(values)] = ""
    return values, bad


def _arrow_strings(table: pa.Table, columns: list[str], path: Path, first: int, rejects: Rejects) -> pd.DataFrame:
    """A Parquet chunk as a frame of strings with ``ROW_COLUMN``; rows holding undecodable binary cells
    go to ``rejects`` with their row and column and are left out."""
    data, keep = {}, np.ones(table.num_rows, dtype=bool)
    for name, column in zip(columns, table.columns):
        values, bad = _arrow_column_strings(column)
        for position, (reason, shown) in bad.items():
            rejects.add(path, first + position, name, reason, shown)
            keep[position] = False
        data[name] = values
    frame = pd.DataFrame(data, columns=columns) if columns else pd.DataFrame(index=range(table.num_rows))
    frame[ROW_COLUMN] = np.arange(first, first + table.num_rows, dtype="int64")
    return frame[keep].reset_index(drop=True) if not keep.all() else frame


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
        self.encoding_note = ""  # the encoding and the evidence behind it, for the summary line
        suffix = self.path.suffix.lower()
        self.format = "parquet" if suffix in PARQUET_SUFFIXES else "xlsx" if suffix in EXCEL_SUFFIXES else "csv"
        getattr(self, f"_open_{self.format}")(encoding)
        probe = pd.DataFrame(columns=self.columns)
        require_columns(probe, required, self.path)

    # -- opening: columns, row count (exact, or estimated from newlines for CSV) ------------------
    def _open_csv(self, encoding: str | None) -> None:
        with self._open_binary() as handle:
            self.encoding, newlines, complete, evidence = _scan(handle, self.path, encoding)
            self.encoding_note = f"{self.encoding} ({'as requested' if encoding else 'detected'})"
            if self.encoding.startswith("utf-8") and evidence.bad_lines:
                # a UTF-8 file with a few lines that are not: those lines go to the rejects, the rest stays intact
                self.encoding_note += f", {evidence.bad_lines:,} line(s) not UTF-8 set aside in the rejects"
                log.warning("%s: decoded as %s", self.path, self.encoding_note)
            elif evidence.utf8_lines and not self.encoding.startswith("utf-8"):
                self.encoding_note += f"; {evidence.utf8_lines:,} line(s) read as UTF-8 would differ"
                log.warning("%s: decoded as %s", self.path, self.encoding_note)
            else:
                log.info("%s: decoded as %s", self.path, self.encoding_note)
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
        # pandas keeps a named index (say record_id) as a column: it is data and is read like the
        # others; an unnamed index (__index_level_0__, row labels pandas made up) is left out, said so
        index = (schema.pandas_metadata or {}).get("index_columns", [])
        unnamed = {i for i in index if isinstance(i, str) and i.startswith("__index_level_")}
        if unnamed:
            log.warning("%s: unnamed pandas index column(s) %s not read (row labels, not data)",
                        self.path, ", ".join(sorted(unnamed)))
        self._fields = [n for n in schema.names if n not in unnamed]
        self.columns = _clean_header(self._fields, self.path, strip=False)
        self.total_rows = self._parquet.metadata.num_rows

    def _open_xlsx(self, encoding: str | None) -> None:
        frame = pd.read_excel(self.path, dtype=str, keep_default_na=False)
        self.columns = _clean_header(list(frame.columns), self.path, strip=False)
        frame.columns = self.columns
        self._sheet = frame.fillna("").astype(str)
        self.total_rows = len(frame)
        self._unsaved_formulas = _unsaved_formulas(self.path, self._sheet)

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
        first = done + (2 if self.format == "xlsx" else 1)  # spreadsheet rows count the header row
        rejects = Rejects()
        if isinstance(table, pd.DataFrame):
            frame = _as_strings(table)
            frame.columns = self.columns
            frame[ROW_COLUMN] = pd.RangeIndex(first, first + len(frame)).to_numpy(dtype="int64")
        else:
            frame = _arrow_strings(table, self.columns, self.path, first, rejects)
        frame = _check_frame(frame.reset_index(drop=True), self.path, rejects, self.max_cell)
        end = ReadPosition(done + len(table))
        return TableChunk(index, frame, rejects, len(table), ReadPosition(done), end)

    def _chunks_xlsx(self, start: ReadPosition, index: int) -> Iterator[TableChunk]:
        for done in range(start.records, len(self._sheet), self.chunk_rows):
            chunk = self._table_chunk(index, self._sheet.iloc[done:done + self.chunk_rows], done)
            if self._unsaved_formulas:  # a formula whose value was never saved: its cell would read empty
                rows = chunk.frame[ROW_COLUMN].to_numpy()
                bad = np.isin(rows, list(self._unsaved_formulas))
                for row in rows[bad]:
                    column, formula = self._unsaved_formulas[int(row)]
                    chunk.rejects.add(self.path, int(row), column, "formula with no saved value (the file was "
                                      "not saved by a spreadsheet program, which stores each formula's result)",
                                      formula)
                chunk.frame = chunk.frame[~bad].reset_index(drop=True)
            yield chunk
            index += 1


def _unsaved_formulas(path: Path, sheet: pd.DataFrame) -> dict[int, tuple[str, str]]:
    """Spreadsheet rows holding a formula with no saved result, as ``{row: (column, formula)}``.

    A spreadsheet program saves each formula's result beside it, and that result is what is read.
    A file written by a program that does not (a script, a library) holds the formula alone: its cell
    would read as empty, changing the value, so the row is set aside instead. Only rows with an
    empty cell can hold one, so the sheet is read a second time (formulas, not values) only then,
    and only those rows."""
    empty = (sheet.to_numpy(dtype=object) == "")
    rows = np.flatnonzero(empty.any(axis=1))
    if not len(rows):
        return {}
    from openpyxl import load_workbook

    book = load_workbook(path, read_only=True, data_only=False)
    try:
        found: dict[int, tuple[str, str]] = {}
        first, last = int(rows[0]) + 2, int(rows[-1]) + 2
        cells_of = book.worksheets[0].iter_rows(min_row=first, max_row=last, max_col=len(sheet.columns))
        for row, cells in enumerate(cells_of, start=first):
            for col, cell in enumerate(cells):
                if empty[row - 2, col] and getattr(cell, "data_type", "") == "f":
                    found[row] = (sheet.columns[col], str(cell.value))
                    break
        return found
    finally:
        book.close()


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


def read_column(path: str | os.PathLike, column: str) -> pd.Series:
    """One column of a table this library wrote (CSV, Parquet or .xlsx, by suffix) as strings:
    for the counts a command prints after writing its output."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix in PARQUET_SUFFIXES:
        return pd.read_parquet(path, columns=[column])[column].astype(str)
    if suffix in EXCEL_SUFFIXES:
        return pd.read_excel(path, usecols=[column], dtype=str, keep_default_na=False)[column]
    return pd.read_csv(path, usecols=[column], dtype=str, keep_default_na=False)[column]
