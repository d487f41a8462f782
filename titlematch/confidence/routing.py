"""Threshold routing: which coded records are accepted as they are and which go to a coder.

A record is accepted when its confidence is at least the threshold and referred otherwise.
The threshold is chosen on a gold sample (records coded by experts) by simulating every
threshold: the accepted records keep the machine's code, the referred ones get the code a
person would give (the ``manual_code`` column of the gold sample, when the office has it).

Two policies, both with a bootstrap lower bound so that a lucky gold sample does not buy
more automation than the data support:

* ``min_accuracy=A``: the most automation whose accepted records are right at a rate of at
  least ``A``, judged by the ``alpha`` percentile of the accepted accuracy over resamples.
* with manual codes and no ``min_accuracy``: the most automation whose mixed result
  (machine on accepted, people on referred) is no worse than manual coding of everything,
  judged by the ``alpha`` percentile of (mix accuracy - manual accuracy) >= ``-margin``.

Without manual codes and without ``min_accuracy`` the accuracy policy applies with A = 0.97.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.metrics import f1_score

from ..measures.metrics import as_code_array, bootstrap_indices
from ..runtime.progress import progress

ACCEPT_NOTHING = float(np.nextafter(1.0, 2.0))  # above every probability: nothing is accepted
DEFAULT_MIN_ACCURACY = 0.97
POLICY_ACCURACY = "min_accuracy"
POLICY_MANUAL = "no_worse_than_manual"


@dataclass
class ThresholdChoice:
    """The chosen threshold and what the gold sample says it will deliver.

    ``expected_accuracy`` is the accuracy of the accepted gold records, ``lower_bound`` the
    bootstrap bound the policy tested (accepted accuracy, or mix minus manual accuracy),
    ``target`` what it was tested against, ``qualified`` False when no threshold passed and
    nothing is accepted. ``curve`` is the full automation curve, ``candidates`` the
    thresholds tested with their estimates and bounds.
    """

    threshold: float
    policy: str
    expected_accuracy: float
    expected_share_automated: float
    mix_accuracy: float
    manual_accuracy: float
    lower_bound: float
    curve: pd.DataFrame = field(repr=False)
    target: float = float("nan")
    qualified: bool = True
    n_gold: int = 0
    alpha: float = 0.05
    candidates: pd.DataFrame = field(default=None, repr=False)

    def describe(self) -> str:
        """One plain sentence on the choice, for reports and the command line."""
        level = f"{100 * (1 - self.alpha):.0f}%"
        if not self.qualified:
            if self.policy == POLICY_ACCURACY:
                return (f"No threshold keeps the accepted records right at {self.target:.1%} or better "
                        f"with {level} confidence on this gold sample of {self.n_gold:,} records; "
                        f"nothing is accepted and every record goes to a coder.")
            return (f"No threshold keeps the result no worse than manual coding with {level} confidence "
                    f"on this gold sample of {self.n_gold:,} records; nothing is accepted and every record "
                    f"goes to a coder.")
        text = (f"Threshold {self.threshold:.4f} accepts {self.expected_share_automated:.1%} of records, "
                f"right at {self.expected_accuracy:.1%} on the gold sample of {self.n_gold:,}")
        if self.policy == POLICY_ACCURACY:
            return text + f" (at least {self.lower_bound:.1%} with {level} confidence; target {self.target:.1%})."
        return (text + f"; machine plus coders {self.mix_accuracy:.1%} against coders alone "
                f"{self.manual_accuracy:.1%} (difference at least {self.lower_bound:+.2%} with {level} confidence).")


def read_confidence(values) -> tuple[pd.Series, pd.Series]:
    """The one reader of a confidence column as written in a coded file: ``(numbers, unreadable)``.

    Numbers in [0, 1] are kept; a blank cell means no code was offered (NaN, referred); anything else
    (text, a number outside [0, 1]) is NaN too and marked in ``unreadable``, for the caller to reject
    or report.
    """
    series = pd.Series(values)
    text = series.astype(object).where(series.notna(), "").astype(str).str.strip()
    number = pd.to_numeric(text.where(text != ""), errors="coerce").astype(float)
    unreadable = (text != "") & (number.isna() | (number < 0) | (number > 1))
    return number.where(~unreadable), unreadable


def _confidences(confidence, name: str = "confidence") -> np.ndarray:
    try:
        conf = np.asarray(pd.to_numeric(pd.Series(confidence), errors="raise"), dtype=float)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"{name} must be numbers in [0, 1]: {exc}") from None
    finite = conf[~np.isnan(conf)]
    if len(finite) and (finite.min() < 0 or finite.max() > 1):
        raise ValueError(f"{name} must lie in [0, 1], got values from {finite.min()} to {finite.max()}")
    return conf


def _gold_inputs(confidence, machine_code, expert_code, manual_code):
    conf = _confidences(confidence)
    machine = as_code_array(machine_code, "machine_code")
    expert = as_code_array(expert_code, "expert_code")
    manual = None if manual_code is None else as_code_array(manual_code, "manual_code")
    lengths = {"confidence": len(conf), "machine_code": len(machine), "expert_code": len(expert)}
    if manual is not None:
        lengths["manual_code"] = len(manual)
    if len(set(lengths.values())) != 1:
        raise ValueError(f"gold sample arrays differ in length: {lengths}")
    if len(conf) == 0:
        raise ValueError("the gold sample is empty")
    if (expert == "").any():
        raise ValueError(f"expert_code is missing for {int((expert == '').sum())} records; the gold sample needs "
                         f"an expert code for every record")
    return conf, machine, expert, manual


def check_threshold(threshold, name: str = "threshold") -> float:
    """``threshold`` as a float in [0, 1]; anything else (nan, inf, -1, text) is a ValueError."""
    try:
        value = float(threshold)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number from 0 to 1, got {threshold!r}") from None
    if not 0.0 <= value <= 1.0:  # also false for nan
        raise ValueError(f"{name} must be a number from 0 to 1, got {threshold!r}")
    return value


def route(confidence, threshold: float, refer_threshold: float | None = None, *, flags=None) -> np.ndarray:
    """The one accept / refer rule of the coder, the calibration, the evaluation and the linker.

    ``"accept"`` where confidence >= ``threshold`` (exactly), else ``"refer"``; a missing confidence is
    referred. With ``refer_threshold`` (the linker's lower bound) a confidence below it is ``"no-match"``.
    A record with a non-empty flag (``flags``, aligned: the gate of :mod:`titlematch.coding.gate`
    marks titles that name no occupation) is never accepted, whatever its confidence. Thresholds
    are numbers from 0 to 1 (``threshold`` may also be ``ACCEPT_NOTHING``, just above 1).

    >>> route([0.5, 0.9, float("nan")], 0.9).tolist()
    ['refer', 'accept', 'refer']
    >>> route([0.2, 0.5, 0.95], 0.9, refer_threshold=0.5).tolist()
    ['no-match', 'refer', 'accept']
    >>> route([0.99, 0.99], 0.9, flags=["", "non-answer: 'refused'"]).tolist()
    ['accept', 'refer']
    """
    if threshold != ACCEPT_NOTHING:
        threshold = check_threshold(threshold)
    conf = _confidences(confidence)
    with np.errstate(invalid="ignore"):
        decision = np.where(np.nan_to_num(conf, nan=-1.0) >= float(threshold), "accept", "refer").astype(object)
        if refer_threshold is not None:
            refer_threshold = check_threshold(refer_threshold, "refer_threshold")
            if not refer_threshold <= float(threshold):
                raise ValueError(f"refer_threshold ({refer_threshold}) must not exceed threshold ({threshold})")
            decision[~(conf >= refer_threshold)] = "no-match"
    if flags is not None:
        decision[flagged(flags, len(decision)) & (decision == "accept")] = "refer"
    return decision


def flagged(flags, n: int) -> np.ndarray:
    """Which records the gate flagged: a non-empty flag (NaN or empty text is no flag)."""
    out = np.array([bool(f) and f == f for f in flags], dtype=bool)  # f == f: NaN is no flag
    if len(out) != n:
        raise ValueError(f"flags has {len(out)} values for {n} confidences")
    return out


def gated(confidence, flags=None) -> np.ndarray:
    """Confidences as the router sees them: a flagged record's is missing (never accepted at any
    threshold), so simulating a threshold on a gold sample refers what the coder would refer."""
    conf = _confidences(confidence).astype(np.float64, copy=True)
    if flags is not None:
        conf[flagged(flags, len(conf))] = np.nan
    return conf


def automation_curve(confidence, machine_code, expert_code, manual_code=None, *, grid_size: int = 100) -> pd.DataFrame:
    """Accuracy against share automated for every distinct threshold of a gold sample.

    Parameters
    ----------
    confidence : confidences of the machine's codes (NaN = no code offered, never accepted).
    machine_code, expert_code : the machine's top code and the expert's code per record.
    manual_code : optional code a coder gave in routine work; then the referred records take it.
    grid_size : macro-F1 of the mix is computed at about this many thresholds (it needs a
        full pass per threshold); accuracy is computed at all of them.

    Returns
    -------
    DataFrame, thresholds ascending (the last row, ``ACCEPT_NOTHING``, accepts nothing):
    ``threshold, n_accepted, share_automated, accepted_accuracy`` and, with manual codes,
    ``mix_accuracy, mix_macro_f1`` (NaN off the grid).

    Example
    -------
    >>> automation_curve([0.9, 0.6], ["11-1011", "15-1252"], ["11-1011", "13-2011"])[
    ...     ["threshold", "n_accepted", "accepted_accuracy"]].values.tolist()
    [[0.6, 2.0, 0.5], [0.9, 1.0, 1.0], [1.0000000000000002, 0.0, nan]]
    """
    conf, machine, expert, manual = _gold_inputs(confidence, machine_code, expert_code, manual_code)
    n = len(conf)
    valid = ~np.isnan(conf)
    order = np.argsort(np.where(valid, -conf, np.inf), kind="stable")  # most confident first, missing last
    machine_right = np.cumsum((machine == expert)[order])
    thresholds = np.unique(conf[valid])
    ascending = np.sort(conf[valid])
    n_accepted = (len(ascending) - np.searchsorted(ascending, thresholds, side="left")).astype(int)
    thresholds = np.append(thresholds, ACCEPT_NOTHING)
    n_accepted = np.append(n_accepted, 0)
    right = np.where(n_accepted > 0, machine_right[np.maximum(n_accepted - 1, 0)], 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        accepted_accuracy = np.where(n_accepted > 0, right / np.maximum(n_accepted, 1), np.nan)
    curve = pd.DataFrame({"threshold": thresholds, "n_accepted": n_accepted.astype(float),
                          "share_automated": n_accepted / n, "accepted_accuracy": accepted_accuracy})
    if manual is not None:
        manual_right = np.cumsum((manual == expert)[order])
        manual_on_accepted = np.where(n_accepted > 0, manual_right[np.maximum(n_accepted - 1, 0)], 0)
        curve["mix_accuracy"] = (right + manual_right[-1] - manual_on_accepted) / n
        curve["mix_macro_f1"] = np.nan
        rows = np.unique(np.linspace(0, len(curve) - 1, min(grid_size, len(curve))).round().astype(int))
        # Integer labels make each f1_score call several times faster than object strings.
        codes, uniques = pd.factorize(np.concatenate([expert, machine, manual]))
        expert_sorted, machine_sorted, manual_sorted = (codes[i * n:(i + 1) * n][order] for i in range(3))
        for row in rows:
            k = int(n_accepted[row])
            mix = np.concatenate([machine_sorted[:k], manual_sorted[k:]])
            curve.loc[row, "mix_macro_f1"] = f1_score(expert_sorted, mix, average="macro", zero_division=0)
    return curve


def _candidate_grid(conf: np.ndarray, grid_size: int) -> np.ndarray:
    """Thresholds to test, descending: every distinct confidence, or ``grid_size`` of them spread by rank."""
    values = np.sort(conf[~np.isnan(conf)])[::-1]
    if len(values) == 0:
        return values
    distinct = np.unique(values)[::-1]
    if len(distinct) <= grid_size:
        return distinct
    positions = np.linspace(0, len(values) - 1, grid_size).round().astype(int)
    return np.unique(values[positions])[::-1]


def _bootstrap_bounds(bins: np.ndarray, n_grid: int, weights: np.ndarray, counts_needed: bool, n_boot: int,
                      seed: int, alpha: float, n: int, quiet: bool) -> np.ndarray:
    """The ``alpha`` percentile, at each grid threshold, of a statistic of the accepted records.

    ``bins[i]`` is the first grid threshold that accepts record i (``n_grid`` = never). Per
    resample a 2-D bincount gives the weight sum in every bin; cumulative sums give the
    accepted totals at each threshold. With ``counts_needed`` the statistic is the weight
    sum over the accepted count (accepted accuracy, 0 when nothing is accepted); otherwise
    it is the weight sum over ``n`` (a difference in accuracy over the whole sample).
    """
    width = n_grid + 1
    chunks = list(bootstrap_indices(n, n_boot, seed))
    results = []
    for idx in progress(chunks, total=len(chunks), desc="bootstrap", quiet=quiet, min_total=4):
        m = len(idx)
        flat = (np.arange(m)[:, None] * width + bins[idx]).ravel()
        totals = np.bincount(flat, weights=weights[idx].ravel(), minlength=m * width).reshape(m, width)
        sums = np.cumsum(totals[:, :n_grid], axis=1)
        if counts_needed:
            counts = np.cumsum(np.bincount(flat, minlength=m * width).reshape(m, width)[:, :n_grid], axis=1)
            stat = np.where(counts > 0, sums / np.maximum(counts, 1), 0.0)
        else:
            stat = sums / n
        results.append(stat)
    return np.quantile(np.vstack(results), alpha, axis=0)


def choose_threshold(confidence, machine_code, expert_code, manual_code=None, *, min_accuracy: float | None = None,
                     margin: float = 0.0, alpha: float = 0.05, n_boot: int = 500, seed: int = 0,
                     min_accepted: int = 20, grid_size: int = 400, quiet: bool = True) -> ThresholdChoice:
    """Choose the lowest threshold (most automation) that the gold sample supports.

    Parameters
    ----------
    confidence, machine_code, expert_code, manual_code : the gold sample, as in ``automation_curve``.
    min_accuracy : required accuracy of the accepted records (policy ``"min_accuracy"``).
    margin : with manual codes and no ``min_accuracy``, how much worse than manual coding
        alone the mix may be (0 = no worse).
    alpha : the one-sided bootstrap bound is the ``alpha`` percentile (0.05 = 95% confidence).
    n_boot, seed : bootstrap resamples of the gold sample and their seed.
    min_accepted : thresholds accepting fewer gold records are not chosen; a handful of
        records says too little, even when they are all right.
    grid_size : at most this many thresholds are tested, spread evenly by rank.

    Returns
    -------
    ThresholdChoice; when no threshold qualifies, ``threshold = ACCEPT_NOTHING`` (just above
    1.0), ``qualified = False`` and ``describe()`` says so.

    Example
    -------
    >>> rng = np.random.default_rng(0); p = rng.uniform(size=4000)
    >>> codes = np.where(rng.uniform(size=4000) < p, "11-1011", "13-2011")
    >>> choice = choose_threshold(p, ["11-1011"] * 4000, codes, min_accuracy=0.9)
    >>> 0.75 < choice.threshold < 0.9
    True
    """
    conf, machine, expert, manual = _gold_inputs(confidence, machine_code, expert_code, manual_code)
    if min_accuracy is not None and not 0 < min_accuracy <= 1:
        raise ValueError(f"min_accuracy must lie in (0, 1], got {min_accuracy!r}")
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must lie strictly between 0 and 1, got {alpha!r}")
    if margin < 0:
        raise ValueError(f"margin must be zero or positive, got {margin!r}")
    if n_boot < 1 or min_accepted < 1 or grid_size < 1:
        raise ValueError(f"n_boot, min_accepted and grid_size must be positive, got {n_boot}, {min_accepted}, "
                         f"{grid_size}")
    n = len(conf)
    policy = POLICY_MANUAL if (manual is not None and min_accuracy is None) else POLICY_ACCURACY
    target = -margin if policy == POLICY_MANUAL else (min_accuracy if min_accuracy is not None
                                                      else DEFAULT_MIN_ACCURACY)
    curve = automation_curve(conf, machine, expert, manual)
    machine_right = (machine == expert).astype(float)
    manual_right = None if manual is None else (manual == expert).astype(float)
    manual_accuracy = float("nan") if manual is None else float(manual_right.mean())

    grid = _candidate_grid(conf, grid_size)
    ascending = grid[::-1]
    filled = np.where(np.isnan(conf), -np.inf, conf)
    bins = len(grid) - np.searchsorted(ascending, filled, side="right")  # first grid threshold accepting it
    if policy == POLICY_ACCURACY:
        weights, counts_needed = machine_right, True
    else:
        weights, counts_needed = machine_right - manual_right, False
    if len(grid):
        lower = _bootstrap_bounds(bins, len(grid), weights, counts_needed, n_boot, seed, alpha, n, quiet)
    else:
        lower = np.array([])
    ranked = np.sort(conf[~np.isnan(conf)])
    n_accepted = (len(ranked) - np.searchsorted(ranked, grid, side="left")).astype(int)
    point = curve.set_index("threshold").reindex(grid)
    candidates = pd.DataFrame({"threshold": grid, "n_accepted": n_accepted, "share_automated": n_accepted / n,
                               "accepted_accuracy": point["accepted_accuracy"].to_numpy(), "lower_bound": lower})
    candidates["qualifies"] = (candidates["lower_bound"] >= target - 1e-12) & (candidates["n_accepted"] >= min_accepted)
    candidates = candidates.sort_values("threshold").reset_index(drop=True)

    passing = candidates[candidates["qualifies"]]
    if passing.empty:
        return ThresholdChoice(ACCEPT_NOTHING, policy, float("nan"), 0.0, manual_accuracy, manual_accuracy,
                               float("nan"), curve, target, False, n, alpha, candidates)
    best = passing.iloc[0]  # lowest qualifying threshold = most records accepted
    row = curve.loc[curve["threshold"] == best["threshold"]].iloc[0]
    mix = float(row["mix_accuracy"]) if manual is not None else float("nan")
    return ThresholdChoice(float(best["threshold"]), policy, float(row["accepted_accuracy"]),
                           float(row["share_automated"]), mix, manual_accuracy, float(best["lower_bound"]), curve,
                           target, True, n, alpha, candidates)
