"""Any classification: codes kept exactly, hierarchy from parent, level or prefixes, end to end on the CLI."""
from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd
import pytest

from titlematch.cli import main
from titlematch.coding.classification import Classification, implicit_parent, implicit_top
from titlematch.coding.coder import TitleCoder
from titlematch.coding.dictionary import TitleDictionary
from titlematch.io import InputError

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
import _esco  # noqa: E402  the real-titles protocol, shared with benchmarks/bench_real_titles.py

def test_isco08_builtin_hierarchy_follows_the_published_structure():
    # ISCO-08 structure (ESCO classification, European Commission): 436 unit groups, 130 minor,
    # 43 sub-major, 10 major groups; 2166 Graphic and multimedia designers sits in 216 / 21 / 2.
    isco = Classification.builtin("isco08")
    levels = isco.table.groupby("level").size().to_dict()
    assert levels == {1: 10, 2: 43, 3: 130, 4: 436}
    assert len(isco.leaves()) == 436 and isco.leaves()["code"].str.len().eq(4).all()
    assert isco.parent_of(["2166", "0110"]).tolist() == ["216", "011"]
    assert isco.top_of(["2166", "0110", "9629"]).tolist() == ["2", "0", "9"]
    assert isco.is_group("011") and not isco.is_group("0110")


def test_soc_padding_and_onet_codes_group_as_the_soc_numbers_them():
    # SOC 2018 numbering (BLS SOC User Guide, from memory): major NN-0000, minor NN-NN00, broad NN-NNN0,
    # detailed NN-NNNN; O*NET-SOC adds .NN to a SOC detailed code.
    assert implicit_parent("29-1141") == "29-1140"
    assert implicit_parent("29-1140") == "29-1100"
    assert implicit_parent("29-1100") == "29-0000"
    assert implicit_parent("29-1141.01") == "29-1141"
    assert implicit_top("29-1141.01") == "29" and implicit_top("2166") == "2"
    soc = Classification.from_frame(pd.DataFrame({"code": ["29-0000", "29-1100", "29-1140", "29-1141", "29-1171"],
                                                  "title": ["a", "b", "c", "d", "e"]}))
    assert soc.table.set_index("code")["parent"].to_dict() == {
        "29-0000": "", "29-1100": "29-0000", "29-1140": "29-1100", "29-1141": "29-1140", "29-1171": "29-1100"}
    assert soc.leaves()["code"].tolist() == ["29-1141", "29-1171"]
    onet = Classification.builtin("onet2019")  # every O*NET-SOC code is an occupation, .00 ones too
    assert len(onet.leaves()) == 1016 and onet.parent("29-1141.01") == "29-1141"


def test_parent_and_level_columns_and_opaque_codes():
    table = pd.DataFrame({"code": ["A", "A01", "A01.2", "B", "B7"], "title": ["a", "b", "c", "d", "e"],
                          "parent": ["", "A", "A01", "", "B"]})
    c = Classification.from_frame(table)
    assert c.leaves()["code"].tolist() == ["A01.2", "B7"]
    assert c.top_of(["A01.2", "B7"]).tolist() == ["A", "B"]
    leveled = Classification.from_frame(pd.DataFrame({"code": ["1", "11", "111", "2", "21"], "title": list("abcde"),
                                                      "level": ["1", "2", "3", "1", "2"]}))
    assert leveled.parent_of(["111", "21"]).tolist() == ["11", "2"]


def test_bad_classification_files_name_row_and_column(tmp_path):
    cases = {
        "code,title\n11,a\n11,b\n": "row 3, column code: code '11' is listed twice",
        "code,title,parent\n1,a,\n11,b,9\n": "row 3, column parent",
        "code,title,level\n1,a,1\n11,b,two\n": "row 3, column level",
        "code,title\n1,a\n,b\n": "row 3, column code: empty code",
    }
    for i, (text, message) in enumerate(cases.items()):
        path = tmp_path / f"c{i}.csv"
        path.write_text(text, encoding="utf-8")
        with pytest.raises(InputError, match=message):
            Classification.resolve(path)
    with pytest.raises(InputError, match="do not match"):
        Classification.builtin("isco08", code_pattern=r"^\d{3}$")
    with pytest.raises(InputError, match="not a built-in name"):
        Classification.resolve("isco88")


