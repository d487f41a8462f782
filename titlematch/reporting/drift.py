"""Drift between two periods of coded titles: are the new records still like the ones we trust?

A threshold chosen on last year's gold sample holds only while this year's titles resemble
it. This module compares an old and a new file (coded output, or raw titles for the
text-based measures) and flags shifts past configurable limits:

* unseen tokens and titles: shares of the new records' tokens and normalized titles the
  title dictionary (or, without one, the old file) has never seen, and the most frequent
  new titles;
* code mix: population stability index (PSI) and Jensen-Shannon distance between the
  shares of codes (by major group, and JS also by detailed code);
* confidence: PSI over the deciles of the old confidences, and the two-sample
  Kolmogorov-Smirnov statistic;
* expected automation: share of records at or above the threshold (or accepted in the
  ``decision`` column), old against new.

PSI = sum over bins of (p_new - p_old) * ln(p_new / p_old). A bin empty in one period
would make the logarithm infinite, so an empty share is taken as ``eps`` (1e-4 by default;
the other shares are not renormalised), which bounds that bin's term. Common practice reads
PSI below 0.1 as no real change, 0.1-0.25 as moderate and above 0.25 as a major shift (from
memory); our default limit is 0.2.
"""
from __future__ import annotations

import os
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Iterable

import numpy as np
import pandas as pd
from scipy.spatial.distance import jensenshannon
from scipy.stats import ks_2samp

from ..confidence.routing import read_confidence, route
from . import htmlpage
from ..measures import plots
from ..io import ROW_COLUMN, InputError, Rejects, write_table
from ..coding.classification import implicit_top

PSI_EPS = 1e-4
MEASURE_COLUMNS = ["measure", "old", "new", "value", "limit", "flagged", "meaning"]


@dataclass
class DriftLimits:
    """Values past which a measure is flagged (``value > limit``; automation: a drop larger than the limit).

    Defaults are ours, set for a first look; an office should tune them on its own history.
    """

    psi: float = 0.2
    unseen_titles: float = 0.3
    unseen_tokens: float = 0.05
    js_distance: float = 0.1
    ks: float = 0.1
    automation_drop: float = 0.1

    def __post_init__(self) -> None:
        for name, value in asdict(self).items():
            if not value >= 0:
                raise ValueError(f"limit {name} must be zero or positive, got {value!r}")


@dataclass
class DriftResult:
    """Measures (one row each, see ``MEASURE_COLUMNS``), new frequent titles and code shares."""

    measures: pd.DataFrame
    new_titles: pd.DataFrame
    code_shares: pd.DataFrame | None
    old_confidence: np.ndarray | None = None
    new_confidence: np.ndarray | None = None
    notes: list = field(default_factory=list)
    facts: dict = field(default_factory=dict)

    @property
    def flagged(self) -> pd.DataFrame:
        return self.measures[self.measures["flagged"].eq(True)]  # the column holds True, False or None


def _shares(p) -> np.ndarray:
    p = np.asarray(p, dtype=float)
    if p.ndim != 1 or len(p) == 0:
        raise ValueError(f"a distribution must be a non-empty 1-D array, got shape {p.shape}")
    if (p < 0).any() or not np.isfinite(p).all():
        raise ValueError("counts or shares must be finite and non-negative")
    total = p.sum()
    if total <= 0:
        raise ValueError("a distribution needs a positive total")
    return p / total


def population_stability_index(old, new, *, eps: float = PSI_EPS) -> float:
    """PSI between two distributions given as aligned counts or shares over the same bins.

    Example: shares (0.5, 0.3, 0.2) then (0.4, 0.3, 0.3) give
    (0.4-0.5)·ln(0.4/0.5) + 0 + (0.3-0.2)·ln(0.3/0.2) = 0.0628.

    >>> round(population_stability_index([50, 30, 20], [40, 30, 30]), 4)
    0.0629
    """
    p_old, p_new = _shares(old), _shares(new)
    if len(p_old) != len(p_new):
        raise ValueError(f"old has {len(p_old)} bins but new has {len(p_new)}")
    p_old, p_new = np.maximum(p_old, eps), np.maximum(p_new, eps)
    return float(np.sum((p_new - p_old) * np.log(p_new / p_old)))


