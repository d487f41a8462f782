"""Quality measures for coded titles: accuracy, macro-F1, calibration, bootstrap intervals.

Accuracy, F1, Brier score and log loss come from scikit-learn; this module adds what a
coding office reports beside them: the expected calibration error (ECE) with its
reliability table, percentile bootstrap intervals, results by SOC major group and the
most frequent confusions.

Calibration bins follow scikit-learn's ``calibration_curve``: with ``n_bins`` equal-width
bins on [0, 1], a probability on an inner edge falls in the lower bin (bins are
``(lower, upper]``, the first also holds 0), so per-bin means agree with that function.
"""
from __future__ import annotations

import math
import re
from typing import Callable, NamedTuple, Sequence

import numpy as np
import pandas as pd
from sklearn import metrics as skm

from ..coding.classification import implicit_top
from ..coding.codes import SOC_LEVELS, to_soc_2018

_SOC_PATTERN = re.compile(r"^\s*(\d{2})-(\d{4})(?:\.(\d{2}))?\s*$")
_BOOTSTRAP_CHUNK = 2_000_000  # resampled values held in memory at once (about 16 MB of int64)


class Interval(NamedTuple):
    """A point estimate with a bootstrap interval."""

    estimate: float
    lower: float
    upper: float


def _binary_inputs(y_true, prob, name_true: str = "y_true", name_prob: str = "prob") -> tuple[np.ndarray, np.ndarray]:
    y = np.asarray(y_true)
    p = np.asarray(prob, dtype=float)
    if y.ndim != 1 or p.ndim != 1:
        raise ValueError(f"{name_true} and {name_prob} must be one-dimensional, got shapes {y.shape} and {p.shape}")
    if len(y) != len(p):
        raise ValueError(f"{name_true} has {len(y)} values but {name_prob} has {len(p)}")
    if len(y) == 0:
        raise ValueError(f"{name_true} is empty")
    if np.isnan(p).any():
        raise ValueError(f"{name_prob} has {int(np.isnan(p).sum())} missing values; drop them first")
    if p.min() < 0 or p.max() > 1:
        raise ValueError(f"{name_prob} must lie in [0, 1], got values from {p.min()} to {p.max()}")
    y = y.astype(float) if y.dtype == bool else y
    if not np.isin(y, (0, 1)).all():
        raise ValueError(f"{name_true} must hold only 0/1 or True/False")
    return y.astype(float), p


def _bin_edges(prob: np.ndarray, n_bins: int, strategy: str) -> np.ndarray:
    if not isinstance(n_bins, (int, np.integer)) or n_bins < 1:
        raise ValueError(f"n_bins must be a positive integer, got {n_bins!r}")
    if strategy == "uniform":
        return np.linspace(0.0, 1.0, n_bins + 1)
    if strategy == "quantile":
        return np.percentile(prob, np.linspace(0, 100, n_bins + 1))
    raise ValueError(f"strategy must be 'uniform' or 'quantile', got {strategy!r}")


