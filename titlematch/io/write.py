"""Writing tables: CSV, Parquet or .xlsx by suffix, always atomically; spreadsheets made safe.

Every .xlsx a command writes goes through :func:`write_table`, so every spreadsheet gets the same
two protections: a text cell a spreadsheet program would run as a formula (starting with ``=``,
``+``, ``-``, ``@``, tab or carriage return; OWASP guidance on CSV and formula injection) is
written with a leading apostrophe, and control characters the .xlsx format cannot hold (XML 1.0
forbids them) are written as visible ``\\xNN`` escapes. Both are counted and logged as a warning
naming the file, the first row and column changed, so nothing changes unannounced.
"""
from __future__ import annotations

import csv
import logging
import os
import re
from pathlib import Path

import pandas as pd

from .files import EXCEL_SUFFIXES, PARQUET_SUFFIXES, atomic_path
from .rejects import ROW_COLUMN

log = logging.getLogger("titlematch.io")

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_XLSX_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")  # what openpyxl refuses to write


def escape_formula(value):
    """Prefix a text cell that a spreadsheet would run as a formula with an apostrophe."""
    if isinstance(value, str) and value.startswith(FORMULA_START):
        return "'" + value
    return value


def unescape_formula(value):
    """Undo :func:`escape_formula` (for spreadsheets read back, such as a returned queue)."""
    if isinstance(value, str) and len(value) > 1 and value[0] == "'" and value[1] in "=+-@\t\r":
        return value[1:]
    return value


def _escape_illegal(text: str) -> str:
    return _XLSX_ILLEGAL.sub(lambda m: f"\\x{ord(m.group()):02x}", text)


def spreadsheet_safe(frame: pd.DataFrame) -> tuple[pd.DataFrame, dict]:
    """``frame`` with formula-looking text escaped and characters .xlsx cannot hold replaced, and what
    was changed: ``{"formulas": n, "characters": n, "first": (row position, column) or None}``."""
    out = frame.copy()
    changed = {"formulas": 0, "characters": 0, "first": None}
    for column in out.columns:
        values = out[column]
        if values.dtype != object:
            continue
        text = values.map(lambda v: isinstance(v, str))
        if not text.any():
            continue
        strings = values[text].astype(str)
        illegal = strings.str.contains(_XLSX_ILLEGAL)
        formula = strings.str.startswith(FORMULA_START)
        if illegal.any() or formula.any():
            fixed = strings.where(~illegal, strings[illegal].map(_escape_illegal))
            fixed = fixed.where(~formula, "'" + fixed)
            out.loc[text, column] = fixed
            changed["formulas"] += int(formula.sum())
            changed["characters"] += int(illegal.sum())
            if changed["first"] is None:
                changed["first"] = (int(out.index.get_indexer([strings.index[(illegal | formula).to_numpy()][0]])[0]),
                                    str(column))
    names = [escape_formula(_escape_illegal(str(c))) for c in out.columns]
    if names != [str(c) for c in out.columns]:
        changed["formulas"] += 1
        changed["first"] = changed["first"] or (-1, "header")
        out.columns = names
    return out, changed


def csv_quoting(frame: pd.DataFrame) -> int:
    """The csv quoting for ``frame``: minimal, unless a text cell holds a carriage return. Rows end in
    ``\n``, and the csv module then leaves a lone ``\r`` unquoted, which a reader takes for the end
    of the line: the cell would be lost. Quoting every cell keeps it (and reads back the same)."""
    for column in frame.columns:
        values = frame[column]
        if values.dtype == object and values.map(lambda v: isinstance(v, str) and "\r" in v).any():
            return csv.QUOTE_ALL
    return csv.QUOTE_MINIMAL


def write_table(frame: pd.DataFrame, path: str | os.PathLike) -> Path:
    """Write ``frame`` as CSV, Parquet or .xlsx (by the suffix), atomically; ``_row`` is not written.

    An .xlsx is made safe first (:func:`spreadsheet_safe`) and the changes are logged."""
    path = Path(path)
    frame = frame.drop(columns=[ROW_COLUMN], errors="ignore")
    suffix = path.suffix.lower()
    with atomic_path(path) as tmp:
        if suffix in PARQUET_SUFFIXES:
            frame.to_parquet(tmp, index=False)
        elif suffix in EXCEL_SUFFIXES:
            safe, changed = spreadsheet_safe(frame)
            safe.to_excel(tmp, index=False, engine="openpyxl")
        else:
            frame.to_csv(tmp, index=False, lineterminator="\n", quoting=csv_quoting(frame))
    if suffix in EXCEL_SUFFIXES and changed["first"] is not None:
        row, column = changed["first"]
        where = "the header" if row < 0 else f"row {row + 2}, column {column!r}"
        log.warning("%s: %d cell(s) that a spreadsheet would run as a formula written with a leading "
                    "apostrophe, %d cell(s) with control characters .xlsx cannot hold written as \\xNN "
                    "(first: %s)", path, changed["formulas"], changed["characters"], where)
    return path