def jensen_shannon_distance(old, new) -> float:
    """Jensen-Shannon distance (square root of the divergence) in base 2: 0 = same, 1 = disjoint."""
    p_old, p_new = _shares(old), _shares(new)
    if len(p_old) != len(p_new):
        raise ValueError(f"old has {len(p_old)} bins but new has {len(p_new)}")
    return float(jensenshannon(p_old, p_new, base=2))


def category_shares(old: Iterable, new: Iterable) -> pd.DataFrame:
    """Counts and shares of each category in two samples, aligned on the union of categories.

    Returns ``category, old_count, new_count, old_share, new_share``, largest old share first.
    """
    old_counts = pd.Series(list(old), dtype=object).value_counts()
    new_counts = pd.Series(list(new), dtype=object).value_counts()
    table = pd.concat([old_counts.rename("old_count"), new_counts.rename("new_count")], axis=1).fillna(0)
    table = table.astype(int)
    table["old_share"] = table["old_count"] / max(table["old_count"].sum(), 1)
    table["new_share"] = table["new_count"] / max(table["new_count"].sum(), 1)
    table.index.name = "category"
    table = table.reset_index().sort_values(["old_share", "new_share", "category"], ascending=[False, False, True])
    return table.reset_index(drop=True)


def confidence_psi(old, new, *, n_bins: int = 10, eps: float = PSI_EPS) -> float:
    """PSI of confidences over bins cut at the quantiles (deciles by default) of the old confidences.

    Bins are right-closed, the outer ones open-ended; ties in the old values can merge edges.
    """
    old, new = _finite(old, "old confidences"), _finite(new, "new confidences")
    edges = np.unique(np.quantile(old, np.linspace(0, 1, n_bins + 1)[1:-1]))
    old_counts = np.bincount(np.searchsorted(edges, old, side="left"), minlength=len(edges) + 1)
    new_counts = np.bincount(np.searchsorted(edges, new, side="left"), minlength=len(edges) + 1)
    return population_stability_index(old_counts, new_counts, eps=eps)


def ks_statistic(old, new) -> tuple[float, float]:
    """Two-sample Kolmogorov-Smirnov statistic and p-value (scipy's ``ks_2samp``)."""
    result = ks_2samp(_finite(old, "old confidences"), _finite(new, "new confidences"))
    return float(result.statistic), float(result.pvalue)


def _finite(values, name: str) -> np.ndarray:
    arr = np.asarray(values, dtype=float)
    arr = arr[~np.isnan(arr)]
    if len(arr) == 0:
        raise ValueError(f"{name}: no values")
    return arr


def unseen_token_share(keys: Iterable[str], vocabulary: Iterable[str]) -> float:
    """Share of token occurrences (tokens = words of normalized titles) absent from ``vocabulary``.

    >>> unseen_token_share(["nurse aide", "drone pilot"], {"nurse", "aide", "pilot"})
    0.25
    """
    known = set(vocabulary)
    tokens = [t for key in keys for t in str(key).split()]
    if not tokens:
        raise ValueError("no tokens to compare (all titles are empty)")
    return sum(t not in known for t in tokens) / len(tokens)


def unseen_title_share(keys: Iterable[str], known_keys: Iterable[str]) -> float:
    """Share of non-empty normalized titles that are not among ``known_keys``."""
    known = set(known_keys)
    keys = [k for k in (str(k).strip() for k in keys) if k]
    if not keys:
        raise ValueError("no titles to compare (all titles are empty)")
    return sum(k not in known for k in keys) / len(keys)


