"""The hostile-input findings of issue 14 (F1-F14), each from the command line.

Each test feeds the input a careless or hostile user gave and asserts the exact value that must
survive or the one-line message that must appear. Inputs are the invented demo scenario's files
(``small_demo``) or small invented tables written here.
"""
from __future__ import annotations

import pandas as pd
import pytest

from titlematch.cli import main


def run(capsys, *argv) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def coded(small_demo_coded):
    return small_demo_coded


# ------------------------------------------------------------------------------------------- F7
def test_f7_feedback_refuses_edited_counts_added_rows_and_two_codes(coded, small_demo, tmp_path, capsys):
    queue = pd.read_excel(coded / "queue.xlsx", dtype=str, keep_default_na=False)
    assert len(queue) >= 4
    catalogue = pd.read_csv(small_demo["data"] / "classification.csv", dtype=str)
    good, other = catalogue["code"].iloc[0], catalogue["code"].iloc[1]
    issued_records = queue["records"].tolist()
    queue["coder_code"] = good
    queue.loc[0, "records"] = "100000"                      # an edited count
    queue.loc[1, "records"] = "1e9"                         # a count that would fill memory
    twice = queue.iloc[[2]].assign(coder_code=other)       # a second code for one title
    added = queue.iloc[[3]].assign(queue_id="99999", title_normalized="made up title")
    edited = pd.concat([queue, twice, added], ignore_index=True)
    edited.to_excel(tmp_path / "returned.xlsx", index=False)
    code, out, err = run(capsys, "feedback", tmp_path / "returned.xlsx", "--dictionary", small_demo["dictionary"],
                         "--issued", coded / "queue.issued.csv", "--out", tmp_path / "dict2", "--quiet")
    assert code == 0, err
    rejects = pd.read_csv(tmp_path / "dict2" / "rejects.csv", dtype=str, keep_default_na=False)
    reasons = dict(zip(rejects["row"].astype(int), rejects["reason"]))
    # spreadsheet rows count the header as row 1: queue row i is sheet row i + 2
    assert reasons[2].startswith(f"records changed: queue_id 1 was issued with {issued_records[0]} records")
    assert reasons[3].startswith("records changed")
    assert reasons[4].startswith("one code per title") and reasons[len(queue) + 2].startswith("one code per title")
    assert reasons[len(queue) + 3] == "queue_id 99999 was not in the queue as issued (an added row?)"
    decided = len(queue) - 3
    expected = sum(int(r) for r in issued_records[3:])
    assert f"decisions {decided:,}" in out and f"records added {expected:,}" in out


def test_f7_feedback_without_the_issued_queue_is_refused(coded, small_demo, tmp_path, capsys):
    (tmp_path / "renamed.xlsx").write_bytes((coded / "queue.xlsx").read_bytes())
    code, out, err = run(capsys, "feedback", tmp_path / "renamed.xlsx", "--dictionary", small_demo["dictionary"],
                         "--out", tmp_path / "dict2", "--quiet")
    assert code == 2
    assert err.strip() == (f"titlematch feedback: error: {tmp_path / 'renamed.xlsx'}: cannot check it against the "
                           f"queue as issued: {tmp_path / 'renamed.issued.csv'} not found; give --issued FILE "
                           "(written by 'titlematch queue' beside the queue)")
    assert not (tmp_path / "dict2").exists()


# ------------------------------------------------------------------------- small helpers
def write_csv(path, text: str, encoding: str = "utf-8"):
    path.write_bytes(text.encode(encoding))
    return path


def normalize(capsys, source, out, column="title"):
    return run(capsys, "normalize", source, "--kind", "title", "--column", column, "--out", out, "--quiet")


def read_out(path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False)


# ------------------------------------------------------------------------------------------- F1
def test_f1_parquet_nullable_integer_ids_come_out_digit_for_digit(tmp_path, capsys, small_demo):
    ids = pd.array([12345678901234567, 12345678901234568, None, 7], dtype="Int64")
    pd.DataFrame({"id": ids, "title": ["cook", "nurse", "driver", "cashier"]}).to_parquet(tmp_path / "in.parquet")
    code, out, err = normalize(capsys, tmp_path / "in.parquet", tmp_path / "n.csv")
    assert code == 0, err
    assert read_out(tmp_path / "n.csv")["id"].tolist() == ["12345678901234567", "12345678901234568", "", "7"]
    code, out, err = run(capsys, "code", tmp_path / "in.parquet", "--dictionary", small_demo["dictionary"],
                         "--out", tmp_path / "c.parquet", "--quiet")
    assert code == 0, err
    assert pd.read_parquet(tmp_path / "c.parquet")["id"].tolist() == ["12345678901234567", "12345678901234568",
                                                                      "", "7"]


