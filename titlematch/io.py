"""Reading and writing tables: CSV, Parquet and spreadsheets in; rejects kept; outputs atomic.

Every reader returns strings (missing values as ``""``) plus the source row number in
``ROW_COLUMN``, so a later stage can name the file and row of anything it refuses.
Row numbers are what a person sees: the CSV line where the record starts (header = 1),
or the 1-based row of a Parquet or spreadsheet table below its header.
"""
from __future__ import annotations

import contextlib
import csv
import io
import logging
import os
import tempfile
from pathlib import Path
from typing import Iterable, Iterator, Sequence

import pandas as pd

log = logging.getLogger(__name__)

ROW_COLUMN = "_row"
REJECT_COLUMNS = ["file", "row", "column", "reason", "value"]
MAX_CELL_CHARS = 10_000  # longer cells are truncated and the row flagged in rejects
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


def _sniff_delimiter(path: Path, first_line: str) -> str:
    if path.suffix.lower() == ".tsv":
        return "\t"
    counts = {d: first_line.count(d) for d in (",", "\t", ";", "|")}
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else ","


def _csv_records(text: str, path: Path, rejects: Rejects, max_cell: int) -> tuple[list[str], list[list[str]], list[int]]:
    first_line = text.split("\n", 1)[0]
    delimiter = _sniff_delimiter(path, first_line)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    try:
        header = next(reader)
    except StopIteration:
        raise InputError(f"{path}: the file is empty (no header row)") from None
    header = [h.strip().replace("\x00", "") for h in header]
    width = len(header)
    records: list[list[str]] = []
    rows: list[int] = []
    line = reader.line_num
    while True:
        start = line + 1
        try:
            fields = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            rejects.add(path, start, "", f"unreadable CSV row: {exc}")
            line = reader.line_num
            continue
        line = reader.line_num
        if not fields or (len(fields) == 1 and fields[0] == "" and width > 1):
            continue  # a blank line is not a record
        if len(fields) != width:
            rejects.add(path, start, "", f"row has {len(fields)} fields, header has {width}", delimiter.join(fields))
            continue
        bad = next((i for i, f in enumerate(fields) if "\x00" in f), None)
        if bad is not None:
            rejects.add(path, start, header[bad], "cell contains a NUL byte", fields[bad].replace("\x00", "\\0"))
            continue
        for i, field in enumerate(fields):
            if len(field) > max_cell:
                rejects.add(path, start, header[i], f"cell longer than {max_cell} characters, truncated", field[:50])
                fields[i] = field[:max_cell]
        records.append(fields)
        rows.append(start)
    return header, records, rows


def read_table(path: str | os.PathLike, *, required: Sequence[str] = (), encoding: str | None = None,
               rejects: Rejects | None = None, max_cell: int = MAX_CELL_CHARS) -> pd.DataFrame:
    """Read a CSV, Parquet or .xlsx table as strings with a ``_row`` column of source row numbers.

    Unreadable rows go to ``rejects`` (a fresh collector if none is given) and are not returned.
    Raises ``InputError`` naming the file when it is missing, empty or lacks a ``required`` column.
    """
    path = Path(path)
    rejects = rejects if rejects is not None else Rejects()
    if not path.exists():
        raise InputError(f"{path}: no such file")
    suffix = path.suffix.lower()
    if suffix in PARQUET_SUFFIXES:
        try:
            frame = pd.read_parquet(path)
        except Exception as exc:  # pyarrow raises several types for a damaged file
            raise InputError(f"{path}: not a readable Parquet file: {exc}") from exc
        frame = frame.astype(object).where(frame.notna(), "").astype(str)
        frame[ROW_COLUMN] = range(1, len(frame) + 1)
    elif suffix in EXCEL_SUFFIXES:
        frame = pd.read_excel(path, dtype=str, keep_default_na=False)
        frame = frame.fillna("").astype(str)
        frame[ROW_COLUMN] = range(2, len(frame) + 2)
    else:
        text = decode_bytes(path.read_bytes(), path, encoding)
        header, records, rows = _csv_records(text, path, rejects, max_cell)
        frame = pd.DataFrame(records, columns=header, dtype=object) if records else pd.DataFrame(columns=header, dtype=object)
        frame[ROW_COLUMN] = rows
    frame.columns = [str(c) for c in frame.columns]
    require_columns(frame, required, path)
    return frame.reset_index(drop=True)


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
