"""Threshold routing on gold samples: exact decisions, closed-form checks and both policies."""
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import accuracy_score, f1_score

from titlematch.confidence import routing
from titlematch.measures import metrics
from titlematch.confidence.routing import ACCEPT_NOTHING, automation_curve, choose_threshold, route


def test_route_honours_the_threshold_exactly():
    conf = [0.7999999999, 0.8, 0.8000000001, float("nan"), 1.0, 0.0]
    assert route(conf, 0.8).tolist() == ["refer", "accept", "accept", "refer", "accept", "refer"]
    # Floating point is taken as it is: 0.1 + 0.2 is 0.30000000000000004 in IEEE 754 doubles.
    assert route([0.1 + 0.2], 0.3).tolist() == ["accept"]
    assert route([0.3], 0.1 + 0.2).tolist() == ["refer"]
    assert route([1.0, 0.999], ACCEPT_NOTHING).tolist() == ["refer", "refer"]
    assert route([0.0, 0.5], 0.0).tolist() == ["accept", "accept"]


def test_route_validates_input():
    with pytest.raises(ValueError, match="threshold"):
        route([0.5], float("nan"))
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        route([1.5], 0.5)
    with pytest.raises(ValueError, match="numbers"):
        route(["high"], 0.5)


def test_automation_curve_by_hand():
    # Worked example: four records, confidences .9 (right), .7 (wrong), .7 (right), .2 (right); coders
    # alone right on records 2 and 4 only.
    conf = [0.9, 0.7, 0.7, 0.2]
    expert = ["a", "b", "c", "d"]
    machine = ["a", "x", "c", "d"]
    manual = ["x", "b", "x", "d"]
    curve = automation_curve(conf, machine, expert, manual).set_index("threshold")
    # t = .2: all accepted, machine right on 3 of 4.
    assert curve.loc[0.2, "n_accepted"] == 4 and curve.loc[0.2, "accepted_accuracy"] == pytest.approx(0.75)
    assert curve.loc[0.2, "mix_accuracy"] == pytest.approx(0.75)
    # t = .7: records 1-3 accepted (2 of 3 right); record 4 referred, coders right: mix = 3/4.
    assert curve.loc[0.7, "n_accepted"] == 3 and curve.loc[0.7, "accepted_accuracy"] == pytest.approx(2 / 3)
    assert curve.loc[0.7, "mix_accuracy"] == pytest.approx(0.75)
    # t = .9: record 1 accepted (right); records 2-4 referred, coders right on 2 and 4: mix = 3/4.
    assert curve.loc[0.9, "share_automated"] == pytest.approx(0.25)
    assert curve.loc[0.9, "mix_accuracy"] == pytest.approx(0.75)
    # Nothing accepted: coders alone, 2 of 4.
    assert curve.loc[ACCEPT_NOTHING, "n_accepted"] == 0
    assert curve.loc[ACCEPT_NOTHING, "mix_accuracy"] == pytest.approx(0.5)
    assert np.isnan(curve.loc[ACCEPT_NOTHING, "accepted_accuracy"])


def test_automation_curve_matches_sklearn_at_every_threshold():
    # Reference library: accuracy_score and f1_score(average="macro") of the mixed codes, recomputed
    # from scratch at each threshold with route().
    rng = np.random.default_rng(6)
    n = 300
    codes = np.array(["11-1011", "13-2011", "15-1252", "29-1141", "41-2031"])
    expert = rng.choice(codes, size=n)
    conf = rng.choice(np.linspace(0, 1, 41), size=n)  # ties on purpose
    machine = np.where(rng.uniform(size=n) < conf, expert, rng.choice(codes, size=n))
    manual = np.where(rng.uniform(size=n) < 0.85, expert, rng.choice(codes, size=n))
    curve = automation_curve(conf, machine, expert, manual, grid_size=10)
    assert len(curve) == len(np.unique(conf)) + 1
    for row in curve.itertuples():
        accepted = route(conf, row.threshold) == "accept"
        assert row.n_accepted == accepted.sum()
        mix = np.where(accepted, machine, manual)
        assert row.mix_accuracy == pytest.approx(accuracy_score(expert, mix))
        if accepted.any():
            assert row.accepted_accuracy == pytest.approx(accuracy_score(expert[accepted], machine[accepted]))
        if not np.isnan(row.mix_macro_f1):
            assert row.mix_macro_f1 == pytest.approx(f1_score(expert, mix, average="macro"))
    assert curve["mix_macro_f1"].notna().sum() == 10