# ------------------------------------------------------------------------------------------- F2
def test_f2_utf8_file_with_one_cp1252_line_keeps_its_utf8_rows(tmp_path, capsys, caplog):
    good = "".join(f"{i},albañil {i}\n" for i in range(1, 20)).encode("utf-8")
    (tmp_path / "in.csv").write_bytes(b"id,title\n" + good + "20,alba\xf1il\n".encode("latin-1"))
    code, out, err = normalize(capsys, tmp_path / "in.csv", tmp_path / "n.csv")
    assert code == 0, err
    kept = read_out(tmp_path / "n.csv")
    assert kept["title"].tolist() == [f"albañil {i}" for i in range(1, 20)]
    rejects = read_out(tmp_path / "n.rejects.csv")
    assert rejects[["row", "reason", "value"]].values.tolist() == [
        ["21", "cannot decode as utf-8: byte 0xf1 at position 7", "20,alba\\xf1il"]]
    assert "encoding utf-8 (detected), 1 line(s) not UTF-8 set aside in the rejects" in out
    assert any(r.levelname == "WARNING" and "1 line(s) not UTF-8" in r.getMessage()
               for r in caplog.records)  # logged at the default verbosity too


def test_f2_a_cp1252_file_is_still_read_as_cp1252(tmp_path, capsys):
    write_csv(tmp_path / "in.csv", "id,title\n1,albañil\n2,peón\n3,cook\n", "cp1252")
    code, out, err = normalize(capsys, tmp_path / "in.csv", tmp_path / "n.csv")
    assert code == 0, err
    assert read_out(tmp_path / "n.csv")["title"].tolist() == ["albañil", "peón", "cook"]
    assert "encoding cp1252 (detected)" in out


# ------------------------------------------------------------------------------------------- F4
def test_f4_queue_and_disagreements_refuse_to_overwrite_their_input(coded, small_demo, tmp_path, capsys):
    before = (coded / "coded.csv").read_bytes()
    code, out, err = run(capsys, "queue", coded / "coded.csv", "--out", coded / "coded.csv", "--quiet")
    assert code == 2
    assert err.strip() == (f"titlematch queue: error: --out {coded / 'coded.csv'} is the input {coded / 'coded.csv'}: "
                           "the output would overwrite the input; choose another --out")
    gold = tmp_path / "gold.csv"
    gold.write_bytes((small_demo["data"] / "gold_2025.csv").read_bytes())
    gold_before = gold.read_bytes()
    code, out, err = run(capsys, "disagreements", gold, "--dictionary", small_demo["dictionary"], "--model",
                         small_demo["model"], "--manual-col", "manual_code", "--out", gold, "--quiet")
    assert code == 2 and "the output would overwrite the input" in err
    assert (coded / "coded.csv").read_bytes() == before and gold.read_bytes() == gold_before
    # an artefact directory holding an input is refused too: feedback --out the dictionary it reads
    code, out, err = run(capsys, "feedback", coded / "queue.xlsx", "--dictionary", small_demo["dictionary"],
                         "--out", small_demo["dictionary"], "--quiet")
    assert code == 2 and f"--out {small_demo['dictionary']} is the input" in err


# ------------------------------------------------------------------------------------------- F5
def test_f5_a_pandas_index_column_in_parquet_is_kept(tmp_path, capsys):
    frame = pd.DataFrame({"title": ["cook", "nurse"]}, index=pd.Index(["007", "12345678901234567"], name="record_id"))
    frame.to_parquet(tmp_path / "in.parquet")
    code, out, err = normalize(capsys, tmp_path / "in.parquet", tmp_path / "n.csv")
    assert code == 0, err
    assert read_out(tmp_path / "n.csv")["record_id"].tolist() == ["007", "12345678901234567"]


# ------------------------------------------------------------------------------------------- F6
def test_f6_a_user_column_named_like_a_working_column_is_plain_data(tmp_path, capsys):
    write_csv(tmp_path / "in.csv", "id,title,_reject_reason,_reject_column\n1,cook,keep me,x\n2,nurse,,\n")
    code, out, err = normalize(capsys, tmp_path / "in.csv", tmp_path / "n.csv")
    assert code == 0, err
    written = read_out(tmp_path / "n.csv")
    assert written["_reject_reason"].tolist() == ["keep me", ""]
    assert written["_reject_column"].tolist() == ["x", ""]
    assert "rejected 0" in out


