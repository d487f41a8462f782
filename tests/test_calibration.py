"""Self-supervised labels without leakage, gold recalibration, threshold choice and the CLI."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from titlematch.cli import main
from titlematch.coding.coder import TitleCoder
from titlematch.confidence.model import ConfidenceModel
from titlematch.coding.dictionary import TitleDictionary
from titlematch.confidence.labels import history_labels
from titlematch.measures.metrics import brier_score, expected_calibration_error, log_loss
from titlematch.datasets.scenario import classification, make_title_scenario


@pytest.fixture(scope="module")
def scenario():
    # vague_share=0: the scenario these bounds were set on (the default since adds vague titles)
    return make_title_scenario(seed=3, records_per_year=2_500, new_records=1_200, gold_records=600,
                               vague_share=0.0)


def test_a_title_seen_once_does_not_match_itself_in_self_supervision():
    past = pd.DataFrame({"title": ["line cook"] * 20 + ["zymurgist"], "code": ["35-2014"] * 20 + ["51-9012"],
                         "year": [2023] * 10 + [2024] * 10 + [2024]})
    d = TitleDictionary().fit(past)
    feats = history_labels(d)
    unique = d.units.reset_index(drop=True)
    unit = unique[(unique["key"] == "zymurgist") & (unique["year"] == 2024)]
    held_out = feats[feats["code"] == "51-9012"]
    # the only record of "zymurgist" is held out: its code cannot be found from itself
    assert not len(unit) or held_out.empty or (held_out["exact"] == 0).all()
    assert (feats.loc[feats["exact"] == 1, "key"] == "line cook").all()


def test_single_year_history_splits_records_without_leakage():
    past = pd.DataFrame({"title": ["registered nurse"] * 30 + ["zymurgist"], "code": ["29-1141"] * 30 + ["51-9012"]})
    feats = history_labels(TitleDictionary().fit(past))
    assert not ((feats["key"] == "zymurgist") & (feats["exact"] == 1)).any()
    assert feats["label"].isin([0, 1]).all() and (feats["weight"] >= 1).all()


def test_calibrate_cli_writes_model_report_and_plots(tmp_path, scenario):
    past = scenario["past"]
    for year, part in past.groupby("year"):
        part.to_csv(tmp_path / f"past_{year}.csv", index=False)
    classification().to_csv(tmp_path / "soc.csv", index=False)
    scenario["gold"].to_csv(tmp_path / "gold.csv", index=False)
    files = sorted(str(p) for p in tmp_path.glob("past_*.csv"))
    assert main(["dictionary", *files, "--classification", str(tmp_path / "soc.csv"), "--out",
                 str(tmp_path / "dict"), "--quiet"]) == 0
    assert main(["calibrate", "--dictionary", str(tmp_path / "dict"), "--gold", str(tmp_path / "gold.csv"),
                 "--min-accuracy", "0.95", "--bootstrap", "200", "--out", str(tmp_path / "model"), "--quiet"]) == 0
    model_dir = tmp_path / "model"
    for name in ("manifest.json", "report.json", "curve.csv", "reliability.csv", "automation_curve.png",
                 "reliability.png"):
        assert (model_dir / name).is_file(), name
    assert (model_dir / "automation_curve.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    report = json.loads((model_dir / "report.json").read_text())
    assert report["policy"] == "min_accuracy" and report["label_source"] == "history and gold sample"
    model = ConfidenceModel.load(model_dir)
    assert model.threshold_ == pytest.approx(report["threshold"])
    # reported measures agree with the reference definitions on the saved reliability table
    rel = pd.read_csv(model_dir / "reliability.csv")
    assert rel["count"].sum() == len(scenario["gold"])
    # coding with the model: the decision column honours the threshold exactly (and the gate:
    # titles flagged as naming no occupation are referred whatever their confidence)
    scenario["new"].to_csv(tmp_path / "new.csv", index=False)
    assert main(["code", str(tmp_path / "new.csv"), "--dictionary", str(tmp_path / "dict"), "--model",
                 str(model_dir), "--out", str(tmp_path / "coded.csv"), "--quiet"]) == 0
    coded = pd.read_csv(tmp_path / "coded.csv", keep_default_na=False)
    conf = pd.to_numeric(coded["confidence"], errors="coerce")
    assert (((conf >= model.threshold_) & (coded["title_flag"] == "")) == (coded["decision"] == "accept")).all()
    assert {"confidence_2", "confidence_3"} <= set(coded.columns)


def test_gold_recalibration_is_calibrated_on_held_out_records(scenario):
    # ECE, Brier and log loss of the out-of-fold confidences; measures checked against scikit-learn
    # in tests/test_metrics.py. A loose bound: a 600-record gold sample is small.
    from titlematch.confidence.calibration import calibrate
    coder = TitleCoder().fit(scenario["past"], scenario["past"]["code"], classification=classification())
    result = calibrate(coder, scenario["gold"], n_boot=200)
    assert result.report["ece_15_bins"] < 0.06
    assert result.report["brier"] == pytest.approx(brier_score(result.correct, result.confidence))
    assert result.report["log_loss"] == pytest.approx(
        log_loss(result.correct, np.clip(result.confidence, 1e-6, 1 - 1e-6)))
    assert result.report["ece_15_bins"] == pytest.approx(
        expected_calibration_error(result.correct, result.confidence, n_bins=15))


def test_calibrate_without_gold_uses_history_and_says_so(scenario):
    from titlematch.confidence.calibration import calibrate
    coder = TitleCoder().fit(scenario["past"], scenario["past"]["code"])
    result = calibrate(coder, None, n_boot=100)
    assert "less reliable" in result.report["evaluated_on"]
    assert result.report["policy"] == "min_accuracy"
