"""Rows set aside, each with file, row, column and reason: nothing is dropped silently.

Every reader adds ``ROW_COLUMN``, the source row number a person sees, so any later stage can
name the file and row of what it refuses.
"""
from __future__ import annotations

import os
from pathlib import Path
from typing import Iterable

import pandas as pd

from .errors import InputError

ROW_COLUMN = "_row"

REJECT_COLUMNS = ["file", "row", "column", "reason", "value"]


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
        from .write import write_table  # write imports ROW_COLUMN from here

        path = Path(path)
        write_table(self.frame(), path)
        return path

def rejects_path_for(out: str | os.PathLike) -> Path:
    """``OUT.rejects.csv`` beside an output file."""
    out = Path(out)
    return out.with_name(out.stem + ".rejects.csv")

def require_columns(frame: pd.DataFrame, required: Iterable[str], path: str | os.PathLike = "<table>") -> None:
    missing = [c for c in required if c not in frame.columns]
    if missing:
        have = [c for c in frame.columns if c != ROW_COLUMN]
        raise InputError(f"{path}: missing column(s) {', '.join(repr(m) for m in missing)}; "
                         f"the file has: {', '.join(have) if have else '(no columns)'}")
