"""Classification codes: validation, hierarchy and the O*NET-SOC to SOC 2018 link."""
from __future__ import annotations

import re

import pandas as pd

from ..io.lexicon import load_lexicon, load_mapping

SOC_PATTERN = r"^\d{2}-\d{4}(\.\d{2})?$"
from .levels import SOC_LEVELS  # noqa: F401  (re-exported; defined apart so the command line loads no pandas)


def to_soc_2018(code: str) -> str:
    """Map an O*NET-SOC code to its SOC 2018 detailed occupation (``"11-1011.03"`` -> ``"11-1011"``).

    A few O*NET-SOC codes split one SOC code into several; those map through ``onet_soc_splits``.
    """
    code = str(code)
    splits = load_mapping("onet_soc_splits", "onet_soc_code", "soc_2018_code")
    if code in splits:
        return splits[code]
    return code[:7] if re.match(SOC_PATTERN, code) else code


def onet_classification(level: str = "onet") -> pd.DataFrame:
    """The O*NET-SOC 2019 table as ``code, title``; ``level="soc"`` keeps the SOC 2018 detailed codes
    (the ``.00`` rows, with split codes mapped to their SOC parent) under their O*NET title."""
    table = load_lexicon("onet_soc_2019_titles").rename(columns={"onet_soc_code": "code"})
    if level == "onet":
        return table[["code", "title"]]
    if level != "soc":
        raise ValueError(f"level must be 'onet' or 'soc', got {level!r}")
    detailed = table[table["code"].str.endswith(".00")].copy()
    detailed["code"] = detailed["code"].map(to_soc_2018)
    return detailed.drop_duplicates("code")[["code", "title"]].reset_index(drop=True)
