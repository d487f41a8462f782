"""One small loader for the CSV tables in ``lexicons/`` (shipped as ``titlematch.lexicons``)."""
from __future__ import annotations

from functools import lru_cache
from importlib import resources

import pandas as pd


@lru_cache(maxsize=None)
def _read(name: str) -> pd.DataFrame:
    filename = name if name.endswith(".csv") else f"{name}.csv"
    ref = resources.files("titlematch.lexicons").joinpath(filename)
    if not ref.is_file():
        available = sorted(p.name for p in resources.files("titlematch.lexicons").iterdir() if p.name.endswith(".csv"))
        raise FileNotFoundError(f"lexicon {filename!r} not found; available: {', '.join(available)}")
    with ref.open("r", encoding="utf-8") as handle:
        return pd.read_csv(handle, dtype=str, keep_default_na=False, comment=None)


def load_lexicon(name: str) -> pd.DataFrame:
    """Return the lexicon table ``name`` (without ``.csv``) as strings; a copy, safe to modify."""
    return _read(name).copy()


def load_mapping(name: str, key: str, value: str) -> dict[str, str]:
    """Return a ``{key: value}`` dict from two columns of a lexicon table."""
    table = _read(name)
    return dict(zip(table[key], table[value]))
