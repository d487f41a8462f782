"""Calibrating a confidence model for a dictionary and choosing its acceptance threshold.

The steps ``titlematch calibrate`` runs, as one function for the Python API:
labels from history -> model choice and cross-fitted calibration -> (gold sample:
re-fitted calibration) -> the gold-standard simulation of thresholds -> reliability
report, curve and plots written into the model directory.
"""
from __future__ import annotations

import json
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..coding.coder import TitleCoder
from .model import ConfidenceModel, consistent
from ..coding.features import FEATURES
from ..io import write_table
from .labels import gold_labels, history_labels, top_candidates
from ..measures.metrics import brier_score, expected_calibration_error, log_loss, per_major_group, reliability_table
from ..measures.plots import plot_automation_curve, plot_reliability
from ..runtime.progress import Stages
from .routing import DEFAULT_MIN_ACCURACY, choose_threshold, gated, route


@dataclass
class CalibrationResult:
    model: ConfidenceModel
    choice: object
    report: dict
    reliability: pd.DataFrame
    major_groups: pd.DataFrame


def calibrate(coder: TitleCoder, gold: pd.DataFrame | None = None, *, min_accuracy: float | None = None,
              n_boot: int = 500, random_state: int = 0, max_units: int = 20_000,
              quiet: bool = True) -> CalibrationResult:
    """Learn a confidence model for ``coder`` and choose its threshold.

    ``gold`` has ``title`` [, ``context``], ``code`` (expert) and optionally ``manual_code``.
    Without it the threshold is chosen on held-out history against production codes, which the
    report marks as less reliable.
    """
    stages = Stages(4, "calibrate", quiet)
    # The gold sample is coded on a second thread while the history's coder is fitted: that fit
    # spends its time in sparse products that release the interpreter lock, the coding in Python.
    # Each result is what it would be alone (neither writes anything the other reads).
    with ThreadPoolExecutor(1) as executor:
        coding_gold = executor.submit(gold_labels, coder, gold) if gold is not None else None
        try:
            train, history_error = history_labels(coder.dictionary_, max_units=max_units,
                                                  random_state=random_state), None
        except ValueError as error:
            train, history_error = None, error
        feats = coding_gold.result() if coding_gold is not None else None
    with_gold = feats is not None and feats["label"].nunique() == 2
    if history_error is not None:
        if not with_gold:
            raise history_error
        # a first year of coding: too few records to hold any out, so the gold sample teaches alone
        train = feats.iloc[:0].assign(weight=pd.Series(dtype=float))
    stages.step("labels from history")
    model = ConfidenceModel(random_state=random_state)
    if with_gold:
        history = train if train["label"].nunique() == 2 else train.iloc[:0]  # one-sided history says nothing
        model.fit_with_gold(history[FEATURES], history["label"], history["record"], history["weight"],
                            feats[FEATURES], feats["label"], feats["record"])
    elif train["label"].nunique() == 2:
        model.fit(train[FEATURES], train["label"], groups=train["record"], sample_weight=train["weight"])
    else:
        model.fit_unsupervised(train)
    stages.step(f"model: {model.base_name_}")
    if gold is not None:
        if not with_gold:  # the history alone ranks (a gold sample of one label); gold re-fits the map
            model.recalibrate(feats[FEATURES], feats["label"], groups=feats["record"])
        feats["confidence"] = consistent(model.oof_confidence_, feats["record"].to_numpy())
        top = top_candidates(feats, len(gold))
        expert = gold["code"].astype(str).str.strip().to_numpy()
        manual = gold["manual_code"].astype(str).str.strip().to_numpy() if "manual_code" in gold.columns else None
        evaluated_on = "gold sample (out-of-fold confidences)"
    else:
        n_records = int(train["record"].max()) + 1 if len(train) else 0
        feats = train
        if hasattr(model, "oof_confidence_"):
            feats = feats.assign(confidence=consistent(model.oof_confidence_, feats["record"].to_numpy()))
        else:
            feats = feats.assign(confidence=model.score_candidates(feats)["confidence"].to_numpy())
        top = top_candidates(feats, n_records)
        expert = _recorded_codes(coder, train, n_records)
        manual = None
        evaluated_on = "held-out past records against production codes (less reliable than a gold sample)"
    stages.step("confidences on " + ("the gold sample" if gold is not None else "held-out history"))
    conf, machine = top["confidence"].to_numpy(), top["code"].to_numpy(dtype=object)
    correct = (machine == expert).astype(int)
    if min_accuracy is None and manual is None:  # without manual codes there is no "no worse than manual"
        min_accuracy = DEFAULT_MIN_ACCURACY
    # the gate's flagged titles are referred whatever their confidence, in the simulation as in production
    flags = coder.flags(gold) if gold is not None else None
    choice = choose_threshold(gated(conf, flags), machine, expert, manual, min_accuracy=min_accuracy, n_boot=n_boot,
                              seed=random_state)
    model.threshold_ = float(choice.threshold)
    stages.step("threshold")
    stages.close()
    accepted = route(conf, model.threshold_, flags=flags) == "accept"
    groups = (per_major_group(expert[accepted], machine[accepted], group_of=coder.dictionary_.hierarchy.top_of)
              if accepted.any() else pd.DataFrame())
    report = {
        "label_source": model.source_, "evaluated_on": evaluated_on, "records": int(len(top)),
        "base_model": model.base_name_, "cv_log_loss": model.cv_log_loss_,
        "calibration": {part: cal["method"] for part, cal in model.calibration_.items()},
        "ece_15_bins": expected_calibration_error(correct, conf, n_bins=15),
        "brier": brier_score(correct, conf), "log_loss": log_loss(correct, np.clip(conf, 1e-6, 1 - 1e-6)),
        "accuracy_top": float(correct.mean()) if len(correct) else float("nan"),
        "threshold": model.threshold_, "policy": choice.policy, "decision": choice.describe(),
        "expected_accuracy": choice.expected_accuracy, "share_automated": choice.expected_share_automated,
        "mix_accuracy": choice.mix_accuracy, "manual_accuracy": choice.manual_accuracy,
    }
    if model.base_name_ == "fellegi_sunter":
        report["warning"] = "no labels: Fellegi-Sunter EM posterior, less reliable until calibrated on a gold sample"
    result = CalibrationResult(model, choice, report, reliability_table(correct, conf, n_bins=15), groups)
    result.correct, result.confidence = correct, conf
    return result