# -------------------------------------------------------------------------------------- F8 F9 F10
def test_f8_f9_f10_code_writes_a_safe_xlsx_and_counts_its_decisions(tmp_path, capsys, caplog, small_demo):
    import openpyxl

    pd.DataFrame({"id": ["1", "2", "3"], "title": ['=HYPERLINK("http://example.invalid","x")', "cook\x0bnights",
                                                   "=cmd|' /C calc'!A0"]}).to_csv(tmp_path / "in.csv", index=False)
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"], "--model",
                         small_demo["model"], "--out", tmp_path / "x.xlsx", "--quiet")
    assert code == 0, err
    assert "accepted" in out and "referred" in out  # F10: the counts are read from the .xlsx written
    sheet = openpyxl.load_workbook(tmp_path / "x.xlsx").active
    header = [c.value for c in sheet[1]]
    titles = [sheet.cell(row=r, column=header.index("title") + 1) for r in (2, 3, 4)]
    assert [c.value for c in titles] == ['\'=HYPERLINK("http://example.invalid","x")', "cook\\x0bnights",
                                         "'=cmd|' /C calc'!A0"]
    assert all(c.data_type == "s" for c in titles)  # text, never a formula
    assert "2 cell(s) that a spreadsheet would run as a formula written with a leading apostrophe, 1 cell(s) with " \
           "control characters .xlsx cannot hold written as \\xNN (first: row 2, column 'title')" in caplog.text


def test_f8_f9_link_and_queue_write_safe_xlsx(tmp_path, capsys, small_demo, coded):
    import openpyxl

    register = small_demo["data"] / "register.csv"
    records = pd.read_csv(small_demo["data"] / "establishments_2025.csv", dtype=str, keep_default_na=False).head(30)
    name = [c for c in records.columns if "name" in c][0]
    records.loc[0, name] = '=HYPERLINK("http://example.invalid","x")'
    records.loc[1, name] = "Lakeshore\x0bBakery"
    records.to_csv(tmp_path / "est.csv", index=False)
    code, out, err = run(capsys, "link", tmp_path / "est.csv", "--register", register, "--out", tmp_path / "l.xlsx",
                         "--quiet")
    assert code == 0, err
    linked = pd.read_excel(tmp_path / "l.xlsx", dtype=str, keep_default_na=False)
    assert linked[name].tolist()[:2] == ['\'=HYPERLINK("http://example.invalid","x")', "Lakeshore\\x0bBakery"]
    # the queue: a title with a control character
    coded_rows = read_out(coded / "coded.csv")
    coded_rows.loc[coded_rows["decision"] == "refer", "title_normalized"] = "cook\x0bnights"
    coded_rows.to_csv(tmp_path / "coded.csv", index=False)
    code, out, err = run(capsys, "queue", tmp_path / "coded.csv", "--out", tmp_path / "q.xlsx", "--quiet")
    assert code == 0, err
    assert openpyxl.load_workbook(tmp_path / "q.xlsx").active["B2"].value == "cook\\x0bnights"


# ------------------------------------------------------------------------------------------ F12
@pytest.fixture(scope="module")
def register_index(small_demo, tmp_path_factory):
    path = tmp_path_factory.mktemp("register") / "index"
    assert main(["register", str(small_demo["data"] / "register.csv"), "--out", str(path), "--quiet"]) == 0
    return path


def test_f12_header_only_files_are_named(tmp_path, capsys, register_index):
    write_csv(tmp_path / "est.csv", "record_id,name,address,city,postcode\n")
    write_csv(tmp_path / "reg.csv", "register_id,name,address,city,postcode\n")
    code, out, err = run(capsys, "link", tmp_path / "est.csv", "--register", register_index, "--out", tmp_path / "l.csv")
    assert (code, err.strip()) == (2, f"titlematch link: error: {tmp_path / 'est.csv'}: no records to link "
                                      "(the file has a header only, or every row is refused)")
    code, out, err = run(capsys, "register", tmp_path / "reg.csv", "--out", tmp_path / "ri")
    assert (code, err.strip()) == (2, f"titlematch register: error: {tmp_path / 'reg.csv'}: no register rows to "
                                      "index (the file has a header only)")
    code, out, err = run(capsys, "link", tmp_path / "est.csv", "--dedupe", "--out", tmp_path / "d.csv")
    assert (code, err.strip()) == (2, f"titlematch link: error: {tmp_path / 'est.csv'}: no records to search for "
                                      "duplicates (the file has a header only)")


