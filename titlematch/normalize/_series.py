"""The one way a batch normalizer reads its input: a Series as it is, anything else iterable as one."""
from __future__ import annotations

from collections.abc import Iterable

import pandas as pd


def as_series(values: Iterable[object], argument: str, single: str) -> pd.Series:
    """``values`` as a Series (index kept). One string, or a whole DataFrame, is refused with a message
    naming ``argument`` (the calling function) and ``single`` (its one-value counterpart)."""
    if isinstance(values, pd.Series):
        return values
    if isinstance(values, pd.DataFrame):
        raise TypeError(f"{argument}: values must be one column (a Series), got a DataFrame; pass frame['column']")
    if isinstance(values, (str, bytes)):
        raise TypeError(f"{argument}: values must be a sequence, got one string; use {single} for a single value")
    if isinstance(values, pd.Index):
        return pd.Series(values, index=values, dtype=object)
    try:
        return pd.Series(list(values), dtype=object)
    except TypeError as exc:
        raise TypeError(f"{argument}: values must be a sequence, got {type(values).__name__}") from exc