def new_frequent_titles(new: pd.DataFrame, known_keys: Iterable[str], top: int = 20) -> pd.DataFrame:
    """The most frequent normalized titles of ``new`` (column ``key``) not among ``known_keys``.

    Returns ``key, records, share, example`` (the most frequent raw ``title``) and, when
    ``new`` has them, ``code`` (the machine's most frequent code) and ``mean_confidence``.
    """
    known = set(known_keys)
    frame = new[new["key"].astype(str).str.strip() != ""]
    unseen = frame[~frame["key"].isin(known)]
    columns = ["key", "records", "share", "example"]
    columns += ["code"] if "code" in new.columns else []
    columns += ["mean_confidence"] if "confidence" in new.columns else []
    if unseen.empty:
        return pd.DataFrame(columns=columns)
    counts = unseen["key"].value_counts()
    counts = counts.rename_axis("key").rename("records").reset_index()
    table = counts.sort_values(["records", "key"], ascending=[False, True], kind="stable").head(top)
    top_records = unseen[unseen["key"].isin(table["key"])]  # the per-title details only for the rows shown
    grouped = top_records.groupby("key", sort=False)
    table = table.set_index("key")
    table["share"] = table["records"] / max(len(frame), 1)
    source = "title" if "title" in unseen.columns else "key"
    table["example"] = grouped[source].agg(_most_frequent)
    if "code" in unseen.columns:
        table["code"] = grouped["code"].agg(_most_frequent)
    if "confidence" in unseen.columns:
        table["mean_confidence"] = grouped["confidence"].mean()
    return table.reset_index()[columns]


def _most_frequent(values: pd.Series) -> str:
    counts = values.astype(str).value_counts()
    return counts[counts == counts.iloc[0]].index.min()  # ties: the first in sort order, for a stable report


def _row(measure, old, new, value, limit, meaning, *, drop: bool = False) -> dict:
    if limit is None or value is None or value != value:
        flagged = None
    else:
        flagged = bool(-value > limit) if drop else bool(value > limit)
    return {"measure": measure, "old": old, "new": new, "value": value, "limit": limit, "flagged": flagged,
            "meaning": meaning}


def _automation(frame: pd.DataFrame, threshold: float | None) -> float | None:
    if threshold is not None and "confidence" in frame.columns and frame["confidence"].notna().any():
        return float((route(read_confidence(frame["confidence"])[0], threshold) == "accept").mean())
    if threshold is None and "decision" in frame.columns:
        return float((frame["decision"] == "accept").mean())
    return None