def test_missing_confidences_are_never_accepted():
    curve = automation_curve([0.9, float("nan"), 0.1], ["a", "b", "c"], ["a", "b", "c"])
    assert curve["n_accepted"].max() == 2
    assert curve["share_automated"].max() == pytest.approx(2 / 3)


def test_closed_form_for_uniform_calibrated_confidences():
    # Worked example: with p ~ U(0, 1) and right ~ Bernoulli(p), the records with p >= t are right at rate
    # E[p | p >= t] = (1 + t) / 2, so accepted accuracy reaches 0.9 at t = 0.8 and automates 1 - t = 20%.
    rng = np.random.default_rng(2024)
    n = 20000
    prob = rng.uniform(size=n)
    expert = np.full(n, "29-1141", dtype=object)
    machine = np.where(rng.uniform(size=n) < prob, "29-1141", "31-1131")
    curve = automation_curve(prob, machine, expert).iloc[:-1]
    for t in (0.0, 0.3, 0.6, 0.8):
        row = curve.iloc[np.searchsorted(curve["threshold"].to_numpy(), t)]
        se = np.sqrt(0.25 / row["n_accepted"])
        assert row["accepted_accuracy"] == pytest.approx((1 + row["threshold"]) / 2, abs=4 * se)
    choice = choose_threshold(prob, machine, expert, min_accuracy=0.9, n_boot=300)
    # The bootstrap lower bound makes the choice slightly more cautious than the point crossing (t = 0.8).
    assert choice.policy == "min_accuracy" and choice.qualified
    assert 0.79 <= choice.threshold <= 0.85
    assert choice.expected_share_automated == pytest.approx(1 - choice.threshold, abs=0.02)
    assert choice.lower_bound >= 0.9
    assert choice.expected_accuracy >= choice.lower_bound
    crossing = curve.loc[curve["accepted_accuracy"] >= 0.9, "threshold"].min()
    assert crossing <= choice.threshold
    assert route(prob, choice.threshold).tolist().count("accept") == round(choice.expected_share_automated * n)


def test_default_target_without_manual_codes_is_97_percent():
    rng = np.random.default_rng(5)
    prob = rng.uniform(size=5000)
    machine = np.where(rng.uniform(size=5000) < prob, "a", "b")
    choice = choose_threshold(prob, machine, ["a"] * 5000, n_boot=200)
    assert choice.target == 0.97 and choice.policy == "min_accuracy"
    # (1 + t) / 2 = .97 at t = .94; the bound pushes it a little higher.
    assert 0.92 <= choice.threshold <= 0.99


def test_policy_no_worse_than_manual_coding():
    # Machine right exactly when confidence >= .5; coders right 90% of the time. Accepting down to t adds,
    # below .5, records the machine gets wrong; mix - manual = .1 * .5 - .9 * (.5 - t) >= 0 for t >= .4444,
    # so the choice lies between .444 and .5 (the bootstrap bound keeps it above the break-even point).
    rng = np.random.default_rng(7)
    n = 6000
    conf = rng.uniform(size=n)
    expert = rng.choice(["11-1011", "15-1252", "29-1141"], size=n)
    machine = np.where(conf >= 0.5, expert, "99-9999")
    manual = np.where(rng.uniform(size=n) < 0.9, expert, "99-9999")
    choice = choose_threshold(conf, machine, expert, manual, n_boot=300)
    assert choice.policy == "no_worse_than_manual" and choice.qualified
    assert 0.444 < choice.threshold <= 0.5
    assert choice.mix_accuracy >= choice.manual_accuracy
    assert choice.manual_accuracy == pytest.approx(accuracy_score(expert, manual))
    assert choice.lower_bound >= 0
    # With a tolerance of 2 points the machine may take more: .1 * .5 - .9 * (.5 - t) >= -.02 at t >= .422.
    looser = choose_threshold(conf, machine, expert, manual, margin=0.02, n_boot=300)
    assert looser.threshold < choice.threshold and looser.threshold > 0.40
    # An accuracy target overrides the manual comparison when given: accepted accuracy is
    # .5 / (.5 + (.5 - t)) >= .99 for t >= .4949, so only a sliver below .5 may be accepted.
    strict = choose_threshold(conf, machine, expert, manual, min_accuracy=0.99, n_boot=300)
    assert strict.policy == "min_accuracy" and 0.4949 <= strict.threshold <= 0.5


