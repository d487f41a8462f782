"""Evaluation against a gold sample: joins, metrics against scikit-learn, the self-contained report, the CLI."""
import argparse
import base64
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import accuracy_score, f1_score

from titlematch.cli import evaluate as evaluate_cli
from titlematch.reporting.evaluate import evaluate, join_gold, write_report
from titlematch.io import InputError, Rejects

# PNG file signature, from the PNG specification (W3C / ISO/IEC 15948), section 5.2.
PNG_SIGNATURE = bytes([137, 80, 78, 71, 13, 10, 26, 10])
CODES = ["11-1011", "13-2011", "15-1252", "29-1141", "41-2031", "43-4051", "47-2111", "53-3032"]


def gold_sample(n=400, seed=0):
    """Invented gold sample of the fictional regional office: coded output plus expert and manual codes."""
    rng = np.random.default_rng(seed)
    expert = rng.choice(CODES, size=n)
    conf = rng.uniform(size=n).round(4)
    machine = np.where(rng.uniform(size=n) < conf, expert, rng.choice(CODES, size=n))
    manual = np.where(rng.uniform(size=n) < 0.88, expert, rng.choice(CODES, size=n))
    ids = [f"R{i:05d}" for i in range(n)]
    coded = pd.DataFrame({"record_id": ids, "title": [f"title {i}" for i in range(n)], "code": machine,
                          "code_title": "", "confidence": conf.astype(str),
                          "decision": np.where(conf >= 0.8, "accept", "refer")})
    gold = pd.DataFrame({"record_id": ids, "title": coded["title"], "code": expert, "manual_code": manual})
    return coded, gold


def summary_value(ev, measure):
    return float(ev.summary.set_index("measure").loc[measure, "value"])


def test_metrics_match_sklearn():
    # Reference library: sklearn.metrics.accuracy_score and f1_score(average="macro").
    coded, gold = gold_sample()
    ev = evaluate(coded, gold, n_boot=200)
    assert summary_value(ev, "machine accuracy") == pytest.approx(accuracy_score(gold["code"], coded["code"]))
    assert summary_value(ev, "machine macro-F1") == pytest.approx(
        f1_score(gold["code"], coded["code"], average="macro"))
    assert summary_value(ev, "coders alone accuracy") == pytest.approx(
        accuracy_score(gold["code"], gold["manual_code"]))
    assert summary_value(ev, "coders alone macro-F1") == pytest.approx(
        f1_score(gold["code"], gold["manual_code"], average="macro"))
    row = ev.summary.set_index("measure").loc["machine minus coders accuracy"]
    assert row["ci_lower"] <= row["value"] <= row["ci_upper"]
    # The decision column as routed: accuracy of the records the run accepted.
    accepted = coded["decision"] == "accept"
    assert summary_value(ev, "accuracy of records accepted in the coded file") == pytest.approx(
        accuracy_score(gold["code"][accepted], coded["code"][accepted]))
    assert ev.join_method == "record_id"


def test_join_by_record_id_ignores_order_and_sets_aside_unmatched():
    coded, gold = gold_sample(n=50)
    shuffled = coded.sample(frac=1, random_state=1).reset_index(drop=True)
    gold.loc[3, "record_id"] = "NOT-THERE"
    rejects = Rejects()
    joined, method = join_gold(shuffled, gold, rejects=rejects)
    assert method == "record_id" and len(joined) == 49
    assert (joined.set_index("record_id").loc["R00010", "machine_code"] == coded.loc[10, "code"])
    assert rejects.frame()["reason"].tolist() == ["record_id not found in the coded file"]
    assert rejects.frame()["row"].tolist() == [5]  # gold row 3 is CSV line 5 below the header


def test_join_by_row_order_checks_titles():
    coded, gold = gold_sample(n=20)
    coded, gold = coded.drop(columns="record_id"), gold.drop(columns="record_id")
    joined, method = join_gold(coded, gold)
    assert method == "row order" and (joined["machine_code"].to_numpy() == coded["code"].to_numpy()).all()
    with pytest.raises(InputError, match="different titles"):
        join_gold(coded.iloc[::-1].reset_index(drop=True), gold, coded_name="coded.csv", gold_name="gold.csv")


def test_join_by_title_and_context():
    coded = pd.DataFrame({"title": ["Nurse", "Nurse", "Welder", "Nurse"],
                          "context": ["hospital", "school", "plant", "school"],
                          "code": ["29-1141", "29-1141", "51-4121", "29-1141"],
                          "confidence": ["0.9", "0.6", "0.8", "0.6"]})
    gold = pd.DataFrame({"title": ["welder ", "NURSE", "Baker"], "context": ["plant", "school", "bakery"],
                         "code": ["51-4121", "29-1141", "51-3011"]})
    rejects = Rejects()
    joined, method = join_gold(coded, gold, gold_name="gold.csv", rejects=rejects)
    assert method == "title and context"
    assert joined["machine_code"].tolist() == ["51-4121", "29-1141"]
    assert joined["confidence"].tolist() == ["0.8", "0.6"]
    assert rejects.frame()[["file", "row", "column"]].values.tolist() == [["gold.csv", 4, "title"]]


def test_join_errors_are_clear():
    with pytest.raises(InputError, match="record_id"):
        join_gold(pd.DataFrame({"code": ["a", "b"]}), pd.DataFrame({"code": ["a"]}))
    with pytest.raises(InputError, match="repeats ids"):
        join_gold(pd.DataFrame({"record_id": ["1", "1"], "code": ["a", "b"]}),
                  pd.DataFrame({"record_id": ["1"], "code": ["a"]}))
    with pytest.raises(InputError, match="missing column"):
        join_gold(pd.DataFrame({"title": ["x"]}), pd.DataFrame({"code": ["a"]}))


