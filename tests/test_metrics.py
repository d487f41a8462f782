"""Quality measures checked against scikit-learn, scipy, worked examples and the SOC 2018 structure."""
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from sklearn.calibration import calibration_curve
from sklearn.metrics import accuracy_score, brier_score_loss, f1_score
from sklearn.metrics import log_loss as sk_log_loss

from titlematch.measures import metrics


def _calibrated_sample(n=2000, seed=3):
    rng = np.random.default_rng(seed)
    prob = rng.uniform(size=n)
    return (rng.uniform(size=n) < prob).astype(int), prob


def test_reliability_bins_match_sklearn_calibration_curve():
    # Reference library: sklearn.calibration.calibration_curve (strategy="uniform"); same n_bins must give
    # identical per-bin mean probability and observed rate. Values on inner edges (k/15) test the bin rule.
    y, prob = _calibrated_sample()
    prob[:15] = np.arange(15) / 15
    prob[15] = 1.0
    table = metrics.reliability_table(y, prob, n_bins=15)
    prob_true, prob_pred = calibration_curve(y, prob, n_bins=15, strategy="uniform")
    filled = table[table["count"] > 0]
    np.testing.assert_allclose(filled["observed_rate"], prob_true, rtol=0, atol=1e-12)
    np.testing.assert_allclose(filled["mean_predicted"], prob_pred, rtol=0, atol=1e-12)
    assert table["count"].sum() == len(y)


def test_quantile_bins_match_sklearn_calibration_curve():
    # Reference library: calibration_curve(strategy="quantile").
    y, prob = _calibrated_sample(seed=11)
    table = metrics.reliability_table(y, prob, n_bins=8, strategy="quantile")
    prob_true, prob_pred = calibration_curve(y, prob, n_bins=8, strategy="quantile")
    filled = table[table["count"] > 0]
    np.testing.assert_allclose(filled["observed_rate"], prob_true, atol=1e-12)
    np.testing.assert_allclose(filled["mean_predicted"], prob_pred, atol=1e-12)


def test_ece_matches_ece_from_sklearn_calibration_curve():
    # Reference library: ECE rebuilt from calibration_curve's per-bin means weighted by the bin counts
    # (np.histogram counts; continuous draws never sit on an edge, so its [a, b) bins agree).
    y, prob = _calibrated_sample(n=3000, seed=5)
    prob = np.clip(prob * 0.8 + 0.15, 0, 1)  # a miscalibrated model, so the ECE is clearly above zero
    prob_true, prob_pred = calibration_curve(y, prob, n_bins=15)
    counts, _ = np.histogram(prob, bins=15, range=(0, 1))
    counts = counts[counts > 0]
    expected = float(np.sum(counts / counts.sum() * np.abs(prob_true - prob_pred)))
    assert metrics.expected_calibration_error(y, prob) == pytest.approx(expected, abs=1e-12)
    assert expected > 0.02


def test_ece_worked_example_by_hand():
    # Worked example. Two bins (0, .5], (.5, 1]: bin 1 holds p=.2 (y=0): |0 - .2| = .2, weight 1/3;
    # bin 2 holds p=.8, .9 (y=1, 1): |1 - .85| = .15, weight 2/3. ECE = .2/3 + .3/3 = 0.5/3 = 0.16667.
    assert metrics.expected_calibration_error([0, 1, 1], [0.2, 0.8, 0.9], n_bins=2) == pytest.approx(0.5 / 3)
    # Worked example with the default 15 bins: p=.05 twice (y=0, 1) in the first bin: |.5 - .05| = .45;
    # p=.95 twice (y=1, 1) in the last bin: |1 - .95| = .05; equal weights: ECE = (.45 + .05) / 2 = .25.
    assert metrics.expected_calibration_error([0, 1, 1, 1], [0.05, 0.05, 0.95, 0.95]) == pytest.approx(0.25)
    # A perfectly calibrated bin has no gap: 4 records at p=.5 with 2 right.
    assert metrics.expected_calibration_error([0, 1, 0, 1], [0.5] * 4) == pytest.approx(0.0)


def test_brier_and_log_loss_match_sklearn():
    # Reference library: sklearn.metrics.brier_score_loss and log_loss on the same arrays.
    y, prob = _calibrated_sample(seed=8)
    assert metrics.brier_score(y, prob) == pytest.approx(brier_score_loss(y, prob), abs=1e-15)
    assert metrics.log_loss(y, prob) == pytest.approx(sk_log_loss(y, prob), abs=1e-12)
    # Worked example: ((1 - .8)^2 + (0 - .3)^2) / 2 = (.04 + .09) / 2 = .065.
    assert metrics.brier_score([1, 0], [0.8, 0.3]) == pytest.approx(0.065)
    # Worked example: -(ln .8 + ln .7) / 2 = 0.289909.
    assert metrics.log_loss([True, False], [0.8, 0.3]) == pytest.approx(-(math.log(0.8) + math.log(0.7)) / 2)