def measure_drift(old: pd.DataFrame, new: pd.DataFrame, *, vocabulary: Iterable[str] | None = None,
                  known_keys: Iterable[str] | None = None, threshold: float | None = None,
                  limits: DriftLimits | None = None, top: int = 20, group_of=None) -> DriftResult:
    """Compare two periods.

    Parameters
    ----------
    old, new : frames with ``key`` (normalized title) and, when coded, ``code``, ``confidence``
        (float, NaN where none), ``decision``; ``title`` (raw) is used for examples.
    vocabulary, known_keys : the dictionary's tokens and normalized titles; when None the
        old frame's own tokens and titles stand in.
    threshold : acceptance threshold for the expected automation share (else ``decision``).
    group_of : maps codes to their top group (``Classification.top_of``); default: the codes' shape.
    limits : flag limits.
    top : rows of the new-titles table.

    Example
    -------
    >>> old = pd.DataFrame({"key": ["nurse", "welder"], "code": ["29-1141", "51-4121"]})
    >>> new = pd.DataFrame({"key": ["nurse", "drone pilot"], "code": ["29-1141", "53-2012"]})
    >>> r = measure_drift(old, new)
    >>> float(r.measures.set_index("measure").loc["unseen title share", "new"])
    0.5
    """
    limits = limits or DriftLimits()
    notes: list[str] = []
    for name, frame in (("old", old), ("new", new)):
        if "key" not in frame.columns:
            raise ValueError(f"the {name} frame needs a 'key' column of normalized titles")
    from_dictionary = vocabulary is not None or known_keys is not None
    if known_keys is None:
        known_keys = set(old["key"].astype(str))
    if vocabulary is None:
        vocabulary = {t for key in old["key"].astype(str) for t in key.split()}
    vocabulary, known_keys = set(vocabulary), set(known_keys)
    reference = "the title dictionary" if from_dictionary else "the old file"
    rows = []
    for measure, func, known, limit in (("unseen token share", unseen_token_share, vocabulary, limits.unseen_tokens),
                                        ("unseen title share", unseen_title_share, known_keys, limits.unseen_titles)):
        old_value = func(old["key"], known) if from_dictionary else None  # the old file against itself: 0
        new_value = func(new["key"], known)
        rows.append(_row(measure, old_value, new_value, new_value, limit, f"new records against {reference}"))
    code_shares = None
    if "code" in old.columns and "code" in new.columns:
        top_of = group_of or (lambda codes: pd.Series([implicit_top(c) for c in codes.fillna("").astype(str)]))
        groups = category_shares(pd.Series(top_of(old["code"].fillna("").astype(str)), dtype=object),
                                 pd.Series(top_of(new["code"].fillna("").astype(str)), dtype=object))
        code_shares = groups
        rows.append(_row("code mix PSI (major groups)", None, None,
                         population_stability_index(groups["old_count"], groups["new_count"]), limits.psi,
                         "shift in the share of each major group"))
        rows.append(_row("code mix JS distance (major groups)", None, None,
                         jensen_shannon_distance(groups["old_count"], groups["new_count"]), limits.js_distance,
                         "0 = same mix, 1 = no major group in common"))
        detailed = category_shares(old["code"], new["code"])
        rows.append(_row("code mix JS distance (codes)", None, None,
                         jensen_shannon_distance(detailed["old_count"], detailed["new_count"]), limits.js_distance,
                         "as above over detailed codes; larger with many rare codes"))
    else:
        notes.append("Code mix not compared: one of the files has no 'code' column (raw titles).")
    old_conf = new_conf = None
    if ("confidence" in old.columns and "confidence" in new.columns
            and old["confidence"].notna().any() and new["confidence"].notna().any()):
        old_conf = _finite(read_confidence(old["confidence"])[0], "old")
        new_conf = _finite(read_confidence(new["confidence"])[0], "new")
        rows.append(_row("confidence PSI (old deciles)", None, None, confidence_psi(old_conf, new_conf), limits.psi,
                         "shift in the spread of confidences"))
        stat, pvalue = ks_statistic(old_conf, new_conf)
        rows.append(_row("confidence KS statistic", None, None, stat, limits.ks,
                         f"largest gap between the two cumulative distributions (p-value {pvalue:.3g})"))
        rows.append(_row("mean confidence", float(old_conf.mean()), float(new_conf.mean()),
                         float(new_conf.mean() - old_conf.mean()), None, "new minus old"))
    else:
        notes.append("Confidences not compared: one of the files has no 'confidence' column.")
    old_auto, new_auto = _automation(old, threshold), _automation(new, threshold)
    if old_auto is not None and new_auto is not None:
        how = f"confidence at least {threshold:g}" if threshold is not None else "decision = accept"
        rows.append(_row("expected automation share", old_auto, new_auto, new_auto - old_auto, limits.automation_drop,
                         f"share of records with {how}; flagged when it falls by more than the limit", drop=True))
    else:
        notes.append("Automation share not compared: give a threshold, or files with a 'decision' column.")
    measures = pd.DataFrame(rows, columns=MEASURE_COLUMNS)
    titles = new_frequent_titles(new, known_keys, top=top)
    return DriftResult(measures, titles, code_shares, old_conf, new_conf, notes,
                       {"old records": f"{len(old):,}", "new records": f"{len(new):,}",
                        "unseen measured against": reference})


DRIFT_CAUTIONS = (
    "A flag is a prompt to look, not a verdict: read the new frequent titles and check a sample of new records "
    "before changing anything.",
    "When the titles or the code mix shift, re-check the threshold on a fresh gold sample; until then, lower the "
    "share accepted automatically rather than raise it.",
)