def reliability_table(y_true, prob, n_bins: int = 15, strategy: str = "uniform") -> pd.DataFrame:
    """Per-bin counts, mean predicted probability and observed rate of correct codes.

    Parameters
    ----------
    y_true : array of 0/1 or bool, 1 where the code was right.
    prob : array of probabilities in [0, 1] (the confidences).
    n_bins : number of bins; ``strategy="uniform"`` makes equal-width bins on [0, 1],
        ``"quantile"`` bins with about equal counts.

    Returns
    -------
    DataFrame with one row per bin (empty bins included, with NaN means): ``bin, lower,
    upper, count, mean_predicted, observed_rate``.

    Example
    -------
    >>> reliability_table([0, 1, 1], [0.2, 0.8, 0.9], n_bins=2)[["count", "observed_rate"]].values.tolist()
    [[1.0, 0.0], [2.0, 1.0]]
    """
    y, p = _binary_inputs(y_true, prob)
    edges = _bin_edges(p, n_bins, strategy)
    ids = np.searchsorted(edges[1:-1], p)  # same assignment as sklearn.calibration.calibration_curve
    count = np.bincount(ids, minlength=n_bins).astype(float)
    sum_prob = np.bincount(ids, weights=p, minlength=n_bins)
    sum_true = np.bincount(ids, weights=y, minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_predicted = np.where(count > 0, sum_prob / count, np.nan)
        observed = np.where(count > 0, sum_true / count, np.nan)
    return pd.DataFrame({"bin": np.arange(n_bins), "lower": edges[:-1], "upper": edges[1:],
                         "count": count.astype(int), "mean_predicted": mean_predicted, "observed_rate": observed})


def expected_calibration_error(y_true, prob, n_bins: int = 15, strategy: str = "uniform") -> float:
    """ECE: the count-weighted mean gap between observed rate and mean probability over bins.

    ``ECE = sum_b (n_b / n) * |observed_b - mean_predicted_b|`` with 15 equal-width bins by
    default. Example: probabilities (0.2, 0.8, 0.9) with outcomes (0, 1, 1) in two bins
    give ``1/3 * |0 - 0.2| + 2/3 * |1 - 0.85| = 0.1667``.
    """
    table = reliability_table(y_true, prob, n_bins=n_bins, strategy=strategy)
    table = table[table["count"] > 0]
    weights = table["count"] / table["count"].sum()
    return float((weights * (table["observed_rate"] - table["mean_predicted"]).abs()).sum())


def brier_score(y_true, prob) -> float:
    """Mean squared difference between outcome (0/1) and probability (scikit-learn's ``brier_score_loss``)."""
    y, p = _binary_inputs(y_true, prob)
    return float(skm.brier_score_loss(y, p))


def log_loss(y_true, prob) -> float:
    """Mean negative log-likelihood of the outcomes (scikit-learn's ``log_loss``, both classes declared)."""
    y, p = _binary_inputs(y_true, prob)
    return float(skm.log_loss(y, p, labels=[0.0, 1.0]))


def as_code_array(values, name: str = "codes") -> np.ndarray:
    """Codes as a 1-D object array of stripped strings; a missing code becomes ``""``."""
    if isinstance(values, pd.Series):
        values = values.to_numpy()
    arr = np.asarray(values, dtype=object)
    if arr.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {arr.shape}")
    # A missing code is an answer nobody gave: it is compared as the empty label.
    return np.array(["" if v is None or (isinstance(v, float) and math.isnan(v)) else str(v).strip() for v in arr],
                    dtype=object)


def _paired_labels(truth, predicted) -> tuple[np.ndarray, np.ndarray]:
    t = as_code_array(truth, "truth")
    p = as_code_array(predicted, "predicted")
    if len(t) != len(p):
        raise ValueError(f"truth has {len(t)} codes but predicted has {len(p)}")
    if len(t) == 0:
        raise ValueError("truth is empty")
    return t, p


def accuracy(truth, predicted) -> float:
    """Share of records whose predicted code equals the true code (scikit-learn's ``accuracy_score``)."""
    t, p = _paired_labels(truth, predicted)
    return float(skm.accuracy_score(t, p))


def macro_f1(truth, predicted) -> float:
    """Unweighted mean of per-code F1 over every code seen in either array (``f1_score(average="macro")``)."""
    t, p = _paired_labels(truth, predicted)
    return float(skm.f1_score(t, p, average="macro", zero_division=0))


def code_at_level(codes, level: str = "as_given") -> pd.Series:
    """Codes cut to a level of the SOC 2018 hierarchy, so codes of different depth compare.

    SOC 2018 codes ``NN-NNNN`` nest as major group ``NN-0000``, minor group ``NN-NN00``,
    broad occupation ``NN-NNN0`` and detailed occupation ``NN-NNNN``; O*NET-SOC adds ``.NN``.
    ``level="detailed"`` maps O*NET-SOC codes to SOC 2018 (``codes.to_soc_2018``). Values that
    are not SOC codes are kept as given.
    """
    if level not in SOC_LEVELS:
        raise ValueError(f"level must be one of {', '.join(SOC_LEVELS)}, got {level!r}")
    series = pd.Series(as_code_array(codes, "codes"), dtype=object)
    if level == "as_given":
        return series

    def cut(code: str) -> str:
        if not _SOC_PATTERN.match(code):
            return code
        detailed = to_soc_2018(code)  # O*NET-SOC codes that split a SOC code map through the lexicon
        kept = {"detailed": 4, "broad": 3, "minor": 2, "major": 0}[level]
        return f"{detailed[:3]}{detailed[3:3 + kept]}{'0' * (4 - kept)}"

    return series.map(cut)


def major_group(code):
    """The SOC major group: the first two digits of a code ("15-1252.00" -> "15"); "" if it has none.
    Other classifications group by their own hierarchy (``Classification.top_of``).

    Accepts one code or an array of codes (then returns a Series).
    """
    if isinstance(code, str) or code is None:
        text = (code or "").strip()
        return text[:2] if len(text) >= 2 and text[:2].isdigit() else ""
    return pd.Series([major_group(c) for c in as_code_array(code, "code")], dtype=object)


def per_major_group(truth, predicted, manual=None, group_of=None) -> pd.DataFrame:
    """Accuracy by the true code's major (top) group.

    ``group_of`` maps an array of codes to their groups, e.g. ``Classification.top_of`` of the
    dictionary's classification; by default a code's own shape decides
    (``classification.implicit_top``: a SOC code's first two digits, else its first character).
    Returns a DataFrame ``major_group, records, share, accuracy`` (plus ``manual_accuracy``
    when manual codes are given), largest groups first; records whose true code has no
    major group are kept under ``""``.
    """
    t, p = _paired_labels(truth, predicted)
    groups = np.asarray(group_of(t) if group_of is not None else [implicit_top(c) for c in t], dtype=object)
    frame = pd.DataFrame({"major_group": groups, "correct": t == p})
    if manual is not None:
        _, m = _paired_labels(truth, manual)
        frame["manual_correct"] = t == m
    grouped = frame.groupby("major_group", sort=True)
    table = grouped.agg(records=("correct", "size"), accuracy=("correct", "mean"))
    if manual is not None:
        table["manual_accuracy"] = grouped["manual_correct"].mean()
    table.insert(1, "share", table["records"] / len(frame))
    table = table.reset_index().sort_values(["records", "major_group"], ascending=[False, True], kind="stable")
    return table.reset_index(drop=True)


def confusions(truth, predicted, top: int = 20) -> pd.DataFrame:
    """The most frequent (true code, predicted code) pairs that disagree.

    Returns ``truth, predicted, count, share_of_truth`` where ``share_of_truth`` is the count
    over all records with that true code; ties broken by the codes for a stable order.
    """
    t, p = _paired_labels(truth, predicted)
    frame = pd.DataFrame({"truth": t, "predicted": p})
    per_truth = frame["truth"].value_counts()
    wrong = frame[frame["truth"] != frame["predicted"]]
    table = wrong.groupby(["truth", "predicted"]).size().rename("count").reset_index()
    table["share_of_truth"] = table["count"] / table["truth"].map(per_truth).astype(float)
    table = table.sort_values(["count", "truth", "predicted"], ascending=[False, True, True], kind="stable")
    return table.head(top).reset_index(drop=True)


def bootstrap_indices(n: int, n_boot: int, seed: int = 0, *, chunk: int = _BOOTSTRAP_CHUNK):
    """Yield index matrices (rows = resamples of ``range(n)``) in chunks that fit in memory.

    The stream depends only on ``(n, n_boot, seed)``: chunking draws rows in order from one generator.
    """
    rng = np.random.default_rng(seed)
    rows = max(1, chunk // max(n, 1))
    done = 0
    while done < n_boot:
        take = min(rows, n_boot - done)
        yield rng.integers(0, n, size=(take, n))
        done += take


def bootstrap_ci(func: Callable[..., float], *arrays: Sequence, n_boot: int = 1000, alpha: float = 0.05,
                 seed: int = 0, vectorized: bool = False) -> Interval:
    """Percentile bootstrap interval of ``func(*arrays)``, resampling records (rows) jointly.

    Parameters
    ----------
    func : statistic of the arrays. With ``vectorized=True`` it must also accept 2-D arrays
        (one resample per row) and return one value per row, e.g. ``lambda a: a.mean(axis=-1)``;
        the resamples are then computed in a few numpy calls instead of a Python loop.
    arrays : equal-length arrays, resampled with the same indices (paired).
    n_boot, alpha, seed : number of resamples, 1 - coverage, random seed.

    Returns
    -------
    Interval(estimate, lower, upper) with the ``alpha/2`` and ``1 - alpha/2`` percentiles.

    Example
    -------
    >>> ci = bootstrap_ci(lambda a: a.mean(axis=-1), np.r_[np.ones(80), np.zeros(20)], vectorized=True)
    >>> round(ci.estimate, 2), ci.lower < 0.8 < ci.upper
    (0.8, True)
    """
    if not arrays:
        raise ValueError("bootstrap_ci needs at least one array")
    data = [np.asarray(a) for a in arrays]
    n = len(data[0])
    if any(len(a) != n for a in data):
        raise ValueError(f"arrays must have equal lengths, got {[len(a) for a in data]}")
    if n == 0:
        raise ValueError("bootstrap_ci needs at least one record")
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must lie strictly between 0 and 1, got {alpha!r}")
    if n_boot < 1:
        raise ValueError(f"n_boot must be positive, got {n_boot!r}")
    estimate = float(func(*data))
    stats = []
    for idx in bootstrap_indices(n, n_boot, seed):
        if vectorized:
            stats.append(np.asarray(func(*[a[idx] for a in data]), dtype=float).reshape(len(idx)))
        else:
            stats.append(np.array([func(*[a[row] for a in data]) for row in idx], dtype=float))
    values = np.concatenate(stats)
    lower, upper = np.nanquantile(values, [alpha / 2, 1 - alpha / 2])
    return Interval(estimate, float(lower), float(upper))


def cohen_kappa(first, second) -> float:
    """Cohen's kappa between two raters' labels on the same items: (observed - chance agreement)
    / (1 - chance agreement), chance from each rater's own label shares (Cohen 1960).
    Returns 1.0 when both raters use one and the same label throughout (no disagreement possible)."""
    a, b = _paired_labels(first, second)
    labels, inverse = np.unique(np.concatenate([a, b]), return_inverse=True)
    ia, ib = inverse[:len(a)], inverse[len(a):]
    observed = float(np.mean(ia == ib))
    chance = float(np.dot(np.bincount(ia, minlength=len(labels)), np.bincount(ib, minlength=len(labels)))) / len(a) ** 2
    if chance >= 1.0:
        return 1.0
    return (observed - chance) / (1.0 - chance)