def _recorded_codes(coder: TitleCoder, train: pd.DataFrame, n_records: int) -> np.ndarray:
    """The recorded (production) code per held-out unit, recovered from the labelled rows."""
    codes = np.full(n_records, "", dtype=object)
    right = train[train["label"] == 1]
    codes[right["record"].to_numpy()] = right["code"].to_numpy()
    # units whose recorded code is not among the candidates: unknown code, never equal to the machine's
    codes[codes == ""] = "<not among candidates>"
    return codes


def save_calibration(result: CalibrationResult, directory: str | os.PathLike) -> dict[str, Path]:
    """Save the model (safe artefact) plus report.json, curve.csv, reliability.csv and the two PNGs."""
    directory = Path(directory)
    result.model.save(directory, report=result.report)
    paths = {"model": directory}
    paths["report"] = directory / "report.json"
    paths["report"].write_text(json.dumps(result.report, indent=2, default=float) + "\n", encoding="utf-8")
    paths["curve"] = write_table(result.choice.curve, directory / "curve.csv")
    paths["reliability"] = write_table(result.reliability, directory / "reliability.csv")
    if len(result.major_groups):
        paths["major_groups"] = write_table(result.major_groups, directory / "major_groups.csv")
    paths["curve_plot"] = plot_automation_curve(result.choice.curve, result.choice, directory / "automation_curve.png")
    paths["reliability_plot"] = plot_reliability(result.correct, result.confidence, directory / "reliability.png")
    return paths