def test_log_loss_with_a_single_class_present():
    # Reference library: sklearn's log_loss with labels declared accepts a sample of one class.
    assert metrics.log_loss([1, 1], [0.9, 0.6]) == pytest.approx(sk_log_loss([1, 1], [0.9, 0.6], labels=[0, 1]))


def test_probability_inputs_are_validated():
    with pytest.raises(ValueError, match="prob must lie in"):
        metrics.expected_calibration_error([0, 1], [0.5, 1.2])
    with pytest.raises(ValueError, match="0/1"):
        metrics.brier_score([0, 2], [0.5, 0.5])
    with pytest.raises(ValueError, match="missing"):
        metrics.reliability_table([0, 1], [0.5, float("nan")])
    with pytest.raises(ValueError, match="n_bins"):
        metrics.reliability_table([0, 1], [0.5, 0.5], n_bins=0)


def test_accuracy_and_macro_f1_match_sklearn():
    # Reference library: sklearn.metrics.accuracy_score and f1_score(average="macro").
    rng = np.random.default_rng(2)
    codes = np.array(["11-1011", "15-1252", "29-1141", "43-4051", "53-3032"])
    truth = rng.choice(codes, size=500)
    predicted = np.where(rng.uniform(size=500) < 0.7, truth, rng.choice(codes, size=500))
    assert metrics.accuracy(truth, predicted) == pytest.approx(accuracy_score(truth, predicted))
    assert metrics.macro_f1(truth, predicted) == pytest.approx(f1_score(truth, predicted, average="macro"))


def test_macro_f1_documented_example():
    # scikit-learn's f1_score documentation example: y_true [0,1,2,0,1,2], y_pred [0,2,1,0,0,1],
    # average="macro" -> 0.26666... (here as code strings).
    truth = ["a", "b", "c", "a", "b", "c"]
    predicted = ["a", "c", "b", "a", "a", "b"]
    assert metrics.macro_f1(truth, predicted) == pytest.approx(0.26666666, abs=1e-6)


def test_missing_codes_compare_as_empty_labels():
    assert metrics.accuracy(["11-1011", "15-1252"], [None, " 15-1252 "]) == 0.5
    assert metrics.accuracy(pd.Series(["x", ""]), pd.Series([float("nan"), ""])) == 0.5


def test_major_group_is_first_two_digits():
    # SOC 2018 (BLS, SOC User Guide): the first two digits of a code are its major group.
    assert metrics.major_group("15-1252") == "15"
    assert metrics.major_group("15-1252.00") == "15"
    assert metrics.major_group("") == ""
    assert metrics.major_group("x") == ""
    assert metrics.major_group(["29-1141", None]).tolist() == ["29", ""]


def test_code_levels_follow_the_soc_2018_hierarchy():
    # SOC 2018 structure (BLS SOC User Guide, from memory): 15-1252 Software Developers is in broad
    # occupation 15-1250, minor group 15-1200, major group 15-0000. The O*NET title comes from the shipped
    # O*NET-SOC 2019 table (O*NET Database, CC BY 4.0).
    from titlematch.io.lexicon import load_lexicon

    onet = load_lexicon("onet_soc_2019_titles").set_index("onet_soc_code")["title"]
    assert onet["15-1252.00"] == "Software Developers"
    codes = ["15-1252.00", "15-1252"]
    assert metrics.code_at_level(codes, "detailed").tolist() == ["15-1252", "15-1252"]
    assert metrics.code_at_level(codes, "broad").tolist() == ["15-1250", "15-1250"]
    assert metrics.code_at_level(codes, "minor").tolist() == ["15-1200", "15-1200"]
    assert metrics.code_at_level(codes, "major").tolist() == ["15-0000", "15-0000"]
    assert metrics.code_at_level(["not a code"], "major").tolist() == ["not a code"]
    with pytest.raises(ValueError, match="level"):
        metrics.code_at_level(codes, "sector")


