"""What counts as a missing value for every normalizer: None, pandas' NA and NaT, and float NaN."""
from __future__ import annotations

import math

import pandas as pd


def is_missing(value: object) -> bool:
    if value is None or value is pd.NA or value is pd.NaT:
        return True
    return isinstance(value, float) and math.isnan(value)