def test_bad_records_go_to_rejects_not_silently_away():
    coded, gold = gold_sample(n=60)
    coded.loc[0, "confidence"] = "high"
    coded.loc[1, "confidence"] = "1.7"
    coded.loc[2, "decision"] = "maybe"
    gold.loc[3, "code"] = ""
    ev = evaluate(coded, gold, n_boot=50)
    assert len(ev.records) == 56
    reasons = ev.rejects.frame()["reason"].tolist()
    assert sum("confidence" in r for r in reasons) == 2
    assert any("decision" in r for r in reasons) and any("no expert code" in r for r in reasons)


def test_levels_compare_onet_with_soc_codes():
    # O*NET-SOC 2019 codes extend SOC 2018 codes with ".NN" (O*NET-SOC taxonomy); at the detailed SOC level
    # 15-1252.00 and 15-1252 are the same occupation.
    coded = pd.DataFrame({"code": ["15-1252.00", "29-1141.01"]})
    gold = pd.DataFrame({"code": ["15-1252", "29-1141"]})
    assert summary_value(evaluate(coded, gold, n_boot=20), "machine accuracy") == 0.0
    assert summary_value(evaluate(coded, gold, n_boot=20, level="detailed"), "machine accuracy") == 1.0


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.images, self.links, self.text = [], [], [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append(tag)
        if tag == "img":
            self.images.append(attrs.get("src", ""))
        for name in ("href", "src"):
            if name in attrs and tag != "img":
                self.links.append(attrs[name])

    def handle_data(self, data):
        self.text.append(data)


def parse_report(path):
    parser = _Collector()
    parser.feed(path.read_text(encoding="utf-8"))
    parser.close()
    return parser


def test_report_is_self_contained_and_embeds_every_figure(tmp_path):
    coded, gold = gold_sample()
    coded.loc[:39, "code"] = "<script>alert(1)</script>"  # data must come out as text, never markup
    written = write_report(evaluate(coded, gold, n_boot=100), tmp_path)
    page = parse_report(written["report"])
    assert "script" not in page.tags and not page.links
    assert len(page.images) == 2
    for src in page.images:
        prefix = "data:image/png;base64,"
        assert src.startswith(prefix)
        assert base64.b64decode(src[len(prefix):]).startswith(PNG_SIGNATURE)
    text = " ".join(page.text)
    assert "<script>alert(1)</script>" in text  # escaped in the file, so it parses back as plain text
    for phrase in ("review every referred record", "random sample of the accepted", "no network calls",
                   "coding rules"):
        assert phrase in text
    for name in ("summary", "curve", "reliability", "major_groups", "confusions", "thresholds"):
        table = pd.read_csv(tmp_path / f"{name}.csv")
        assert len(table) > 0
    curve = pd.read_csv(tmp_path / "curve.csv")
    assert {"threshold", "share_automated", "accepted_accuracy", "mix_accuracy"} <= set(curve.columns)
    assert pd.read_csv(tmp_path / "reliability.csv")["count"].sum() == 400


def test_report_without_confidence_says_no_threshold(tmp_path):
    coded, gold = gold_sample(n=40)
    written = write_report(evaluate(coded.drop(columns=["confidence", "decision"]), gold, n_boot=20), tmp_path)
    page = parse_report(written["report"])
    assert not page.images
    assert "no confidence column" in " ".join(page.text)
    assert not (tmp_path / "curve.csv").exists()
    assert (tmp_path / "summary.csv").exists() and (tmp_path / "confusions.csv").exists()


def run_cli(argv):
    """Run the sub-command the way titlematch.cli.main does (parser from the module, --quiet added)."""
    parser = argparse.ArgumentParser(prog="titlematch")
    sub = evaluate_cli.add_parser(parser.add_subparsers(dest="command"))
    sub.add_argument("--quiet", action="store_true")
    sub.add_argument("--verbose", action="store_true")
    return evaluate_cli.run(parser.parse_args(["evaluate", *argv]))


def test_cli_writes_the_report_and_a_summary_line(tmp_path, capsys):
    coded, gold = gold_sample(n=300)
    coded.to_csv(tmp_path / "coded.csv", index=False)
    gold.to_csv(tmp_path / "gold.csv", index=False)
    out = tmp_path / "report"
    assert run_cli([str(tmp_path / "coded.csv"), "--gold", str(tmp_path / "gold.csv"), "--out", str(out),
                    "--bootstrap", "100", "--min-accuracy", "0.9"]) == 0
    printed = capsys.readouterr().out
    assert "titlematch evaluate: rows in 300, evaluated 300" in printed
    assert (out / "report.html").exists() and (out / "rejects.csv").exists()
    summary = pd.read_csv(out / "summary.csv").set_index("measure")
    assert summary.loc["machine accuracy", "value"] == pytest.approx(accuracy_score(gold["code"], coded["code"]))


def test_cli_rejects_bad_options(tmp_path):
    coded, gold = gold_sample(n=10)
    coded.to_csv(tmp_path / "coded.csv", index=False)
    gold.to_csv(tmp_path / "gold.csv", index=False)
    with pytest.raises(SystemExit):  # refused by the parser: a number from 0 to 1
        run_cli([str(tmp_path / "coded.csv"), "--gold", str(tmp_path / "gold.csv"), "--out", str(tmp_path / "r"),
                 "--min-accuracy", "97"])
    with pytest.raises(InputError, match="no such file"):
        run_cli([str(tmp_path / "none.csv"), "--gold", str(tmp_path / "gold.csv"), "--out", str(tmp_path / "r")])