def test_records_coded_to_a_group_or_an_unknown_code_are_rejected_with_the_reason():
    past = pd.DataFrame({"title": ["fleet commander", "naval officer", "graphic designer", "web designer"],
                         "code": ["0110", "011", "2166", "99999"]})
    d = TitleDictionary().fit(past, Classification.builtin("isco08"))
    reasons = d.rejects.frame().set_index("row")["reason"].to_dict()
    assert reasons == {2: "code is a group of the classification, not one of its detailed codes",
                       4: "code not in the classification"}
    assert sorted(d.units["code"].unique()) == ["0110", "2166"]


def _write(frame: pd.DataFrame, path: Path) -> str:
    frame.to_csv(path, index=False)
    return str(path)


def _cli_year(tmp_path: Path, past: pd.DataFrame, gold: pd.DataFrame, new: pd.DataFrame, classification: str,
              *extra: str) -> dict:
    """dictionary -> calibrate -> code -> evaluate -> queue -> feedback, as an office runs a year."""
    files = {name: _write(frame, tmp_path / f"{name}.csv") for name, frame in
             (("past", past), ("gold", gold), ("new", new[["title"]]), ("gold_titles", gold[["title"]]))}
    out = {k: str(tmp_path / k) for k in ("dictionary", "model", "evaluation", "dictionary2")}
    out |= {"coded": str(tmp_path / "coded.csv"), "queue": str(tmp_path / "queue.csv")}
    assert main(["dictionary", files["past"], "--classification", classification, "--out", out["dictionary"],
                 "--quiet", *extra]) == 0
    assert main(["calibrate", "--dictionary", out["dictionary"], "--gold", files["gold"], "--min-accuracy", "0.9",
                 "--out", out["model"], "--bootstrap", "50", "--quiet"]) == 0
    assert main(["code", files["new"], "--dictionary", out["dictionary"], "--model", out["model"],
                 "--out", out["coded"], "--quiet"]) == 0
    coded_gold = str(tmp_path / "coded_gold.csv")
    assert main(["code", files["gold_titles"], "--dictionary", out["dictionary"], "--model", out["model"],
                 "--out", coded_gold, "--quiet"]) == 0
    assert main(["evaluate", coded_gold, "--gold", files["gold"], "--classification", out["dictionary"],
                 "--out", out["evaluation"], "--bootstrap", "50", "--quiet"]) == 0
    assert main(["queue", out["coded"], "--dictionary", out["dictionary"], "--all", "--out", out["queue"],
                 "--quiet"]) == 0
    return out | files


def test_isco08_end_to_end_codes_come_out_exactly_as_they_went_in(tmp_path):
    # ESCO v1.0 occupation labels (European Commission) coded to ISCO-08 unit groups: a real benchmark,
    # read here in a test only. Major groups 0 (armed forces, codes with a leading zero) and 21-22.
    data = _esco.split(_esco.load_labels())
    keep = lambda f: f[f["code"].str.match(r"^(0|21|22)")].reset_index(drop=True)  # noqa: E731
    past, gold, new = keep(data["past"]), keep(data["gold"]), keep(data["new"])
    assert {"0110", "2166"} <= set(past["code"])
    out = _cli_year(tmp_path, past, gold, new, "isco08", "--code-pattern", r"^\d{4}$")
    coded = pd.read_csv(out["coded"], dtype=str, keep_default_na=False)
    isco = set(Classification.builtin("isco08").leaves()["code"])
    assert set(coded["code"]) <= isco and {"0110", "2166"} & set(coded["code"])
    assert coded["code"].str.fullmatch(r"\d{4}").all()  # "0110" never becomes "110" or 110.0
    assert (coded["code"] == new["code"]).mean() > 0.6
    summary = pd.read_csv(Path(out["evaluation"]) / "summary.csv").set_index("measure")["value"]
    assert summary["machine parent-group accuracy"] >= summary["machine accuracy"]
    groups = pd.read_csv(Path(out["evaluation"]) / "major_groups.csv", dtype=str)
    assert set(groups["major_group"]) <= {"0", "2"}  # ISCO-08 major groups: first digit
    queue = pd.read_csv(out["queue"], dtype=str, keep_default_na=False)
    assert (queue["group"] == queue["code"].str[0]).all()  # ISCO-08 major group of the first candidate
    # a coder settles the first queued title as 0110; the new dictionary version holds it under 0110
    queue["coder_code"] = ""
    queue.loc[0, "coder_code"] = "0110"
    queue.loc[1, "coder_code"] = "110"  # not a code of the classification: refused, with the reason
    queue.to_csv(out["queue"], index=False)
    assert main(["feedback", out["queue"], "--dictionary", out["dictionary"], "--out", out["dictionary2"],
                 "--year", "2025", "--quiet"]) == 0
    updated = TitleCoder.load(out["dictionary2"])
    assert updated.predict([queue.loc[0, "example_title"]]).tolist() == ["0110"]
    rejects = pd.read_csv(Path(out["dictionary2"]) / "rejects.csv", dtype=str)
    assert rejects["value"].tolist() == ["110"]


