"""Drift measures checked by hand and against scipy; the drift report and command."""
import argparse
import base64
import math
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import jensenshannon
from scipy.stats import ks_2samp

from titlematch.reporting import drift
from titlematch.cli import drift as drift_cli
from titlematch.reporting.drift import (DriftLimits, category_shares, confidence_psi, jensen_shannon_distance, ks_statistic,
                              measure_drift, new_frequent_titles, population_stability_index, unseen_title_share,
                              unseen_token_share)
from titlematch.io import InputError

# PNG file signature, from the PNG specification (W3C / ISO/IEC 15948), section 5.2.
PNG_SIGNATURE = bytes([137, 80, 78, 71, 13, 10, 26, 10])


def test_psi_worked_example():
    # Worked example by hand. Old shares (.5, .3, .2), new shares (.4, .3, .3):
    #   (.4 - .5) * ln(.4 / .5) = (-.1) * (-.2231436) = .0223144
    #   (.3 - .3) * ln(.3 / .3) = 0
    #   (.3 - .2) * ln(.3 / .2) = (.1) * (.4054651) = .0405465
    #   PSI = .0223144 + .0405465 = .0628609
    assert population_stability_index([50, 30, 20], [40, 30, 30]) == pytest.approx(0.0628609, abs=1e-7)
    # The same from shares instead of counts.
    assert population_stability_index([0.5, 0.3, 0.2], [0.4, 0.3, 0.3]) == pytest.approx(0.0628609, abs=1e-7)
    # PSI is symmetric in old and new, and 0 for equal distributions.
    assert population_stability_index([40, 30, 30], [50, 30, 20]) == pytest.approx(0.0628609, abs=1e-7)
    assert population_stability_index([1, 2, 3], [2, 4, 6]) == 0.0


def test_psi_empty_bin_uses_epsilon():
    # Worked example by hand with an empty bin. Old (1, 0), new (.5, .5); the empty old share becomes 1e-4:
    #   (.5 - 1) * ln(.5 / 1)          = (-.5) * (-.6931472)  = .3465736
    #   (.5 - 1e-4) * ln(.5 / 1e-4)    = (.4999) * (8.5171932) = 4.2577449
    #   PSI = 4.6043185
    expected = (0.5 - 1) * math.log(0.5 / 1) + (0.5 - 1e-4) * math.log(0.5 / 1e-4)
    assert expected == pytest.approx(4.6043185, abs=1e-6)
    assert population_stability_index([1, 0], [0.5, 0.5]) == pytest.approx(expected)
    assert math.isfinite(population_stability_index([0, 10], [10, 0]))


def test_psi_validates_input():
    with pytest.raises(ValueError, match="bins"):
        population_stability_index([1, 2], [1, 2, 3])
    with pytest.raises(ValueError, match="non-negative"):
        population_stability_index([1, -2], [1, 2])
    with pytest.raises(ValueError, match="positive total"):
        population_stability_index([0, 0], [1, 2])


def test_js_distance_against_scipy_and_by_hand():
    # Reference library: scipy.spatial.distance.jensenshannon with base 2.
    rng = np.random.default_rng(0)
    for _ in range(5):
        p, q = rng.integers(0, 50, size=8), rng.integers(1, 50, size=8)
        assert jensen_shannon_distance(p, q) == pytest.approx(jensenshannon(p / p.sum(), q / q.sum(), base=2))
    # Hand cases: identical -> 0; disjoint -> 1 (base 2).
    assert jensen_shannon_distance([3, 1, 0], [3, 1, 0]) == pytest.approx(0.0, abs=1e-7)
    assert jensen_shannon_distance([1, 0], [0, 1]) == pytest.approx(1.0)
    # By hand: P = (1, 0), Q = (.5, .5), M = (.75, .25).
    #   KL(P||M) = log2(1 / .75) = .4150375
    #   KL(Q||M) = .5 log2(.5/.75) + .5 log2(.5/.25) = .5 (-.5849625) + .5 (1) = .2075187
    #   JSD = (.4150375 + .2075187) / 2 = .3112781; distance = sqrt(.3112781) = .5579230
    assert jensen_shannon_distance([1, 0], [1, 1]) == pytest.approx(0.5579230, abs=1e-6)


