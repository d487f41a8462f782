"""Labels for the confidence model: from the office's own history, and from a gold sample.

History: the newest year is coded against a dictionary built from the earlier years only
(with a single year, against a random half of its records), so a record never matches
itself and titles new in that year look new, as they will in production. The label says
whether a candidate equals the recorded (production) code; those codes are noisy, which
is why a gold sample with expert codes re-fits the calibration when an office has one.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..coding.coder import TitleCoder, best_first
from ..coding.dictionary import UNDATED, TitleDictionary


def history_labels(dictionary: TitleDictionary, *, max_units: int = 20_000, max_rank: int = 5,
                   random_state: int = 0, coder_params: dict | None = None) -> pd.DataFrame:
    """Candidate features of held-out past records with ``label`` (candidate = recorded code),
    ``weight`` (records the unit stands for) and ``record`` (the unit, for grouped folds)."""
    rng = np.random.default_rng(random_state)
    units = dictionary.units.reset_index(drop=True)
    years = sorted(int(y) for y in units["year"].unique() if y != UNDATED)
    counts = units["count"].to_numpy()
    if len(years) >= 2:
        held_out = units["year"].to_numpy() == years[-1]
        train_counts = np.where(held_out, 0, counts)
        test_counts = np.where(held_out, counts, 0)
    else:
        train_counts = rng.binomial(counts, 0.5)
        test_counts = counts - train_counts
    base = dictionary.restricted(pd.Series(train_counts))
    test = units.assign(count=test_counts)
    test = test[test["count"] > 0].reset_index(drop=True)
    if len(test) > max_units:  # keep the frequent units: sample in proportion to records
        pick = rng.choice(len(test), size=max_units, replace=False, p=test["count"] / test["count"].sum())
        test = test.iloc[np.sort(pick)].reset_index(drop=True)
    if not len(base.entries) or not len(test):
        raise ValueError("the dictionary is too small to hold records out for training the confidence model")
    coder = TitleCoder.from_dictionary(base, **(coder_params or {}))
    feats = coder.features(pd.DataFrame({"title": test["key"], "context": test["context"]}))
    feats = feats[feats["rank"] <= max_rank].reset_index(drop=True)  # the rows that decide; keeps training quick
    feats["label"] = (feats["code"].to_numpy() == test["code"].to_numpy()[feats["record"].to_numpy()]).astype(int)
    feats["weight"] = test["count"].to_numpy()[feats["record"].to_numpy()]
    return feats


def gold_labels(coder: TitleCoder, gold: pd.DataFrame) -> pd.DataFrame:
    """Candidate features of a gold sample with ``label`` (candidate = expert ``code``)."""
    work = gold.rename(columns={"code": "expert_code"})
    feats = coder.features(work)
    expert = gold["code"].astype(str).str.strip().to_numpy()
    feats["label"] = (feats["code"].to_numpy() == expert[feats["record"].to_numpy()]).astype(int)
    return feats


def top_candidates(feats: pd.DataFrame, n_records: int, by: str = "confidence") -> pd.DataFrame:
    """The best candidate per record (records without candidates get an empty code, confidence 0)."""
    ranked = best_first(feats, "record", by)  # the coder's own rule, so the threshold is chosen as applied
    top = ranked[ranked["pos"] == 0].set_index("record")
    out = pd.DataFrame(index=pd.RangeIndex(n_records, name="record"))
    out["code"] = top["code"].reindex(out.index).fillna("")
    out[by] = top[by].reindex(out.index).fillna(0.0)
    return out.reset_index()
