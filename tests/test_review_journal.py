"""The decisions journal and the review session without a browser: durability, two coders,
the double-coded sample's agreement, feedback and evaluate reading the journal."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score

from _review_data import coded_frame
from titlematch.cli import main
from titlematch.coding.dictionary import TitleDictionary
from titlematch.measures.metrics import cohen_kappa
from titlematch.review.agreement import agreement_table, coder_pairs
from titlematch.review.decisions import Journal, in_double_sample, read_journal
from titlematch.review.session import DecisionRefused, ReviewSession, queue_titles


@pytest.fixture(scope="module")
def dictionary(review_files):
    return TitleDictionary.load(review_files["dictionary"])


def _session(dictionary, path, coder, queue=None, **options):
    queue, examples = queue_titles(coded_frame() if queue is None else queue, "coded.csv")
    return ReviewSession(queue, dictionary, Journal(path), coder=coder, examples=examples, **options)


def test_a_torn_last_line_is_tolerated_and_closed_by_the_next_write(tmp_path):
    path = tmp_path / "d.jsonl"
    journal = Journal(path)
    first = journal.append({"action": "code", "coder": "ann", "title": "nurse", "code": "29-1141"})
    journal.close()
    with open(path, "ab") as handle:  # what a kill -9 in the middle of a write leaves
        handle.write(b'{"id":"x","action":"code","coder":"ann","title":"dri')
    state = read_journal(path)
    assert [e["id"] for e in state.effective()] == [first["id"]]
    assert [line for line, _ in state.damaged] == [2]
    journal = Journal(path)
    second = journal.append({"action": "skip", "coder": "ann", "title": "driver"})
    state = read_journal(path)
    assert [e["id"] for e in state.effective()] == [first["id"], second["id"]]
    assert [line for line, _ in state.damaged] == [2]  # reported, never silently dropped
    assert all(json.loads(line) for line in path.read_text().splitlines() if line.startswith('{"id":"') and
               line.endswith("}"))


def test_an_undo_takes_back_only_the_coders_own_line(tmp_path):
    path = tmp_path / "d.jsonl"
    journal = Journal(path)
    mine = journal.append({"action": "code", "coder": "ann", "title": "nurse", "code": "29-1141"})
    journal.append({"action": "undo", "coder": "bob", "undoes": mine["id"]})
    assert [e["id"] for e in read_journal(path).effective()] == [mine["id"]]
    journal.append({"action": "undo", "coder": "ann", "undoes": mine["id"]})
    assert read_journal(path).effective() == []


def test_the_queue_order_resume_and_refusals(dictionary, tmp_path):
    session = _session(dictionary, tmp_path / "d.jsonl", "ann")
    assert session.keys == ["nurse", "driver", "associate", "helper"]  # accepted "cook" is not queued
    current = session.state()["current"]
    assert current["key"] == "nurse" and current["records"] == 5
    assert [c["code"] for c in current["candidates"]] == ["29-1141", "29-2061", "31-1131"]
    assert current["candidates"][0]["group_title"] == "Healthcare Practitioners and Technical Occupations"
    assert current["candidates"][0]["evidence"][0]["title"] in ("registered nurse", "nurse")
    with pytest.raises(DecisionRefused, match="not in the classification"):
        session.decide("nurse", "code", "99-9999")
    with pytest.raises(DecisionRefused, match="not the one you hold"):
        session.decide("driver", "code", "53-3032")
    session.decide("nurse", "code", "29-1141", remark="checked the manual")
    assert session.state()["threshold"] is None and _session(dictionary, tmp_path / "x.jsonl", "ann",
                                                             threshold=0.8).state()["threshold"] == 0.8
    again = _session(dictionary, tmp_path / "d.jsonl", "ann")  # a restart reads the same file
    assert again.state()["current"]["key"] == "driver"
    assert again.progress() | {} == {"done": 1, "skipped": 0, "left": 3, "total": 4, "by_me": 1,
                                     "damaged_lines": 0}


def test_not_codable_uses_the_residual_code_when_the_classification_has_one(dictionary, tmp_path):
    session = _session(dictionary, tmp_path / "d.jsonl", "ann")
    assert session.residual_code == ""  # SOC 2018 has no code for "insufficient information"
    session.state()
    session.decide("nurse", "uncodable")
    assert read_journal(tmp_path / "d.jsonl").effective(("uncodable",))[0]["code"] == ""
    with_residual = _session(dictionary, tmp_path / "e.jsonl", "ann", residual_code="55-3019")
    with_residual.state()
    with_residual.decide("nurse", "uncodable")
    assert read_journal(tmp_path / "e.jsonl").effective(("uncodable",))[0]["code"] == "55-3019"


def test_two_coders_never_hold_the_same_title(dictionary, tmp_path):
    path = tmp_path / "d.jsonl"
    ann, bob = _session(dictionary, path, "ann"), _session(dictionary, path, "bob")
    seen = []
    for _ in range(2):
        a, b = ann.state()["current"], bob.state()["current"]
        assert a["key"] != b["key"]
        seen += [a["key"], b["key"]]
        ann.decide(a["key"], "code", a["candidates"][0]["code"])
        bob.decide(b["key"], "skip" if b["key"] == "helper" else "code", b["candidates"][0]["code"])
    assert sorted(seen) == sorted(ann.keys)
    decided = read_journal(path).effective(("code",))
    assert len({e["title"] for e in decided}) == len(decided)  # no title decided twice


def test_double_coded_kappa_equals_scikit_learn(dictionary, tmp_path):
    # 40 invented titles, all in the double-coded sample; two coders who agree on most of them
    rng = np.random.default_rng(3)
    codes = ["29-1141", "29-2061", "41-2011", "53-3032", "35-2014"]
    rows = []
    for i in range(40):
        rows.append({"title": f"title {i}", "title_normalized": f"title {i}", "code": codes[i % 5],
                     "confidence": "0.3", "decision": "refer", "context": ""})
    queue = pd.DataFrame(rows)
    path = tmp_path / "d.jsonl"
    ann = _session(dictionary, path, "ann", queue=queue, double_code=1.0)
    bob = _session(dictionary, path, "bob", queue=queue, double_code=1.0)
    assert all(in_double_sample(k, 1.0) for k in ann.keys)
    for coder in (ann, bob):
        while (current := coder.state()["current"]) is not None:
            i = int(current["key"].split()[1])
            code = codes[i % 5] if coder is ann or rng.random() < 0.7 else codes[rng.integers(5)]
            coder.decide(current["key"], "code", code)
    pairs = coder_pairs(read_journal(path))
    assert len(pairs) == 40 and set(pairs["coder_1"]) == {"ann"} and set(pairs["coder_2"]) == {"bob"}
    table = agreement_table(pairs)
    overall = table.iloc[0]
    # reference: scikit-learn's cohen_kappa_score on the same pairs
    assert overall["kappa"] == pytest.approx(cohen_kappa_score(pairs["code_1"], pairs["code_2"]), abs=1e-12)
    assert overall["agreement"] == pytest.approx((pairs["code_1"] == pairs["code_2"]).mean())
    for _, row in table.iloc[1:].iterrows():
        part = pairs[pairs["group"] == row["group"]]
        if part["code_1"].nunique() + part["code_2"].nunique() > 2:
            assert row["kappa"] == pytest.approx(cohen_kappa_score(part["code_1"], part["code_2"]), abs=1e-12)
    assert sorted(table["group"][1:]) == ["29", "35", "41", "53"]


def test_kappa_matches_scikit_learn_on_random_labels():
    rng = np.random.default_rng(0)
    for _ in range(20):
        a = rng.choice(list("abcd"), size=50)
        b = np.where(rng.random(50) < 0.6, a, rng.choice(list("abcde"), size=50))
        assert cohen_kappa(a, b) == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)


def test_feedback_and_evaluate_read_the_journal(review_files, dictionary, tmp_path):
    path = tmp_path / "d.jsonl"
    ann = _session(dictionary, path, "ann", double_code=1.0)
    bob = _session(dictionary, path, "bob", double_code=1.0)
    for coder, choice in ((ann, {"nurse": "29-1141", "driver": "53-3032", "associate": "41-2031"}),
                          (bob, {"nurse": "29-1141", "driver": "53-3033", "associate": "41-2031"})):
        while (current := coder.state()["current"]) is not None:
            if current["key"] == "helper":
                coder.decide("helper", "uncodable")
            else:
                coder.decide(current["key"], "code", choice[current["key"]])
    out = tmp_path / "dictionary_2"
    assert main(["feedback", str(path), "--dictionary", str(review_files["dictionary"]), "--out", str(out),
                 "--year", "2025", "--quiet"]) == 0
    added = TitleDictionary.load(out).counts.query("year == 2025")
    assert sorted(zip(added["key"], added["code"])) == [("associate", "41-2031"), ("nurse", "29-1141")]
    rejects = pd.read_csv(out / "rejects.csv", dtype=str)
    assert sorted(rejects["reason"].str.split(" ").str[0]) == ["double-coded", "marked"]

    coded = coded_frame()
    gold = coded[["record_id", "title"]].assign(code=coded["code"])
    coded.to_csv(tmp_path / "coded.csv", index=False)
    gold.to_csv(tmp_path / "gold.csv", index=False)
    assert main(["evaluate", str(tmp_path / "coded.csv"), "--gold", str(tmp_path / "gold.csv"), "--decisions",
                 str(path), "--out", str(tmp_path / "evaluation"), "--bootstrap", "20", "--quiet"]) == 0
    agreement = pd.read_csv(tmp_path / "evaluation" / "agreement.csv", dtype={"group": str})
    pairs = coder_pairs(read_journal(path))
    assert agreement.loc[0, "titles"] == 4
    assert agreement.loc[0, "agreement"] == pytest.approx(0.75)
    assert agreement.loc[0, "kappa"] == pytest.approx(cohen_kappa_score(pairs["code_1"], pairs["code_2"]))
    assert "Do two coders agree?" in (tmp_path / "evaluation" / "report.html").read_text(encoding="utf-8")


def test_a_spreadsheet_queue_is_served_in_the_same_order(tmp_path):
    from titlematch.io import read_table
    from titlematch.review.queue import escape_frame, referral_queue

    coded = coded_frame()
    coded.loc[coded["title_normalized"] == "helper", "title"] = "=HYPERLINK(1)"  # a formula-looking title
    escape_frame(referral_queue(coded)).to_csv(tmp_path / "queue.csv", index=False)
    from_queue, _ = queue_titles(read_table(tmp_path / "queue.csv"), "queue.csv")
    from_coded, examples = queue_titles(coded, "coded.csv")
    assert from_queue["title_normalized"].tolist() == from_coded["title_normalized"].tolist()
    assert from_queue.set_index("title_normalized").loc["helper", "example_title"] == "=HYPERLINK(1)"
    assert [e["record_id"] for e in examples["nurse"]] == ["R0001", "R0002", "R0003", "R0004"]