def test_confidence_psi_on_deciles_by_hand():
    old = np.arange(100) / 100  # deciles of the old values put ten records in each of ten bins
    assert confidence_psi(old, old) == 0.0
    # Every new value above the old 90th percentile: new shares (0, ..., 0, 1) against ten shares of .1.
    #   nine bins: (1e-4 - .1) * ln(1e-4 / .1) = (-.0999) * (-6.9077553) = .6900848 each -> 6.2107629
    #   last bin:  (1 - .1) * ln(1 / .1)       = .9 * 2.3025851           = 2.0723266
    #   PSI = 8.2830895
    new = np.full(50, 0.995)
    assert confidence_psi(old, new) == pytest.approx(8.2830895, abs=1e-6)


def test_ks_statistic_against_scipy_and_by_hand():
    # Reference library: scipy.stats.ks_2samp. Hand cases: disjoint samples -> 1; identical -> 0.
    rng = np.random.default_rng(1)
    a, b = rng.beta(5, 2, size=300), rng.beta(4, 2, size=200)
    assert ks_statistic(a, b)[0] == pytest.approx(ks_2samp(a, b).statistic)
    assert ks_statistic([0.1, 0.2, 0.3], [0.7, 0.8, 0.9])[0] == 1.0
    assert ks_statistic(a, a)[0] == 0.0


def test_unseen_shares_by_hand():
    # Tokens: nurse, aide, drone, pilot, nurse -> 2 of 5 unseen.
    assert unseen_token_share(["nurse aide", "drone pilot", "nurse"], {"nurse", "aide"}) == pytest.approx(0.4)
    # Titles: empty titles are left out; 1 of 3 non-empty titles unseen.
    assert unseen_title_share(["nurse", "", "welder", "drone pilot"], {"nurse", "welder"}) == pytest.approx(1 / 3)
    with pytest.raises(ValueError, match="empty"):
        unseen_title_share(["", " "], {"nurse"})


def test_new_frequent_titles():
    new = pd.DataFrame({"key": ["drone pilot"] * 3 + ["nurse"] * 5 + ["data wrangler"] * 2 + [""],
                        "title": ["Drone Pilot", "drone pilot", "Drone Pilot"] + ["Nurse"] * 5
                        + ["Data Wrangler"] * 2 + [""],
                        "code": ["53-2012", "53-2012", "17-3024"] + ["29-1141"] * 5 + ["15-2051"] * 2 + [""],
                        "confidence": [0.4, 0.5, 0.6] + [0.9] * 5 + [0.3, 0.5] + [np.nan]})
    table = new_frequent_titles(new, {"nurse"}, top=5)
    assert table["key"].tolist() == ["drone pilot", "data wrangler"]
    assert table["records"].tolist() == [3, 2]
    assert table["share"].tolist() == pytest.approx([0.3, 0.2])  # of the 10 non-empty titles
    assert table["example"].tolist() == ["Drone Pilot", "Data Wrangler"]
    assert table["code"].tolist() == ["53-2012", "15-2051"]
    assert table["mean_confidence"].tolist() == pytest.approx([0.5, 0.4])


def test_category_shares_align_on_the_union():
    table = category_shares(["a", "a", "b"], ["b", "c"]).set_index("category")
    assert table.loc["c", "old_count"] == 0 and table.loc["a", "new_count"] == 0
    assert table["old_share"].sum() == pytest.approx(1) and table["new_share"].sum() == pytest.approx(1)


