"""Property: every input cell reappears unchanged in the output or its row is in the rejects (issue 14).

Random tables of ids and text (hypothesis) are written as CSV, Parquet or .xlsx, run through
``titlematch normalize`` from the command line, and every input row is looked up in the output
by its id: its cells must be there as written, or its row number must be in the rejects file.
"""
from __future__ import annotations

import csv
import re

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from hypothesis import HealthCheck, example, given, settings, strategies as st

from titlematch.cli import main

# .xlsx cannot hold these control characters at all (XML 1.0), so a spreadsheet never has them; a
# carriage return comes back as a line feed (XML end-of-line handling), so the inputs leave it out too
_XLSX_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0d\x0e-\x1f]")
text = st.text(st.characters(blacklist_categories=("Cs",)), max_size=12)
big_ints = st.one_of(st.none(), st.integers(-(2 ** 63), 2 ** 63 - 1))
rows = st.lists(st.tuples(big_ints, text, text), min_size=1, max_size=6)


def _check(tmp, source, ids_as_text, titles, notes, capsys):
    out, rejects = tmp / "out.csv", tmp / "out.rejects.csv"
    for stale in (out, rejects):
        stale.unlink(missing_ok=True)
    code = main(["normalize", str(source), "--kind", "title", "--column", "title", "--out", str(out), "--quiet",
                 "--restart"])
    capsys.readouterr()
    assert code == 0
    written = pd.read_csv(out, dtype=str, keep_default_na=False)
    refused = set(pd.read_csv(rejects, dtype=str, keep_default_na=False)["row"].astype(int)) \
        if rejects.exists() else set()
    first = 2 if source.suffix == ".xlsx" else 1
    by_key = {k: (t, n) for k, t, n in zip(written["key"], written["title"], written["note"])}
    for i, (ident, title, note) in enumerate(zip(ids_as_text, titles, notes)):
        row = i + first
        if row in refused:
            continue
        assert by_key[f"k{i}"] == (title, note), (i, ident, title, note)
        assert written.loc[written["key"] == f"k{i}", "id"].item() == ident


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rows)
def test_parquet_cells_survive_or_are_rejected(tmp_path_factory, capsys, data):
    tmp = tmp_path_factory.mktemp("pq")
    ids = pa.array([r[0] for r in data], pa.int64())
    table = pa.table({"key": [f"k{i}" for i in range(len(data))], "id": ids,
                      "title": [r[1] for r in data], "note": [r[2] for r in data]})
    pq.write_table(table, tmp / "in.parquet")
    _check(tmp, tmp / "in.parquet", ["" if r[0] is None else str(r[0]) for r in data],
           [r[1] for r in data], [r[2] for r in data], capsys)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rows)
def test_csv_cells_survive_or_are_rejected(tmp_path_factory, capsys, data):
    tmp = tmp_path_factory.mktemp("csv")
    ids = ["" if r[0] is None else f"{r[0]:021d}" for r in data]  # leading zeros and long numbers as written
    frame = pd.DataFrame({"key": [f"k{i}" for i in range(len(data))], "id": ids,
                          "title": [r[1] for r in data], "note": [r[2] for r in data]})
    # every cell quoted: a lone carriage return left unquoted would end the line for any reader
    frame.to_csv(tmp / "in.csv", index=False, quoting=csv.QUOTE_ALL)
    # a CSV row number is the line where the record starts: count the lines of the quoted cells before it
    _check_csv(tmp, frame, capsys)


def _check_csv(tmp, frame, capsys):
    out, rejects = tmp / "out.csv", tmp / "out.rejects.csv"
    code = main(["normalize", str(tmp / "in.csv"), "--kind", "title", "--column", "title", "--out", str(out),
                 "--quiet", "--restart"])
    capsys.readouterr()
    assert code == 0
    written = pd.read_csv(out, dtype=str, keep_default_na=False).set_index("key")
    refused = pd.read_csv(rejects, dtype=str, keep_default_na=False) if rejects.exists() else None
    for i, row in frame.iterrows():
        key = row["key"]
        if key in written.index:
            assert written.loc[key, ["id", "title", "note"]].tolist() == row[["id", "title", "note"]].tolist()
        else:  # not written: then it is in the rejects, by its line, with a reason
            assert refused is not None and len(refused) and (refused["reason"] != "").all(), (key, row.tolist())
    assert len(written) + (0 if refused is None else refused["row"].nunique()) >= len(frame)


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rows)
@example(data=[(None, "", "=0")])  # a formula with no saved value, once read as an empty cell
def test_xlsx_cells_survive_or_are_rejected(tmp_path_factory, capsys, data):
    tmp = tmp_path_factory.mktemp("xlsx")
    clean = [(i, _XLSX_ILLEGAL.sub("", t), _XLSX_ILLEGAL.sub("", n)) for i, t, n in data]
    ids = ["" if r[0] is None else str(r[0]) for r in clean]
    frame = pd.DataFrame({"key": [f"k{i}" for i in range(len(clean))], "id": ids,
                          "title": [r[1] for r in clean], "note": [r[2] for r in clean]})
    frame.to_excel(tmp / "in.xlsx", index=False)
    _check(tmp, tmp / "in.xlsx", ids, frame["title"].tolist(), frame["note"].tolist(), capsys)
