"""One clash policy for every command: input columns are never overwritten, renamed or changed.

The tool's added columns are refused when they would take an input column's name, unless an output
prefix is given; ``--title-col`` works whatever the input's other columns are called.
"""
from __future__ import annotations

import pandas as pd
import pytest

from titlematch.cli import main
from titlematch.coding.coder import TitleCoder
from titlematch.confidence.calibration import calibrate
from titlematch.confidence.model import ConfidenceModel
from titlematch.datasets.scenario import classification, make_register_scenario, make_title_scenario
from titlematch.io.columns import ColumnClash, add_outputs, output_names, unused_name


@pytest.fixture(scope="module")
def coded_setup(tmp_path_factory):
    path = tmp_path_factory.mktemp("columns")
    data = make_title_scenario(seed=11, records_per_year=400, new_records=300, gold_records=300)
    coder = TitleCoder().fit(data["past"], classification=classification())
    coder.save(path / "dict")
    calibrate(coder, data["gold"], n_boot=50).model.save(path / "model")
    new = data["new"].head(60).reset_index(drop=True)
    # the office's own columns, named like the tool's: a manual code, its own confidence and decision,
    # and a "title" that is not the job title (the job title is in "job")
    frame = pd.DataFrame({"record_id": new["record_id"], "job": new["title"], "context": new["context"],
                          "title": "Ms.", "code": "11-1011", "confidence": "0.5", "decision": "keep"})
    frame.loc[3, "code"] = "0012"  # leading zeros and odd values must come back as written
    frame.to_csv(path / "in.csv", index=False)
    return path, coder