def periods(seed=0, n=600):
    """Invented intake of the fictional regional office: last year's titles, then a year with new ones."""
    rng = np.random.default_rng(seed)

    def period(words, probs, a, b):
        keys = [" ".join(rng.choice(words, size=2)) for _ in range(n)]
        conf = rng.beta(a, b, size=n).round(4)
        return pd.DataFrame({"title": [k.title() for k in keys], "title_normalized": keys,
                             "code": rng.choice(["29-1141", "51-4121", "53-3032", "15-1252"], size=n, p=probs),
                             "confidence": conf, "decision": np.where(conf >= 0.8, "accept", "refer")})

    old = period(["nurse", "welder", "driver", "clerk"], [0.4, 0.3, 0.2, 0.1], 5, 2)
    same = period(["nurse", "welder", "driver", "clerk"], [0.4, 0.3, 0.2, 0.1], 5, 2)
    moved = period(["nurse", "welder", "drone", "pilot"], [0.1, 0.3, 0.2, 0.4], 3, 3)
    return old, same, moved


def test_stable_period_raises_no_flag():
    old, same, _ = periods()
    result = measure_drift(drift.prepare(old, "old"), drift.prepare(same, "new"))
    assert result.flagged.empty, result.measures
    values = result.measures.set_index("measure")["value"]
    assert values["unseen title share"] == 0.0
    assert values["code mix PSI (major groups)"] < 0.05


def test_shifted_period_is_flagged():
    old, _, moved = periods()
    result = measure_drift(drift.prepare(old, "old"), drift.prepare(moved, "new"), threshold=0.8)
    flagged = set(result.flagged["measure"])
    assert {"unseen token share", "unseen title share", "code mix PSI (major groups)",
            "confidence PSI (old deciles)", "confidence KS statistic", "expected automation share"} <= flagged
    table = result.measures.set_index("measure")
    # Old major-group shares (29 .4, 51 .3, 53 .2, 15 .1) against the new draw, recomputed with scipy.
    shares = category_shares(old["code"].str[:2], moved["code"].str[:2])
    assert table.loc["code mix JS distance (major groups)", "value"] == pytest.approx(
        jensenshannon(shares["old_share"], shares["new_share"], base=2))
    assert table.loc["expected automation share", "new"] == pytest.approx((moved["confidence"] >= 0.8).mean())
    assert result.new_titles["key"].str.contains("drone|pilot").all()


def test_limits_are_configurable():
    old, _, moved = periods()
    lenient = DriftLimits(psi=100, unseen_titles=1, unseen_tokens=1, js_distance=1, ks=1, automation_drop=1)
    result = measure_drift(drift.prepare(old, "old"), drift.prepare(moved, "new"), limits=lenient)
    assert result.flagged.empty
    with pytest.raises(ValueError, match="psi"):
        DriftLimits(psi=-1)


def test_dictionary_vocabulary_replaces_the_old_file():
    old = pd.DataFrame({"key": ["nurse", "welder"]})
    new = pd.DataFrame({"key": ["nurse", "drone pilot", "welder", "nurse"]})
    result = measure_drift(old, new, vocabulary={"nurse", "welder", "drone"}, known_keys={"nurse", "welder"})
    table = result.measures.set_index("measure")
    assert table.loc["unseen token share", "new"] == pytest.approx(1 / 5)  # pilot of 5 tokens
    assert table.loc["unseen title share", "new"] == pytest.approx(1 / 4)
    assert table.loc["unseen title share", "old"] == 0.0
    assert any("raw titles" in note for note in result.notes)  # no codes: code mix not compared