def test_per_major_group_by_hand():
    truth = ["15-1252", "15-1251", "29-1141", "29-1141", "29-1141"]
    machine = ["15-1252", "15-1252", "29-1141", "29-1141", "31-1131"]
    manual = ["15-1252", "15-1251", "29-1141", "31-1131", "31-1131"]
    table = metrics.per_major_group(truth, machine, manual).set_index("major_group")
    assert table.loc["29", "records"] == 3 and table.loc["15", "records"] == 2
    assert table.loc["29", "accuracy"] == pytest.approx(2 / 3)
    assert table.loc["15", "accuracy"] == pytest.approx(1 / 2)
    assert table.loc["15", "manual_accuracy"] == pytest.approx(1.0)
    assert table.loc["29", "share"] == pytest.approx(0.6)
    assert list(table.index) == ["29", "15"]  # largest group first


def test_confusions_by_hand():
    truth = ["a", "a", "a", "b", "b", "c"]
    predicted = ["b", "b", "a", "c", "b", "a"]
    table = metrics.confusions(truth, predicted, top=2)
    assert table[["truth", "predicted", "count"]].values.tolist() == [["a", "b", 2], ["b", "c", 1]]
    assert table["share_of_truth"].tolist() == pytest.approx([2 / 3, 1 / 2])


def test_bootstrap_vectorized_equals_loop():
    # The vectorized path must give exactly what the per-resample loop gives (same index stream).
    rng = np.random.default_rng(4)
    a, b = rng.uniform(size=300), rng.uniform(size=300)
    vec = metrics.bootstrap_ci(lambda x, y: x.mean(axis=-1) - y.mean(axis=-1), a, b, n_boot=400, vectorized=True)
    loop = metrics.bootstrap_ci(lambda x, y: x.mean() - y.mean(), a, b, n_boot=400)
    assert vec == pytest.approx(loop, abs=1e-12)
    assert vec.estimate == pytest.approx(a.mean() - b.mean())


def test_bootstrap_percentile_interval_agrees_with_scipy_and_normal_theory():
    # Reference library: scipy.stats.bootstrap(method="percentile"); different random streams, so the
    # endpoints agree to Monte Carlo error. Normal theory: mean +/- 1.96 s / sqrt(n).
    rng = np.random.default_rng(9)
    x = rng.normal(10, 2, size=400)
    ours = metrics.bootstrap_ci(lambda a: a.mean(axis=-1), x, n_boot=4000, vectorized=True)
    ref = stats.bootstrap((x,), np.mean, n_resamples=4000, method="percentile", confidence_level=0.95,
                          random_state=np.random.default_rng(1)).confidence_interval
    assert ours.lower == pytest.approx(ref.low, abs=0.03)
    assert ours.upper == pytest.approx(ref.high, abs=0.03)
    half = 1.96 * x.std(ddof=1) / math.sqrt(len(x))
    assert ours.lower == pytest.approx(x.mean() - half, abs=0.04)
    assert ours.upper == pytest.approx(x.mean() + half, abs=0.04)


def test_bootstrap_chunks_do_not_change_the_stream():
    first = np.vstack(list(metrics.bootstrap_indices(50, 30, seed=2, chunk=50 * 7)))
    whole = np.vstack(list(metrics.bootstrap_indices(50, 30, seed=2, chunk=10**9)))
    np.testing.assert_array_equal(first, whole)


def test_bootstrap_validates_input():
    with pytest.raises(ValueError, match="equal lengths"):
        metrics.bootstrap_ci(np.mean, [1, 2], [1, 2, 3])
    with pytest.raises(ValueError, match="alpha"):
        metrics.bootstrap_ci(np.mean, [1, 2], alpha=1.5)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.booleans(), st.floats(0, 1, allow_nan=False)), min_size=1, max_size=60),
       st.integers(1, 20))
def test_reliability_table_properties(pairs, n_bins):
    y = [p[0] for p in pairs]
    prob = [p[1] for p in pairs]
    table = metrics.reliability_table(y, prob, n_bins=n_bins)
    assert table["count"].sum() == len(pairs)
    filled = table[table["count"] > 0]
    # Each bin's mean probability lies inside the bin; the ECE is a weighted mean of gaps in [0, 1].
    assert (filled["mean_predicted"] >= filled["lower"] - 1e-12).all()
    assert (filled["mean_predicted"] <= filled["upper"] + 1e-12).all()
    assert 0 <= metrics.expected_calibration_error(y, prob, n_bins=n_bins) <= 1
    # Reference library: the non-empty bins' means equal calibration_curve's (uniform bins).
    prob_true, prob_pred = calibration_curve(np.array(y, dtype=int), np.array(prob), n_bins=n_bins)
    np.testing.assert_allclose(filled["observed_rate"], prob_true, atol=1e-9)
    np.testing.assert_allclose(filled["mean_predicted"], prob_pred, atol=1e-9)