def _read(path):
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def test_clashing_output_columns_are_refused_naming_them_and_the_option(coded_setup, capsys):
    path, _ = coded_setup
    out = path / "refused.csv"
    assert main(["code", str(path / "in.csv"), "--title-col", "job", "--dictionary", str(path / "dict"),
                 "--model", str(path / "model"), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert "code, confidence, decision" in err and "--output-prefix" in err and str(path / "in.csv") in err
    assert not out.exists() and not (path / "refused.csv.run").exists()


def test_title_col_with_prefix_keeps_every_input_column_unchanged(coded_setup, capsys):
    path, coder = coded_setup
    out = path / "coded.csv"
    assert main(["code", str(path / "in.csv"), "--title-col", "job", "--dictionary", str(path / "dict"),
                 "--model", str(path / "model"), "--output-prefix", "machine_", "--out", str(out),
                 "--quiet"]) == 0
    assert "Traceback" not in capsys.readouterr().err
    given, coded = _read(path / "in.csv"), _read(out)
    pd.testing.assert_frame_equal(coded[given.columns], given)  # every input column, as written
    assert list(coded.columns[:len(given.columns)]) == list(given.columns)
    added = [c for c in coded.columns if c not in given.columns]
    assert added and all(c.startswith("machine_") for c in added)
    assert {"machine_code", "machine_confidence", "machine_decision"} <= set(added)
    # the job title was coded, not the "title" column: the same codes as the library on job and context only
    alone = pd.DataFrame({"title": given["job"], "context": given["context"]})
    expected = coder.code(alone, confidence=ConfidenceModel.load(path / "model"))["code"]
    assert coded["machine_code"].tolist() == expected.tolist()
    assert set(coded["machine_decision"]) <= {"accept", "refer"}


def test_library_coder_takes_its_columns_from_settings(coded_setup):
    _, fitted = coded_setup
    given = _read(coded_setup[0] / "in.csv")
    coder = TitleCoder.load(coded_setup[0] / "dict").set_params(title_col="job")
    with pytest.raises(ColumnClash, match="code"):
        coder.code(given)
    coded = coder.set_params(output_prefix="tm_").code(given)
    pd.testing.assert_frame_equal(coded[given.columns], given)
    alone = pd.DataFrame({"title": given["job"], "context": given["context"]})
    assert coded["tm_code"].tolist() == fitted.code(alone)["code"].tolist()
    assert coded["tm_title_normalized"].iloc[0] != ""


def test_disagreements_on_a_gold_file_keep_the_expert_code(coded_setup, tmp_path):
    path, _ = coded_setup
    gold = _read(path / "in.csv").rename(columns={"code": "expert_code"}).assign(code="29-1141")
    gold["manual_code"] = "53-3032"
    gold.to_csv(tmp_path / "gold.csv", index=False)
    args = ["disagreements", str(tmp_path / "gold.csv"), "--dictionary", str(path / "dict"), "--model",
            str(path / "model"), "--manual-col", "manual_code", "--title-col", "job", "--min-confidence", "0",
            "--out", str(tmp_path / "d.csv"), "--quiet"]
    assert main(args) == 2  # the gold file's own code column would be overwritten
    assert main(args + ["--output-prefix", "machine_"]) == 0
    found = _read(tmp_path / "d.csv")
    assert len(found) and (found["code"] == "29-1141").all() and "machine_code" in found.columns


def test_link_refuses_clashing_columns_and_keeps_them_with_a_prefix(tmp_path, capsys):
    data = make_register_scenario(seed=3, register_rows=300, new_records=40)
    data["register"].to_csv(tmp_path / "register.csv", index=False)
    new = data["new"].assign(decision="ours", register_id="R-own")
    new.to_csv(tmp_path / "new.csv", index=False)
    base = ["link", str(tmp_path / "new.csv"), "--register", str(tmp_path / "register.csv"), "--quiet"]
    assert main(base + ["--out", str(tmp_path / "a.csv")]) == 2
    err = capsys.readouterr().err
    assert "register_id, decision" in err and "Traceback" not in err and not (tmp_path / "a.csv").exists()
    assert main(base + ["--out", str(tmp_path / "b.csv"), "--output-prefix", "link_"]) == 0
    given, linked = _read(tmp_path / "new.csv"), _read(tmp_path / "b.csv")
    kept = given[given["name"] != ""].reset_index(drop=True)
    pd.testing.assert_frame_equal(linked[given.columns], kept)
    assert set(linked["link_decision"]) <= {"accept", "refer", "no-match"}


def test_working_column_names_never_meet_input_columns(tmp_path, capsys):
    # the runner's working columns start with NUL, which no column read from a file can: a user's
    # "_reject_reason" column is plain data, kept as written (issue 14, F6)
    (tmp_path / "in.csv").write_text("title,_reject_reason\ncook,x\n", encoding="utf-8")
    assert main(["normalize", str(tmp_path / "in.csv"), "--kind", "title", "--column", "title",
                 "--out", str(tmp_path / "o.csv"), "--quiet"]) == 0
    assert pd.read_csv(tmp_path / "o.csv", dtype=str)["_reject_reason"].tolist() == ["x"]


def test_policy_functions():
    assert output_names(["a"], ["b", "c"]) == {"b": "b", "c": "c"}
    with pytest.raises(ColumnClash, match="b"):
        output_names(["b"], ["b"])
    with pytest.raises(ColumnClash, match="another --output-prefix"):
        output_names(["x_b"], ["b"], prefix="x_")
    frame = pd.DataFrame({"a": ["1", "01"]}, index=[5, 9])
    out = add_outputs(frame, pd.DataFrame({"b": [1, 2]}), prefix="p_")
    assert out.index.tolist() == [5, 9] and out["a"].tolist() == ["1", "01"] and out["p_b"].tolist() == [1, 2]
    assert unused_name(["_k", "_k_1"], "_k") == "_k_2" and unused_name([], "_k") == "_k"


def test_dictionary_title_col_ignores_an_unrelated_title_column(tmp_path):
    past = pd.DataFrame({"job": ["registered nurse", "truck driver"], "title": ["Ms.", "Mr."],
                         "soc": ["29-1141", "53-3032"], "code": ["x", "y"]})
    past.to_csv(tmp_path / "past.csv", index=False)
    assert main(["dictionary", str(tmp_path / "past.csv"), "--title-col", "job", "--code-col", "soc",
                 "--out", str(tmp_path / "d"), "--quiet"]) == 0
    assert TitleCoder.load(tmp_path / "d").predict(["Truck Driver"]).tolist() == ["53-3032"]


def test_features_are_written_from_the_same_stream(coded_setup, tmp_path):
    path, coder = coded_setup
    given = _read(path / "in.csv")
    common = ["code", str(path / "in.csv"), "--title-col", "job", "--dictionary", str(path / "dict"),
              "--output-prefix", "m_", "--quiet"]
    assert main([*common, "--out", str(tmp_path / "a.csv"), "--features", str(tmp_path / "fa.csv"),
                 "--chunk-rows", "7"]) == 0
    assert main([*common, "--out", str(tmp_path / "b.csv"), "--features", str(tmp_path / "fb.parquet")]) == 0
    chunked, whole = pd.read_csv(tmp_path / "fa.csv"), pd.read_parquet(tmp_path / "fb.parquet")
    assert not (tmp_path / "a.csv.run.features").exists()
    # the library's features of the whole file, with the record's position turned into its source row
    # (the header is row 1, so the first record is row 2)
    expected = TitleCoder.load(path / "dict").set_params(title_col="job").features(given)
    expected = expected.rename(columns={"record": "row"}).assign(row=lambda f: f["row"] + 2)
    pd.testing.assert_frame_equal(whole.reset_index(drop=True), expected, check_dtype=False)
    expected.to_csv(tmp_path / "expected.csv", index=False)  # the same CSV round trip as the chunked file's
    pd.testing.assert_frame_equal(chunked, pd.read_csv(tmp_path / "expected.csv"), check_exact=False, rtol=1e-12)
