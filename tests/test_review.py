"""Referral queue, coders' feedback and disagreements."""
from __future__ import annotations

import json

import openpyxl
import pandas as pd

from titlematch.cli import main
from titlematch.coding.coder import TitleCoder
from titlematch.coding.codes import onet_classification
from titlematch.review.queue import disagreements, escape_formula, referral_queue

SOC = onet_classification("soc")  # O*NET-SOC 2019 table at SOC 2018 level (O*NET database, CC BY 4.0)


def _coded():
    return pd.DataFrame({
        "title": ["Drone pilot", "drone pilot", "Drone Pilot", "=HYPERLINK(\"x\")", "cook", "barista"],
        "context": ["survey firm", "survey firm", "farm", "", "diner", "cafe"],
        "title_normalized": ["drone pilot"] * 3 + ["hyperlink x", "cook", "barista"],
        "code": ["53-2012", "53-2012", "53-2012", "-1", "35-2014", "35-3023"],
        "code_title": ["Commercial Pilots"] * 3 + ["", "Cooks, Restaurant", "Fast Food and Counter Workers"],
        "confidence": [0.4, 0.4, 0.4, 0.1, 0.99, 0.6],
        "code_2": ["53-2011"] * 3 + ["", "35-2012", ""], "confidence_2": [0.2] * 3 + [0, 0.01, 0],
        "code_3": [""] * 6, "confidence_3": [0.0] * 6,
        "decision": ["refer", "refer", "refer", "refer", "accept", "refer"],
    })


def test_queue_one_row_per_title_ordered_by_records_times_uncertainty():
    queue = referral_queue(_coded(), dict(zip(SOC["code"], SOC["title"])))
    assert queue["title_normalized"].tolist() == ["drone pilot", "hyperlink x", "barista"]
    assert queue["records"].tolist() == [3, 1, 1]  # 3 x 0.6 > 1 x 0.9 > 1 x 0.4
    assert queue.loc[0, "context"] == "survey firm; farm"
    assert queue.loc[0, "code_2_title"] == "Airline Pilots, Copilots, and Flight Engineers"
    assert (queue["coder_code"] == "").all() and (queue["coder_remark"] == "").all()


def test_formula_cells_are_escaped_in_csv_and_xlsx(tmp_path):
    # OWASP "CSV Injection": cells beginning =, +, -, @ (and tab, CR) must not be run as formulas.
    assert escape_formula("=1+1") == "'=1+1" and escape_formula("+1") == "'+1"
    assert escape_formula("-x") == "'-x" and escape_formula("@SUM(A1)") == "'@SUM(A1)"
    assert escape_formula("cook") == "cook"
    _coded().to_csv(tmp_path / "coded.csv", index=False)
    for suffix in ("csv", "xlsx"):
        out = tmp_path / f"queue.{suffix}"
        assert main(["queue", str(tmp_path / "coded.csv"), "--out", str(out), "--quiet"]) == 0
        if suffix == "xlsx":
            sheet = openpyxl.load_workbook(out).active
            cells = [c for row in sheet.iter_rows() for c in row]
            assert all(c.data_type != "f" for c in cells)
            texts = [c.value for c in cells if isinstance(c.value, str)]
        else:
            texts = pd.read_csv(out, dtype=str, keep_default_na=False).to_numpy().ravel().tolist()
        assert "'=HYPERLINK(\"x\")" in texts and "'-1" in texts
        assert not any(t.startswith(("=", "+", "-", "@")) for t in texts)


def test_queue_decisions_feed_back_into_the_dictionary(tmp_path):
    past = pd.DataFrame({"title": ["line cook"] * 5 + ["registered nurse"] * 5,
                         "code": ["35-2014"] * 5 + ["29-1141"] * 5, "year": [2024] * 10})
    coder = TitleCoder().fit(past, past["code"], classification=SOC)
    coder.save(tmp_path / "dict")
    _coded().to_csv(tmp_path / "coded.csv", index=False)
    assert main(["queue", str(tmp_path / "coded.csv"), "--out", str(tmp_path / "q.xlsx"), "--quiet"]) == 0
    queue = pd.read_excel(tmp_path / "q.xlsx", dtype=str, keep_default_na=False)
    queue.loc[queue["title_normalized"] == "drone pilot", "coder_code"] = "53-2012"
    queue.loc[queue["title_normalized"] == "barista", "coder_code"] = "35-3023"
    queue.loc[queue["title_normalized"] == "hyperlink x", "coder_code"] = "99-0000"  # not a code
    queue.to_excel(tmp_path / "q.xlsx", index=False)
    assert main(["feedback", str(tmp_path / "q.xlsx"), "--dictionary", str(tmp_path / "dict"),
                 "--out", str(tmp_path / "dict2"), "--year", "2025", "--quiet"]) == 0
    updated = TitleCoder.load(tmp_path / "dict2")
    assert updated.predict(["Drone Pilot", "barista"]).tolist() == ["53-2012", "35-3023"]
    manifest = json.loads((tmp_path / "dict2" / "manifest.json").read_text())
    review = [p for p in manifest["meta"]["provenance"] if p["source"] == "coder review"]
    assert review and review[0]["years"] == [2025] and review[0]["kept"] == 4  # 3 drone pilot + 1 barista
    rejects = pd.read_csv(tmp_path / "dict2" / "rejects.csv")
    assert rejects["reason"].str.contains("not in the dictionary's catalogue").tolist() == [True]


def test_disagreements_listed_most_confident_first():
    coded = pd.DataFrame({"title": list("abcd"), "code": ["11-1011", "29-1141", "35-2014", "53-3032"],
                          "confidence": [0.95, 0.99, 0.5, 0.92], "manual": ["11-1011", "29-1171", "35-2012", "53-3033"],
                          "code_2": ["", "29-1171", "", ""], "confidence_2": [0, 0.004, 0, 0]})
    found = disagreements(coded, "manual", min_confidence=0.9)
    assert found["title"].tolist() == ["b", "d"]
    assert found.loc[0, "manual_code_confidence"] == 0.004
