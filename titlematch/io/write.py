"""Writing tables: CSV, Parquet or .xlsx by suffix, always atomically."""
from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from .files import EXCEL_SUFFIXES, PARQUET_SUFFIXES, atomic_path
from .rejects import ROW_COLUMN

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