def test_no_threshold_qualifies_means_accept_nothing():
    conf = np.linspace(0, 1, 200)
    choice = choose_threshold(conf, ["b"] * 200, ["a"] * 200, min_accuracy=0.5, n_boot=100)
    assert not choice.qualified
    assert choice.threshold == ACCEPT_NOTHING and choice.threshold > 1.0
    assert choice.expected_share_automated == 0
    assert (route(conf, choice.threshold) == "refer").all()
    assert "nothing is accepted" in choice.describe()


def test_a_handful_of_right_records_is_not_enough():
    # Five records, all right at confidence .99: the bootstrap alone would call that 100%; min_accepted
    # keeps the policy from trusting so few.
    conf = np.r_[np.full(5, 0.99), np.linspace(0, 0.5, 95)]
    expert = ["a"] * 100
    machine = ["a"] * 5 + ["b"] * 95
    assert not choose_threshold(conf, machine, expert, min_accuracy=0.9, n_boot=100).qualified
    assert choose_threshold(conf, machine, expert, min_accuracy=0.9, n_boot=100, min_accepted=5).qualified


def test_vectorized_bootstrap_bounds_equal_a_plain_loop():
    # The 2-D bincount path must equal a per-resample computation with the same indices.
    rng = np.random.default_rng(1)
    n = 400
    conf = rng.choice(np.linspace(0.05, 1, 20), size=n)
    right = (rng.uniform(size=n) < conf).astype(float)
    grid = np.unique(conf)[::-1]
    bins = len(grid) - np.searchsorted(grid[::-1], conf, side="right")
    fast = routing._bootstrap_bounds(bins, len(grid), right, True, 150, 3, 0.05, n, quiet=True)
    stats = []
    for idx in np.vstack(list(metrics.bootstrap_indices(n, 150, 3))):
        c, r = conf[idx], right[idx]
        stats.append([r[c >= t].mean() if (c >= t).any() else 0.0 for t in grid])
    np.testing.assert_allclose(fast, np.quantile(np.array(stats), 0.05, axis=0), atol=1e-12)


def test_gold_inputs_are_validated():
    with pytest.raises(ValueError, match="differ in length"):
        automation_curve([0.5, 0.6], ["a"], ["a", "b"])
    with pytest.raises(ValueError, match="expert_code is missing"):
        automation_curve([0.5, 0.6], ["a", "b"], ["a", ""])
    with pytest.raises(ValueError, match="min_accuracy"):
        choose_threshold([0.5], ["a"], ["a"], min_accuracy=1.5)
    with pytest.raises(ValueError, match="margin"):
        choose_threshold([0.5], ["a"], ["a"], ["a"], margin=-0.1)


def test_describe_speaks_plainly():
    conf = np.linspace(0.5, 1, 400)
    choice = choose_threshold(conf, ["a"] * 400, ["a"] * 400, min_accuracy=0.9, n_boot=100)
    assert choice.threshold == pytest.approx(0.5)  # all right: accept everything
    text = choice.describe()
    assert "accepts 100.0% of records" in text and "target 90.0%" in text


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.one_of(st.floats(0, 1), st.just(float("nan"))), st.booleans()), min_size=1,
                max_size=40))
def test_curve_share_falls_as_the_threshold_rises(records):
    conf = [r[0] for r in records]
    machine = ["a" if r[1] else "b" for r in records]
    curve = automation_curve(conf, machine, ["a"] * len(records))
    assert curve["threshold"].is_monotonic_increasing
    assert curve["n_accepted"].is_monotonic_decreasing
    assert curve["n_accepted"].iloc[-1] == 0
    assert curve["n_accepted"].iloc[0] == sum(c == c for c in conf)  # every non-missing confidence
    assert pd.Series(curve["accepted_accuracy"].dropna()).between(0, 1).all()
