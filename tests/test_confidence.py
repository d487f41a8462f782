"""Confidence model: base models as plain arrays, calibration maps, EM start, persistence, routing."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import recordlinkage
from sklearn.calibration import _sigmoid_calibration
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.linear_model import LogisticRegression

from titlematch.confidence.fellegi_sunter import FellegiSunterModel
from titlematch.io.artefact import ArtefactError
from titlematch.confidence.model import (ConfidenceModel, _evaluate_trees, _export_trees, apply_calibration, binarize,
                                   fit_calibration, platt_scaling)
from titlematch.coding.features import FEATURES


def _synthetic(n=3000, seed=0):
    rng = np.random.default_rng(seed)
    X = pd.DataFrame(rng.random((n, len(FEATURES))), columns=FEATURES)
    logit = 4 * X["share"] + 3 * X["sim_char"] - 3.5 + 0.5 * rng.standard_normal(n)
    y = (rng.random(n) < 1 / (1 + np.exp(-logit))).astype(int)
    return X, y


def test_exported_trees_reproduce_sklearn_decision_function():
    # Reference library: scikit-learn's HistGradientBoostingClassifier.decision_function.
    X, y = _synthetic()
    X.iloc[::17, 3] = np.nan  # missing values follow the learned side
    from threadpoolctl import threadpool_limits
    with threadpool_limits(1):  # OpenMP threads only slow a small fit on a busy machine
        model = HistGradientBoostingClassifier(max_iter=30, random_state=0).fit(X.to_numpy(), y)
    ours = _evaluate_trees(_export_trees(model), X.to_numpy())
    np.testing.assert_allclose(ours, model.decision_function(X.to_numpy()), rtol=1e-9, atol=1e-9)


def test_trees_give_the_same_scores_on_row_slices_and_threads(monkeypatch):
    # Large inputs are evaluated in row slices on threads: the scores must be the single-thread ones
    # exactly, and still scikit-learn's decision_function (reference library).
    import titlematch.confidence.model as model_module
    import titlematch.runtime.pool as pool
    X, y = _synthetic()
    X.iloc[::13, 2] = np.nan
    model = HistGradientBoostingClassifier(max_iter=20, random_state=0).fit(X.to_numpy(), y)
    arrays = _export_trees(model)
    monkeypatch.setattr(pool, "available_cores", lambda: 1)
    one = _evaluate_trees(arrays, X.to_numpy())
    monkeypatch.setattr(pool, "available_cores", lambda: 2)
    monkeypatch.setattr(model_module, "TREE_THREAD_ROWS", 10)
    two = _evaluate_trees(arrays, X.to_numpy())
    np.testing.assert_array_equal(one, two)
    np.testing.assert_allclose(two, model.decision_function(X.to_numpy()), rtol=1e-9, atol=1e-9)


def test_platt_scaling_matches_scikit_learn_sigmoid_calibration():
    # Reference library: scikit-learn's Platt (1999) implementation with the same target smoothing.
    rng = np.random.default_rng(3)
    raw = rng.normal(size=2000)
    y = (rng.random(2000) < 1 / (1 + np.exp(-(2 * raw - 0.5)))).astype(int)
    a, b = platt_scaling(raw, y)
    a_ref, b_ref = _sigmoid_calibration(raw, y)
    assert a == pytest.approx(a_ref, rel=1e-3, abs=1e-3) and b == pytest.approx(b_ref, rel=1e-3, abs=1e-3)
    # closed form: scores that are already log-odds need P = 1/(1+exp(a s + b)) with a ~ -2, b ~ 0.5 here
    assert a == pytest.approx(-2.0, abs=0.25) and b == pytest.approx(0.5, abs=0.2)


def test_isotonic_map_is_monotone_and_bounded():
    X, y = _synthetic()
    cal = fit_calibration(X["share"].to_numpy(), y, method="isotonic")
    grid = np.linspace(-1, 2, 50)
    p = apply_calibration(cal, grid)
    assert np.all(np.diff(p) >= 0) and p.min() >= 0 and p.max() <= 1


def test_fellegi_sunter_posterior_matches_recordlinkage_ecm():
    # Reference library: recordlinkage's ECMClassifier (Fellegi-Sunter with EM-estimated m/u probabilities).
    X, y = _synthetic(2000, seed=5)
    X["exact"] = (X["share"] > 0.8).astype(float)
    model = ConfidenceModel().fit_unsupervised(X)
    binary = binarize(X)
    binary.index = pd.MultiIndex.from_arrays([np.arange(len(binary))] * 2)
    ecm = recordlinkage.ECMClassifier(binarize=None)
    ecm.fit(binary)
    expected = ecm.prob(binary).to_numpy()
    ours = model.predict_proba(X)[:, 1]
    np.testing.assert_allclose(ours, expected, atol=1e-6)
    assert "less reliable" in model.source_


def test_model_choice_by_log_loss_and_calibrated_probabilities():
    X, y = _synthetic(4000)
    model = ConfidenceModel().fit(X, y)
    assert set(model.cv_log_loss_) == {"logistic", "gradient_boosting"}
    assert model.base_name_ == min(model.cv_log_loss_, key=model.cv_log_loss_.get)
    # out-of-fold calibrated probabilities match observed rates: ECE small (15 bins)
    from titlematch.measures.metrics import expected_calibration_error
    assert expected_calibration_error(y, model.oof_confidence_, n_bins=15) < 0.03
    # the logistic base model is the same as scikit-learn's on standardised features
    lr = ConfidenceModel(models=("logistic",)).fit(X, y)
    ref = LogisticRegression(max_iter=1000).fit((X - X.mean()) / X.std(ddof=0), y)
    np.testing.assert_allclose(lr.base_arrays_["coef"], ref.coef_.ravel(), rtol=1e-3, atol=1e-3)


def test_round_trip_and_tampered_model_refused(tmp_path):
    X, y = _synthetic(1500)
    model = ConfidenceModel().fit(X, y)
    model.threshold_ = 0.9
    model.save(tmp_path / "m")
    again = ConfidenceModel.load(tmp_path / "m")
    np.testing.assert_array_equal(model.predict_proba(X), again.predict_proba(X))
    assert again.threshold_ == 0.9
    target = tmp_path / "m" / "calibration_top_x.npy"
    data = bytearray(target.read_bytes())
    data[-1] ^= 0x01
    target.write_bytes(bytes(data))
    with pytest.raises(ArtefactError, match="calibration_top_x.npy: checksum mismatch"):
        ConfidenceModel.load(tmp_path / "m")


def test_saved_arrays_refuse_pickled_objects(tmp_path):
    X, y = _synthetic(800)
    model = ConfidenceModel(models=("logistic",)).fit(X, y)
    model.save(tmp_path / "m")
    # a crafted array holding Python objects cannot be loaded: np.load(allow_pickle=False) refuses it
    import hashlib
    import json
    from titlematch.io.artefact import manifest_checksum
    path = tmp_path / "m" / "base_coef.npy"
    np.save(path, np.array([{"x": 1}], dtype=object), allow_pickle=True)
    manifest = json.loads((tmp_path / "m" / "manifest.json").read_text())
    manifest["files"]["base_coef.npy"]["sha256"] = hashlib.sha256(path.read_bytes()).hexdigest()
    manifest["checksum"] = manifest_checksum(manifest)  # re-signed in full: only np.load can refuse it
    (tmp_path / "m" / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(ValueError, match="pickle"):
        ConfidenceModel.load(tmp_path / "m")


def test_decision_honours_the_threshold_exactly():
    X, y = _synthetic(500)
    model = ConfidenceModel(models=("logistic",)).fit(X, y)
    model.threshold_ = 0.8
    conf = np.array([0.8, np.nextafter(0.8, 0), 0.95, np.nan, 0.0, 1.0])
    assert model.route(conf).tolist() == ["accept", "refer", "accept", "refer", "refer", "accept"]


def test_candidate_confidences_of_a_record_never_sum_above_one():
    X, y = _synthetic(600)
    model = ConfidenceModel(models=("logistic",)).fit(X, y)
    cands = X.assign(unit=np.repeat(np.arange(200), 3))
    scored = model.score_candidates(cands)
    assert (scored.groupby("unit")["confidence"].sum() <= 1 + 1e-9).all()


def test_fellegi_sunter_logit_worked_example():
    # Fellegi & Sunter (1969): agreement weight log(m/u), disagreement log((1-m)/(1-u)); worked by hand.
    # The same implementation as the linker's (titlematch.confidence.fellegi_sunter), log odds in nats.
    model = FellegiSunterModel()
    model.m_, model.u_, model.prior_ = pd.Series({"a": 0.9, "b": 0.8}), pd.Series({"a": 0.1, "b": 0.2}), 0.5
    logit = model.log_odds(pd.DataFrame({"a": [1], "b": [0]}))
    assert logit[0] == pytest.approx(np.log(9) + np.log(0.25))


@pytest.mark.parametrize("n_history", [2000, 0])  # 0: a first year of coding, nothing to hold out
def test_gold_sample_scores_are_cross_fitted(n_history):
    # Cross-fitting (Chernozhukov et al. 2018, "Double/debiased machine learning"): a gold record's
    # score comes from a model that never saw its label. Flipping the labels of one fold's records
    # leaves their own out-of-fold scores unchanged (GroupKFold's folds depend on the groups only,
    # scikit-learn's documented behaviour), and changes the scores of the other folds.
    from sklearn.model_selection import GroupKFold
    X, y = _synthetic(2000, seed=1)
    X, y = X.iloc[:n_history], y[:n_history]
    G, yg = _synthetic(900, seed=2)
    groups = np.arange(len(G)) // 3
    model = ConfidenceModel(models=("logistic",)).fit_with_gold(X, y, np.arange(len(X)), None, G, yg, groups)
    assert model.source_ == ("history and gold sample" if n_history else "gold sample")
    _, fold = next(GroupKFold(n_splits=3).split(G, yg, groups))
    flipped = yg.copy()
    flipped[fold] = 1 - flipped[fold]
    again = ConfidenceModel(models=("logistic",)).fit_with_gold(X, y, np.arange(len(X)), None, G, flipped, groups)
    np.testing.assert_allclose(again.oof_raw_[fold], model.oof_raw_[fold])
    others = np.setdiff1d(np.arange(len(G)), fold)
    assert not np.allclose(again.oof_raw_[others], model.oof_raw_[others])
    assert ((model.oof_confidence_ >= 0) & (model.oof_confidence_ <= 1)).all()
