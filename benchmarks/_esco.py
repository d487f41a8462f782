"""The real-titles protocol (../shared/reference/README.md) on ESCO's human-written occupation labels.

Split each occupation's labels by a stable hash of the label: the preferred label and about 50% of the
alternative labels are the past coded records (spread over three years), about 15% are the gold sample
and about 35% the new records to code. Classification: the ISCO-08 unit groups. The peer is TF-IDF
word 1-2-grams + char_wb 2-4-grams (sublinear tf) into LogisticRegression(C=10), trained on the same
past records, its threshold chosen on the same gold sample.

The labels are a benchmark: they are read here, by benchmarks and tests, never by the package.
"""
from __future__ import annotations

import hashlib
import os
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.exceptions import ConvergenceWarning
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline, make_union

def _reference() -> Path:
    """The shared reference tables: $TITLEMATCH_REFERENCE, else ../shared/reference beside the repository."""
    if os.environ.get("TITLEMATCH_REFERENCE"):
        return Path(os.environ["TITLEMATCH_REFERENCE"]) / "esco"
    for root in (Path(__file__).resolve().parents[2], Path("/work")):
        if (root / "shared" / "reference" / "esco").is_dir():
            return root / "shared" / "reference" / "esco"
    return Path(__file__).resolve().parents[2] / "shared" / "reference" / "esco"


REFERENCE = _reference()
DEV_LABELS = REFERENCE / "occupation_labels_dev.csv"
YEARS = (2022, 2023, 2024)


def available() -> bool:
    return DEV_LABELS.is_file()


def _unit_hash(text: str, salt: str = "") -> float:
    """A number in [0, 1) from the label's MD5: the same split on every machine and every run."""
    digest = hashlib.md5((salt + text).encode("utf-8")).hexdigest()
    return int(digest[:12], 16) / float(16 ** 12)


def load_labels(path: Path = DEV_LABELS) -> pd.DataFrame:
    """ESCO labels as ``title, code, kind``: one row per distinct (label, code), preferred first."""
    raw = pd.read_csv(path, dtype=str, keep_default_na=False)
    raw = raw.assign(order=(raw["label_kind"] != "preferred").astype(int))
    raw = raw.sort_values(["order"], kind="stable").drop_duplicates(["label", "isco08_code"])
    return pd.DataFrame({"title": raw["label"].to_numpy(), "code": raw["isco08_code"].to_numpy(),
                         "kind": raw["label_kind"].to_numpy()}).sort_index().reset_index(drop=True)


def split(labels: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """past (title, code, year), gold (title, code) and new (title, code) by the protocol."""
    u = np.array([_unit_hash(t) for t in labels["title"]])
    preferred = labels["kind"].to_numpy() == "preferred"
    part = np.where(preferred | (u < 0.50), "past", np.where(u < 0.65, "gold", "new"))
    year = np.array([YEARS[int(_unit_hash(t, "year") * len(YEARS))] for t in labels["title"]])
    past = labels[part == "past"].assign(year=year[part == "past"])[["title", "code", "year"]]
    gold = labels[part == "gold"][["title", "code"]]
    new = labels[part == "new"][["title", "code"]]
    return {"past": past.reset_index(drop=True), "gold": gold.reset_index(drop=True),
            "new": new.reset_index(drop=True)}


def two_per_code(past: pd.DataFrame) -> pd.DataFrame:
    """The few-examples regime: at most two past labels per code (the two with the lowest hash)."""
    rank = past.assign(h=[_unit_hash(t, "few") for t in past["title"]])
    rank = rank.sort_values(["code", "h"]).groupby("code").head(2)
    return rank.drop(columns="h").sort_index().reset_index(drop=True)


def isco_unit_groups() -> pd.DataFrame:
    """The 436 ISCO-08 unit groups (code, title) from the reference table."""
    table = pd.read_csv(REFERENCE / "isco08_groups.csv", dtype=str, keep_default_na=False)
    return table[table["level"] == "4"][["code", "title"]].reset_index(drop=True)


def peer_model():
    """The protocol's peer: TF-IDF word 1-2-grams + char_wb 2-4-grams (sublinear tf) + LogisticRegression(C=10)."""
    features = make_union(TfidfVectorizer(analyzer="word", ngram_range=(1, 2), sublinear_tf=True),
                          TfidfVectorizer(analyzer="char_wb", ngram_range=(2, 4), sublinear_tf=True))
    return make_pipeline(features, LogisticRegression(C=10.0))  # scikit-learn's defaults otherwise (lbfgs, 100 iterations)


def run_peer(data: dict[str, pd.DataFrame]) -> dict:
    """Fit the peer on past records, predict gold and new: codes, top-3 and max probabilities, time."""
    start = time.perf_counter()
    with warnings.catch_warnings():  # lbfgs may stop at its default 100 iterations: the peer as specified
        warnings.simplefilter("ignore", ConvergenceWarning)
        model = peer_model().fit(data["past"]["title"], data["past"]["code"])
    out = {}
    for name in ("gold", "new"):
        proba = model.predict_proba(data[name]["title"])
        top3 = np.argsort(-proba, axis=1)[:, :3]
        out[name] = pd.DataFrame({"code": model.classes_[top3[:, 0]], "code_2": model.classes_[top3[:, 1]],
                                  "code_3": model.classes_[top3[:, 2]], "confidence": proba.max(axis=1)})
    out["seconds"] = time.perf_counter() - start
    out["model"] = model
    return out


def share_at(conf_gold, correct_gold, conf_new, correct_new, min_accuracy: float) -> tuple[float, float, float]:
    """The peer's rule: the lowest threshold whose accepted gold records are right at >= min_accuracy;
    returns (threshold, share accepted on new, accuracy of accepted new)."""
    order = np.argsort(-np.asarray(conf_gold))
    acc = np.cumsum(np.asarray(correct_gold)[order]) / np.arange(1, len(order) + 1)
    ok = np.flatnonzero(acc >= min_accuracy)
    threshold = float(np.asarray(conf_gold)[order][ok[-1]]) if len(ok) else 1.01
    accepted = np.asarray(conf_new) >= threshold
    share = float(accepted.mean())
    accuracy = float(np.asarray(correct_new)[accepted].mean()) if accepted.any() else float("nan")
    return threshold, share, accuracy