def write_drift_report(result: DriftResult, out_dir: str | os.PathLike) -> dict[str, Path]:
    """Write ``drift.html`` (self-contained), ``drift.csv``, ``new_titles.csv`` and figures into ``out_dir``."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written = {"measures": write_table(result.measures, out / "drift.csv"),
               "new_titles": write_table(result.new_titles, out / "new_titles.csv")}
    flagged = result.flagged
    verdict = (f"{len(flagged)} measure(s) past their limits: " + ", ".join(flagged["measure"]) + "."
               if len(flagged) else "No measure is past its limit.")
    formats = {"old": ".4f", "new": ".4f", "value": ".4f", "limit": ".3g"}
    shown = result.measures.assign(flagged=result.measures["flagged"].map({True: "yes", False: "no"}).fillna(""))
    parts = [htmlpage.cautions(DRIFT_CAUTIONS + htmlpage.COMMON_CAUTIONS),
             htmlpage.section("Measures", htmlpage.paragraph(verdict), htmlpage.table(shown, formats),
                              *[htmlpage.paragraph(n) for n in result.notes],
                              htmlpage.paragraph("PSI: sum of (new share - old share) x ln(new share / old share); "
                                                 "an empty share counts as 0.0001. Data: drift.csv."))]
    parts.append(htmlpage.section("Most frequent new titles", htmlpage.paragraph(
        "Normalized titles of the new file never seen before; candidates for the title dictionary once coded by "
        "people. Data: new_titles.csv."),
        htmlpage.table(result.new_titles, {"records": ",", "share": ".2%", "mean_confidence": ".3f"})))
    if result.old_confidence is not None:
        written["confidence_figure"] = plots.plot_confidence_shift(result.old_confidence, result.new_confidence,
                                                                   out / "confidence_shift.png")
        parts.append(htmlpage.section("Confidence, old and new", htmlpage.figure(
            written["confidence_figure"], "confidence distributions", "Share of records by confidence.")))
    if result.code_shares is not None:
        written["code_shares"] = write_table(result.code_shares, out / "code_shares.csv")
        written["code_figure"] = plots.plot_share_shift(result.code_shares, out / "code_shares.png")
        parts.append(htmlpage.section("Code mix, old and new", htmlpage.figure(
            written["code_figure"], "major group shares", "Share of records by major (top) group of the classification. Data: "
                                                          "code_shares.csv.")))
    written["report"] = htmlpage.write_page(htmlpage.page("Drift between two periods", parts, facts=result.facts),
                                            out / "drift.html")
    return written


def prepare(frame: pd.DataFrame, name: str, rejects: Rejects | None = None) -> pd.DataFrame:
    """Bring a coded or raw title file to the columns ``measure_drift`` reads.

    Uses ``title_normalized`` as the key when present, else normalizes ``title``; parses
    ``confidence`` as numbers (empty = none; an unreadable value is reported to ``rejects``
    and the record kept without a confidence) and lower-cases ``decision``.
    """
    rejects = rejects if rejects is not None else Rejects()
    if "title_normalized" in frame.columns:
        out = frame.assign(key=frame["title_normalized"].fillna("").astype(str).str.strip())
    elif "title" in frame.columns:
        from ..normalize.title import normalize_titles
        out = frame.assign(key=normalize_titles(frame["title"].fillna("").astype(str))["key"].to_numpy())
    else:
        raise InputError(f"{name}: needs a 'title_normalized' column (coded output) or a 'title' column")
    if "confidence" in out.columns:
        text = out["confidence"].fillna("").astype(str).str.strip()
        number = pd.to_numeric(text.where(text != ""), errors="coerce")
        bad = (text != "") & (number.isna() | (number < 0) | (number > 1))
        rows = out[ROW_COLUMN] if ROW_COLUMN in out.columns else pd.Series(np.arange(2, len(out) + 2), index=out.index)
        for row, value in zip(rows[bad], text[bad]):
            rejects.add(name, int(row), "confidence", "confidence is not a number in [0, 1]; record kept without it",
                        value)
        out["confidence"] = number.where(~bad)
    if "decision" in out.columns:
        out["decision"] = out["decision"].fillna("").astype(str).str.strip().str.lower()
    if "code" in out.columns:
        out["code"] = out["code"].fillna("").astype(str).str.strip()
    return out