# NOC 2021 (Statistics Canada, from memory): five-digit codes whose first digit is the broad category,
# with leading zeros in the management group (00010 Legislators).
NOC = pd.DataFrame({"code": ["00010", "00012", "21231", "21232", "31301", "41220", "41221", "63200", "73300"],
                    "title": ["Legislators", "Senior managers - financial, communications and other business services",
                              "Software engineers and designers", "Software developers and programmers",
                              "Registered nurses and registered psychiatric nurses", "Secondary school teachers",
                              "Elementary school and kindergarten teachers", "Cooks", "Transport truck drivers"]})


def _records(pairs: dict[str, list[str]], years=(2022, 2023, 2024)) -> pd.DataFrame:
    rows = [(t, code, years[i % len(years)]) for code, titles in pairs.items() for i, t in enumerate(titles * 3)]
    return pd.DataFrame(rows, columns=["title", "code", "year"])


def test_noc_style_five_digit_list_end_to_end(tmp_path):
    pairs = {"00010": ["member of parliament", "senator", "legislator"],
             "21232": ["software developer", "programmer", "web developer"],
             "21231": ["software engineer", "software architect"],
             "31301": ["registered nurse", "psychiatric nurse", "rn"],
             "41220": ["high school teacher", "secondary teacher"],
             "41221": ["elementary teacher", "kindergarten teacher"],
             "63200": ["cook", "line cook", "prep cook"], "73300": ["truck driver", "long haul driver"]}
    past = _records(pairs)
    gold = pd.DataFrame({"title": ["legislator", "programmer", "nurse rn", "cook", "high school teacher",
                                   "software engineer", "truck driver", "kindergarten teacher"] * 3,
                         "code": ["00010", "21232", "31301", "63200", "41220", "21231", "73300", "41221"] * 3})
    new = pd.DataFrame({"title": ["Member of Parliament", "senior software developer", "line cook"],
                        "code": ["00010", "21232", "63200"]})
    out = _cli_year(tmp_path, past, gold, new, _write(NOC, tmp_path / "noc.csv"))
    coded = pd.read_csv(out["coded"], dtype=str, keep_default_na=False)
    assert coded["code"].tolist() == ["00010", "21232", "63200"]
    groups = pd.read_csv(Path(out["evaluation"]) / "major_groups.csv", dtype=str)
    assert "0" in set(groups["major_group"])  # the broad category of 00010 keeps its zero
    d = TitleDictionary.load(out["dictionary"])
    assert d.hierarchy.parent("21232") == "2123" and d.hierarchy.top("00010") == "0"


def test_a_list_with_a_parent_column_end_to_end(tmp_path):
    # ISCO-08 (ESCO classification, European Commission) written with an explicit parent column
    isco = Classification.builtin("isco08").table
    subset = isco[isco["code"].str.match(r"^(5|51|512|5120|7|71|711|7112|7115|9|94|941|9412)$")]
    table = subset[["code", "title", "parent"]]
    pairs = {"5120": ["cook", "chef de partie", "line cook"], "7112": ["bricklayer", "stonemason"],
             "7115": ["carpenter", "joiner"], "9412": ["kitchen helper", "dishwasher"]}
    gold = pd.DataFrame({"title": ["cook", "bricklayer", "joiner", "dishwasher", "chef"] * 4,
                         "code": ["5120", "7112", "7115", "9412", "5120"] * 4})
    new = pd.DataFrame({"title": ["head cook", "brick layer", "kitchen helper"], "code": ["5120", "7112", "9412"]})
    out = _cli_year(tmp_path, _records(pairs), gold, new, _write(table, tmp_path / "isco_parent.csv"))
    coded = pd.read_csv(out["coded"], dtype=str, keep_default_na=False)
    assert coded["code"].tolist() == ["5120", "7112", "9412"]
    d = TitleDictionary.load(out["dictionary"])
    assert set(d.catalogue["code"]) == {"5120", "7112", "7115", "9412"}  # groups are not codes to code to
    assert d.hierarchy.parent("7115") == "711" and d.hierarchy.top("7115") == "7"
