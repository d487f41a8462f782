"""Figures for the evaluation and drift reports, drawn off-screen as PNG files.

Figures are built on ``matplotlib.figure.Figure`` with the Agg canvas, never through
pyplot, so nothing opens a window or touches global state, and a server without a display
draws them the same way. Each function writes its PNG atomically and returns the path.
"""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..io import atomic_path
from .metrics import reliability_table

DPI = 100


def _save(fig: Figure, path: str | os.PathLike) -> Path:
    path = Path(path)
    FigureCanvasAgg(fig)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=DPI)
    return path


def plot_automation_curve(curve: pd.DataFrame, choice, path: str | os.PathLike) -> Path:
    """Accuracy against the share of records coded automatically, with the chosen threshold marked.

    Parameters
    ----------
    curve : ``routing.automation_curve`` output.
    choice : a ``routing.ThresholdChoice`` (or None for the curve alone).
    path : PNG file to write.
    """
    fig = Figure(figsize=(7, 4.5))
    ax = fig.add_subplot()
    data = curve.sort_values("share_automated")
    share = 100 * data["share_automated"]
    ax.plot(share, 100 * data["accepted_accuracy"], label="accepted records: share right")
    if "mix_accuracy" in data:
        ax.plot(share, 100 * data["mix_accuracy"], label="all records, machine + coders: share right")
    if choice is not None:
        if choice.manual_accuracy == choice.manual_accuracy:  # not NaN
            ax.axhline(100 * choice.manual_accuracy, linestyle="--", color="grey", label="coders alone")
        if choice.policy == "min_accuracy":
            ax.axhline(100 * choice.target, linestyle=":", color="black", label=f"target {choice.target:.1%}")
        if choice.qualified:
            ax.axvline(100 * choice.expected_share_automated, linestyle="-.", color="black",
                       label=f"chosen threshold {choice.threshold:.3f}")
    ax.set_xlabel("records coded automatically (%)")
    ax.set_ylabel("records coded right (%)")
    ax.set_xlim(0, 100)
    ax.set_title("How much to automate: quality against automation on the gold sample")
    ax.grid(True, alpha=0.3)
    ax.legend(loc="lower left", fontsize="small")
    return _save(fig, path)


def plot_reliability(y_true, prob, path: str | os.PathLike, n_bins: int = 15) -> Path:
    """Reliability diagram (observed share right against stated confidence) above a histogram of counts."""
    table = reliability_table(y_true, prob, n_bins=n_bins)
    fig = Figure(figsize=(6, 6))
    top, bottom = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 1]})
    top.plot([0, 1], [0, 1], linestyle="--", color="grey", label="confidence = share right")
    shown = table[table["count"] > 0]
    top.plot(shown["mean_predicted"], shown["observed_rate"], marker="o", label="records in each confidence band")
    top.set_ylabel("share of codes that were right")
    top.set_ylim(0, 1)
    top.set_title("Does the confidence mean what it says?")
    top.grid(True, alpha=0.3)
    top.legend(loc="upper left", fontsize="small")
    width = table["upper"] - table["lower"]
    bottom.bar(table["lower"], table["count"], width=width, align="edge", edgecolor="white")
    bottom.set_xlabel("confidence")
    bottom.set_ylabel("records")
    bottom.set_xlim(0, 1)
    return _save(fig, path)


def plot_confidence_shift(old, new, path: str | os.PathLike, n_bins: int = 20) -> Path:
    """Distributions of the confidences of two periods, as outlines on shared bins."""
    old = np.asarray(old, dtype=float)
    new = np.asarray(new, dtype=float)
    old, new = old[~np.isnan(old)], new[~np.isnan(new)]
    fig = Figure(figsize=(7, 4))
    ax = fig.add_subplot()
    edges = np.linspace(0, 1, n_bins + 1)
    for values, label in ((old, "old"), (new, "new")):
        if len(values):
            weights = np.full(len(values), 100 / len(values))
            ax.hist(values, bins=edges, weights=weights, histtype="step", linewidth=2,
                    label=f"{label} ({len(values):,})")
    ax.set_xlabel("confidence")
    ax.set_ylabel("records (%)")
    ax.set_title("Confidence of the machine's codes, old and new")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize="small")
    return _save(fig, path)


def plot_share_shift(shares: pd.DataFrame, path: str | os.PathLike, label: str = "major group") -> Path:
    """Side-by-side bars of old and new shares per category (columns ``category, old_share, new_share``)."""
    fig = Figure(figsize=(7, max(3, 0.28 * len(shares) + 1.5)))
    ax = fig.add_subplot()
    positions = np.arange(len(shares))
    ax.barh(positions - 0.2, 100 * shares["old_share"], height=0.4, label="old")
    ax.barh(positions + 0.2, 100 * shares["new_share"], height=0.4, label="new")
    ax.set_yticks(positions, [str(c) or "(none)" for c in shares["category"]])
    ax.invert_yaxis()
    ax.set_xlabel("records (%)")
    ax.set_ylabel(label)
    ax.set_title(f"Mix of codes by {label}, old and new")
    ax.grid(True, axis="x", alpha=0.3)
    ax.legend(fontsize="small")
    return _save(fig, path)