def test_bad_confidence_is_reported_and_kept():
    old, same, _ = periods(n=50)
    same["confidence"] = same["confidence"].astype(str)
    same.loc[4, "confidence"] = "very sure"
    rejects = drift.Rejects()
    prepared = drift.prepare(same, "new.csv", rejects)
    assert len(prepared) == 50 and np.isnan(prepared.loc[4, "confidence"])
    assert rejects.frame()[["file", "row", "column"]].values.tolist() == [["new.csv", 6, "confidence"]]


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.images, self.links = [], [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append(tag)
        if tag == "img":
            self.images.append(attrs["src"])
        elif "href" in attrs or "src" in attrs:
            self.links.append(attrs)


def run_cli(argv):
    """Run the sub-command the way titlematch.cli.main does (parser from the module, --quiet added)."""
    parser = argparse.ArgumentParser(prog="titlematch")
    sub = drift_cli.add_parser(parser.add_subparsers(dest="command"))
    sub.add_argument("--quiet", action="store_true")
    sub.add_argument("--verbose", action="store_true")
    return drift_cli.run(parser.parse_args(["drift", *argv]))


def test_cli_writes_a_self_contained_report(tmp_path, capsys):
    old, _, moved = periods(n=300)
    old.to_csv(tmp_path / "old.csv", index=False)
    moved.to_csv(tmp_path / "new.csv", index=False)
    out = tmp_path / "drift"
    args = [str(tmp_path / "old.csv"), str(tmp_path / "new.csv"), "--out", str(out), "--psi-limit", "0.25"]
    assert run_cli(args) == 0
    assert run_cli(args + ["--fail-on-flag", "--quiet"]) == 1
    printed = capsys.readouterr()
    assert "titlematch drift: rows in 600, old 300, new 300, flagged" in printed.out
    measures = pd.read_csv(out / "drift.csv")
    assert set(drift.MEASURE_COLUMNS) == set(measures.columns)
    assert measures.loc[measures["measure"] == "code mix PSI (major groups)", "limit"].item() == 0.25
    assert len(pd.read_csv(out / "new_titles.csv")) > 0
    page = _Collector()
    page.feed((out / "drift.html").read_text(encoding="utf-8"))
    assert "script" not in page.tags and not page.links and len(page.images) == 2
    for src in page.images:
        assert base64.b64decode(src.split(",", 1)[1]).startswith(PNG_SIGNATURE)


def test_cli_validates_options(tmp_path):
    old, same, _ = periods(n=20)
    old.to_csv(tmp_path / "old.csv", index=False)
    same.to_csv(tmp_path / "new.csv", index=False)
    base = [str(tmp_path / "old.csv"), str(tmp_path / "new.csv"), "--out", str(tmp_path / "d")]
    with pytest.raises(SystemExit):  # refused by the parser: a number from 0 to 1
        run_cli(base + ["--threshold", "80"])
    with pytest.raises(InputError, match="limit psi"):
        run_cli(base + ["--psi-limit", "-0.1"])
    pd.DataFrame({"text": ["x"]}).to_csv(tmp_path / "odd.csv", index=False)
    with pytest.raises(InputError, match="title"):
        run_cli([str(tmp_path / "odd.csv"), str(tmp_path / "new.csv"), "--out", str(tmp_path / "d")])


def test_cli_with_a_title_dictionary_and_raw_titles(tmp_path):
    # The title dictionary (lead's TitleDictionary) supplies the vocabulary; the new file holds raw titles,
    # normalized by the same normalizer, so the text measures need no codes.
    from titlematch.coding.dictionary import TitleDictionary

    past = pd.DataFrame({"title": ["Registered Nurse"] * 6 + ["Welder"] * 4,
                         "code": ["29-1141"] * 6 + ["51-4121"] * 4})
    TitleDictionary().fit(past).save(tmp_path / "dict")
    pd.DataFrame({"title": ["Registered Nurse", "Welder"]}).to_csv(tmp_path / "old.csv", index=False)
    pd.DataFrame({"title": ["Registered Nurse", "Drone Pilot", "Drone Pilot", "Welder"]}).to_csv(
        tmp_path / "new.csv", index=False)
    out = tmp_path / "d"
    assert run_cli([str(tmp_path / "old.csv"), str(tmp_path / "new.csv"), "--dictionary", str(tmp_path / "dict"),
                    "--out", str(out), "--quiet"]) == 0
    table = pd.read_csv(out / "drift.csv").set_index("measure")
    assert table.loc["unseen title share", "new"] == pytest.approx(0.5)
    assert table.loc["unseen title share", "old"] == 0.0
    assert "code mix PSI (major groups)" not in table.index
    titles = pd.read_csv(out / "new_titles.csv")
    assert titles["example"].tolist() == ["Drone Pilot"] and titles["records"].tolist() == [2]