@pytest.mark.parametrize("value", ["nan", "inf", "-1", "1.5", "high"])
def test_f12_f14_threshold_must_be_a_number_from_0_to_1(tmp_path, capsys, value):
    from titlematch.cli import build_parser

    with pytest.raises(SystemExit) as stop:
        build_parser().parse_args(["code", "in.csv", "--dictionary", "d", "--out", "o.csv", f"--threshold={value}"])
    assert stop.value.code == 2
    assert capsys.readouterr().err == (f"titlematch code: error: argument --threshold: expected a number from 0 to 1, "
                                       f"got {value!r} (see 'titlematch code --help')\n")


def test_f12_title_and_context_the_same_column(tmp_path, capsys, small_demo):
    write_csv(tmp_path / "in.csv", "id,title\n1,cook\n")
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"],
                         "--out", tmp_path / "o.csv", "--title-col", "title", "--context-col", "title")
    assert (code, err.strip()) == (2, "titlematch code: error: --title-col and --context-col both name the column "
                                      "'title'; the context must be another column (or one the file does not have)")


def test_f12_an_unwritable_output_is_named(tmp_path, capsys, small_demo):
    write_csv(tmp_path / "in.csv", "id,title\n1,cook\n")
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"],
                         "--out", "/proc/titlematch-test/x.csv")
    assert code == 2
    assert err.startswith("titlematch code: error: /proc/titlematch-test") and err.count("\n") == 1
    assert "Traceback" not in err


def test_f12_parquet_binary_cell_that_is_not_utf8_goes_to_rejects(tmp_path, capsys):
    import pyarrow as pa
    import pyarrow.parquet as pq

    pq.write_table(pa.table({"id": ["1", "2"], "title": pa.array([b"cook", b"bad \xff\xfe"], pa.binary())}),
                   tmp_path / "in.parquet")
    code, out, err = normalize(capsys, tmp_path / "in.parquet", tmp_path / "n.csv")
    assert code == 0, err
    assert read_out(tmp_path / "n.csv")["title"].tolist() == ["cook"]
    rejects = read_out(tmp_path / "n.rejects.csv")
    assert rejects[["row", "column", "reason", "value"]].values.tolist() == [
        ["2", "title", "binary cell is not UTF-8 text (byte 0xff at position 4)", "bad \\xff\\xfe"]]


# ------------------------------------------------------------------------------------------ F13
def _copy_model(small_demo, tmp_path):
    import shutil

    target = tmp_path / "model"
    shutil.copytree(small_demo["model"], target)
    return target


def _edit_manifest(directory, change):
    import json

    path = directory / "manifest.json"
    manifest = json.loads(path.read_text())
    change(manifest)
    path.write_text(json.dumps(manifest))


@pytest.mark.parametrize("edit, message", [
    (lambda m: m["files"].pop(sorted(m["files"])[0]), "checksum mismatch; the manifest (its file list or settings) "
                                                      "was altered after it was saved"),
    (lambda m: m.update(files=sorted(m["files"])), "checksum mismatch"),
    (lambda m: m["meta"].update(params="junk"), "checksum mismatch"),
    (lambda m: m["meta"].update(threshold=0), "checksum mismatch"),
])
def test_f13_an_edited_manifest_is_one_line(tmp_path, capsys, small_demo, edit, message):
    model = _copy_model(small_demo, tmp_path)
    _edit_manifest(model, edit)
    write_csv(tmp_path / "in.csv", "id,title\n1,cook\n")
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"],
                         "--model", model, "--out", tmp_path / "o.csv")
    assert code == 2 and err.count("\n") == 1 and message in err, err
    assert not (tmp_path / "o.csv").exists()


def test_f13_a_re_signed_array_of_the_wrong_shape_is_one_line(tmp_path, capsys, small_demo):
    import numpy as np

    from titlematch.io.artefact import manifest_checksum
    from titlematch.io.files import file_sha256

    model = _copy_model(small_demo, tmp_path)
    name = sorted(p.name for p in model.glob("*.npy"))[0]
    np.save(model / name, np.zeros((3, 7)))

    def re_sign(manifest):  # re-signed in full, as someone who knows the format would
        manifest["files"][name]["sha256"] = file_sha256(model / name)
        manifest["checksum"] = manifest_checksum(manifest)
    _edit_manifest(model, re_sign)
    write_csv(tmp_path / "in.csv", "id,title\n1,cook\n")
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"],
                         "--model", model, "--out", tmp_path / "o.csv")
    assert code == 2 and err.count("\n") == 1
    assert f"{model / name}: shape [3, 7]; the manifest says" in err


def test_f13_a_re_signed_manifest_without_a_file_is_one_line(tmp_path, capsys, small_demo):
    from titlematch.io.artefact import manifest_checksum

    model = _copy_model(small_demo, tmp_path)
    gone = sorted(n for n in __import__("json").loads((model / "manifest.json").read_text())["files"]
                  if n.startswith("calibration_"))[0]

    def drop(manifest):
        manifest["files"].pop(gone)
        manifest["checksum"] = manifest_checksum(manifest)
    _edit_manifest(model, drop)
    write_csv(tmp_path / "in.csv", "id,title\n1,cook\n")
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"],
                         "--model", model, "--out", tmp_path / "o.csv")
    assert code == 2 and err.count("\n") == 1
    assert f"the manifest lists no array {gone[:-4]!r}" in err


# ------------------------------------------------------------------------------------------ F14
def test_f14_changed_options_refusal_is_short_and_names_the_option(tmp_path, capsys, small_demo):
    write_csv(tmp_path / "in.csv", "id,title\n1,cook\n")
    base = ["code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"], "--out", tmp_path / "o.csv",
            "--quiet"]
    assert run(capsys, *base, "--keep-run")[0] == 0
    code, out, err = run(capsys, *base, "--model", small_demo["model"])
    assert code == 2 and len(err) < 300
    assert "holds a finished run with different options (model); rerun with --restart" in err


def test_f14_utf16_without_a_byte_order_mark_is_named(tmp_path, capsys):
    (tmp_path / "in.csv").write_bytes("id,title\n1,cook\n2,nurse\n".encode("utf-16-le"))
    code, out, err = normalize(capsys, tmp_path / "in.csv", tmp_path / "n.csv")
    assert (code, err.strip()) == (2, f"titlematch normalize: error: {tmp_path / 'in.csv'}: the file looks like "
                                      "UTF-16 (little-endian) without a byte-order mark (a NUL byte beside every "
                                      "letter); save it as UTF-8 and try again")


def test_f14_a_missing_confidence_is_never_accepted():
    from titlematch.confidence.routing import route

    assert route([float("nan"), 0.0], 0.0).tolist() == ["refer", "accept"]
    with pytest.raises(ValueError, match="from 0 to 1"):
        route([0.5], -1)


# ------------------------------------------------------------------------------------------- F3
def test_f3_an_input_code_column_is_never_overwritten(tmp_path, capsys, small_demo):
    gold = pd.read_csv(small_demo["data"] / "gold_2025.csv", dtype=str, keep_default_na=False).head(40)
    gold.to_csv(tmp_path / "gold.csv", index=False)
    before = (tmp_path / "gold.csv").read_bytes()
    args = ["code", tmp_path / "gold.csv", "--dictionary", small_demo["dictionary"], "--quiet"]
    code, out, err = run(capsys, *args, "--out", tmp_path / "o.csv")
    assert code == 2 and "already has column(s) code" in err and "--output-prefix" in err
    assert not (tmp_path / "o.csv").exists()
    code, out, err = run(capsys, *args, "--out", tmp_path / "p.csv", "--output-prefix", "machine_")
    assert code == 0, err
    written = read_out(tmp_path / "p.csv")
    assert written["code"].tolist() == gold["code"].tolist()          # the manual codes, every one
    assert "machine_code" in written.columns
    assert (tmp_path / "gold.csv").read_bytes() == before


def test_f12_title_col_beside_a_title_column_and_a_clashing_context(tmp_path, capsys, small_demo):
    write_csv(tmp_path / "in.csv", "id,title,job_title,context\n1,nurse,truck driver,trucking\n2,cook,cashier,\n")
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"],
                         "--out", tmp_path / "o.csv", "--title-col", "job_title", "--quiet")
    assert code == 0, err
    written = read_out(tmp_path / "o.csv")
    assert written[["title", "job_title", "context"]].values.tolist() == [["nurse", "truck driver", "trucking"],
                                                                          ["cook", "cashier", ""]]
    code, out, err = run(capsys, "code", tmp_path / "in.csv", "--dictionary", small_demo["dictionary"],
                         "--out", tmp_path / "o2.csv", "--context-col", "job_title", "--quiet")
    assert code == 0, err
    assert read_out(tmp_path / "o2.csv")["job_title"].tolist() == ["truck driver", "cashier"]
