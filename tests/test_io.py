"""Reading hostile tables: encodings, quoting, ragged rows, NUL bytes, long cells, chunking and resuming.

Outside references used here:
- RFC 4180 ("Common Format and MIME Type for CSV Files"), section 2: quoted fields may hold
  line breaks, commas and doubled quotes; its worked examples are reproduced below.
- The Unicode Consortium's mapping table for Windows code page 1252 (CP1252.TXT): byte 0xE9 is
  U+00E9 (e acute), 0x80 is U+20AC (euro sign), 0x81/0x8D/0x8F/0x90/0x9D are undefined.
- The Unicode Standard, section 23.8: the UTF-8 byte-order mark is EF BB BF.
- Python's csv module and pandas.read_csv as reference readers for well-formed files.
"""
from __future__ import annotations

import csv
import io
import tempfile
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from titlematch import io as tio
from titlematch.io import (MAX_CELL_CHARS, ROW_COLUMN, InputError, ReadPosition, Rejects, TableReader,
                           detect_file_encoding, iter_table_chunks, read_table)


def write(tmp_path: Path, data: bytes, name: str = "t.csv") -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


def read_all(path, **kw):
    rejects = Rejects()
    frame = read_table(path, rejects=rejects, **kw)
    return frame, rejects.frame()


# -- RFC 4180 and row numbers ------------------------------------------------------------------------
def test_rfc4180_examples_quoted_line_break_and_doubled_quote(tmp_path):
    # RFC 4180 section 2, rules 6 and 7: "aaa","b CRLF bb","ccc" and "aaa","b""bb","ccc".
    data = (b'h1,h2,h3\r\n"aaa","b\r\nbb","ccc"\r\nzzz,yyy,xxx\r\n"aaa","b""bb","ccc"\r\n')
    frame, rejects = read_all(write(tmp_path, data))
    assert frame["h2"].tolist() == ["b\r\nbb", "yyy", 'b"bb']
    # the row number is the line where the record starts: header line 1, the two-line record 2-3
    assert frame[ROW_COLUMN].tolist() == [2, 4, 5]
    assert rejects.empty


def test_row_numbers_after_several_multiline_records_across_chunks(tmp_path):
    body = "".join(f'{i},"line one\nline two of {i}"\n' for i in range(1, 8))
    path = write(tmp_path, ("id,text\n" + body).encode())
    expected = [2 + 2 * k for k in range(7)]
    assert read_table(path)[ROW_COLUMN].tolist() == expected
    frames = list(iter_table_chunks(path, 3))
    assert [len(f) for f in frames] == [3, 3, 1]
    assert pd.concat(frames)[ROW_COLUMN].tolist() == expected


def test_line_endings_lf_crlf_and_cr_only(tmp_path):
    for sep in (b"\n", b"\r\n", b"\r"):
        path = write(tmp_path, sep.join([b"a,b", b"1,x", b"2,y", b""]), f"e{len(sep)}{sep[0]}.csv")
        frame = read_table(path)
        assert frame[["a", "b"]].values.tolist() == [["1", "x"], ["2", "y"]]
        assert frame[ROW_COLUMN].tolist() == [2, 3]


# -- encodings -------------------------------------------------------------------------------------
def test_cp1252_bytes_decode_as_cp1252(tmp_path):
    # CP1252.TXT: 0xE9 -> U+00E9, 0x80 -> U+20AC
    path = write(tmp_path, b"title,pay\nCaf\xe9 manager,\x80 20\n")
    assert detect_file_encoding(path) == "cp1252"
    frame = read_table(path)
    assert frame["title"].tolist() == ["Café manager"]
    assert frame["pay"].tolist() == ["€ 20"]


def test_utf8_bom_is_removed_from_the_first_header(tmp_path):
    # Unicode Standard 23.8: the UTF-8 BOM is EF BB BF; it must not stick to the first column name
    path = write(tmp_path, b"\xef\xbb\xbftitle,code\r\nCaf\xc3\xa9,11-1011\r\n")
    assert detect_file_encoding(path) == "utf-8-sig"
    frame = read_table(path, required=["title"])
    assert list(frame.columns) == ["title", "code", ROW_COLUMN]
    assert frame["title"].tolist() == ["Café"]
    assert list(read_table(path, encoding="utf-8", required=["title"])["title"]) == ["Café"]


def test_undefined_cp1252_byte_falls_back_to_latin1(tmp_path):
    # CP1252.TXT leaves 0x81 undefined; latin-1 maps every byte, 0x81 -> U+0081
    path = write(tmp_path, b"title\nA\x81B\n")
    assert detect_file_encoding(path) == "latin-1"
    assert read_table(path)["title"].tolist() == ["A\x81B"]


def test_utf8_detected_over_the_whole_file_not_only_its_start(tmp_path):
    head = b"title\n" + b"plain ascii title\n" * 200_000  # more than one read block
    path = write(tmp_path, head + b"Caf\xe9\n")
    assert detect_file_encoding(path) == "cp1252"
    assert read_table(path)["title"].iloc[-1] == "Café"


def test_given_encoding_wins_and_undecodable_lines_are_rejected_not_fatal(tmp_path):
    path = write(tmp_path, b"title\nCaf\xc3\xa9\nCaf\xe9\nok\n")
    frame, rejects = read_all(path, encoding="utf-8")
    assert frame["title"].tolist() == ["Café", "ok"]
    assert rejects["row"].tolist() == [3]
    assert "cannot decode as utf-8" in rejects["reason"].iloc[0]


def test_utf16_and_unknown_encodings_are_refused_with_a_message(tmp_path):
    path = write(tmp_path, "title\nx\n".encode("utf-16"))
    with pytest.raises(InputError, match="UTF-16"):
        read_table(path)
    plain = write(tmp_path, b"title\nx\n", "plain.csv")
    with pytest.raises(InputError, match="unknown encoding"):
        read_table(plain, encoding="no-such-codec")
    with pytest.raises(InputError, match="not supported"):
        read_table(plain, encoding="utf-16")


# -- hostile rows ----------------------------------------------------------------------------------
def test_hostile_rows_go_to_rejects_with_row_and_reason(tmp_path):
    long_cell = "x" * (MAX_CELL_CHARS + 5)
    data = ("id,title\n"
            "1,clerk\n"
            "2,too,many\n"           # ragged
            '3,"bad"quote\n'         # text after a closing quote
            "4,nul\x00byte\n"         # NUL byte
            f"5,{long_cell}\n"       # over-long cell: truncated, kept, flagged
            "6\n"                    # too few fields
            "\n"                     # blank line: not a record
            "8,driver\n").encode()
    frame, rejects = read_all(write(tmp_path, data))
    assert frame["id"].tolist() == ["1", "5", "8"]
    assert frame[ROW_COLUMN].tolist() == [2, 6, 9]
    assert frame["title"].iloc[1] == "x" * MAX_CELL_CHARS
    by_row = dict(zip(rejects["row"], rejects["reason"]))
    assert set(by_row) == {3, 4, 5, 6, 7}
    assert "3 fields" in by_row[3] and "1 fields" in by_row[7]
    assert "expected after" in by_row[4]
    assert "NUL" in by_row[5]
    assert "truncated" in by_row[6]


def test_stray_quote_does_not_swallow_the_rows_after_it(tmp_path):
    data = b'id,title\n1,"unclosed title\n2,clerk\n3,driver\n4,"closed",\n5,cook\n'
    frame, rejects = read_all(write(tmp_path, data))
    assert rejects["row"].tolist() == [2, 5]  # the stray-quote line, and a genuinely ragged row
    assert frame["id"].tolist() == ["2", "3", "5"]
    assert frame[ROW_COLUMN].tolist() == [3, 4, 6]


def test_overlong_physical_line_is_set_aside_without_reading_it_whole(tmp_path):
    big = b"9," + b"y" * (tio.MAX_LINE_BYTES + 10) + b"\n"  # spans several read blocks
    data = b"id,title\n1,a\n" + big + b"3,c\r\n"
    frame, rejects = read_all(write(tmp_path, data))
    assert frame["id"].tolist() == ["1", "3"]
    assert frame[ROW_COLUMN].tolist() == [2, 4]
    assert rejects["row"].tolist() == [3]
    assert "longer than" in rejects["reason"].iloc[0]


def test_duplicate_header_names_are_kept_apart_and_row_column_name_is_reserved(tmp_path):
    frame = read_table(write(tmp_path, b"note,note,id\na,b,1\n"))
    assert list(frame.columns) == ["note", "note.1", "id", ROW_COLUMN]
    with pytest.raises(InputError, match="reserved"):
        read_table(write(tmp_path, b"_row,id\n1,2\n", "r.csv"))


def test_missing_and_empty_files_name_the_file(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_table(tmp_path / "absent.csv")
    empty = write(tmp_path, b"", "empty.csv")
    with pytest.raises(InputError, match="empty.csv: the file is empty"):
        read_table(empty)
    with pytest.raises(InputError, match=r"missing column\(s\) 'title'; the file has: a, b"):
        read_table(write(tmp_path, b"a,b\n1,2\n", "ab.csv"), required=["title"])


# -- Parquet and spreadsheets ----------------------------------------------------------------------
def test_parquet_chunks_keep_row_numbers_across_row_groups_and_resume(tmp_path):
    frame = pd.DataFrame({"title": [f"t{i}" for i in range(1, 26)], "n": range(1, 26)})
    frame.loc[7, "title"] = "nul\x00"
    frame.loc[11, "n"] = None
    path = tmp_path / "t.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=True), path, row_group_size=6)
    reader = TableReader(path, chunk_rows=4)
    chunks = list(reader.chunks())
    assert [c.records for c in chunks] == [4] * 6 + [1]
    rows = pd.concat([c.frame for c in chunks])[ROW_COLUMN].tolist()
    assert rows == [r for r in range(1, 26) if r != 8]
    assert "__index_level_0__" not in reader.columns
    assert pd.concat([c.frame for c in chunks])["n"].tolist()[10] == ""  # missing -> "" (row 12)
    assert [r["row"] for c in chunks for r in c.rejects.frame().to_dict("records")] == [8]
    resumed = list(reader.chunks(start=chunks[2].end, first_index=3))
    assert [c.index for c in resumed] == [3, 4, 5, 6]
    for a, b in zip(resumed, chunks[3:]):
        pd.testing.assert_frame_equal(a.frame, b.frame)


def test_xlsx_rows_are_numbered_below_the_header(tmp_path):
    path = tmp_path / "t.xlsx"
    pd.DataFrame({"title": ["clerk", "cook", "driver"]}).to_excel(path, index=False)
    chunks = list(TableReader(path, chunk_rows=2).chunks())
    assert pd.concat([c.frame for c in chunks])[ROW_COLUMN].tolist() == [2, 3, 4]


def test_xlsx_formula_without_a_saved_value_is_set_aside_not_read_as_empty(tmp_path):
    # Office Open XML (ECMA-376) keeps a formula (<f>) and its last computed value (<v>) apart; a file
    # written by a library holds the formula alone, which would read as an empty cell. Found by
    # hypothesis in tests/test_roundtrip_property.py ("=0" typed as a note).
    from openpyxl import Workbook
    book = Workbook()
    sheet = book.active
    sheet.append(["id", "title", "note"])
    sheet.append(["1", "clerk", "=0"])          # a formula to the file, with no value saved
    sheet.append(["2", "cook", "fine"])
    sheet.append(["3", "=A3&\"x\"", ""])
    sheet.append(["4", "driver", "'=0"])      # an apostrophe is plain text
    book.save(tmp_path / "t.xlsx")
    rejects = Rejects()
    frame = tio.read_table(tmp_path / "t.xlsx", rejects=rejects)
    assert frame[ROW_COLUMN].tolist() == [3, 5]
    assert frame["title"].tolist() == ["cook", "driver"] and frame["note"].tolist() == ["fine", "'=0"]
    table = rejects.frame()
    assert table["row"].tolist() == [2, 4] and table["column"].tolist() == ["note", "title"]
    assert table["value"].tolist() == ["=0", '=A3&"x"']
    assert table["reason"].str.startswith("formula with no saved value").all()


# -- properties (hypothesis) -----------------------------------------------------------------------
plain_cell = st.text(alphabet=st.characters(blacklist_characters=',"\r\n\x00', blacklist_categories=("Cs",)),
                     max_size=8)


@settings(max_examples=150, deadline=None)
@given(st.binary(max_size=400))
def test_arbitrary_bytes_never_crash_and_every_record_is_accounted_for(data):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "fuzz.csv"
        path.write_bytes(b"id,title\n" + data)
        reader = TableReader(path, chunk_rows=3)
        chunks = list(reader.chunks())
        lines = max(len(data.splitlines()) + 1, 1)
        kept, set_aside = [], set()
        for chunk in chunks:
            rows = chunk.frame[ROW_COLUMN].tolist()
            noted = {r for _, r in chunk.rejects.rows()}
            kept += rows
            set_aside |= noted - set(rows)
            assert chunk.records == len(rows) + len(noted - set(rows))
        assert len(kept) == len(set(kept)) and not set(kept) & set_aside
        assert all(2 <= r <= lines for r in set(kept) | set_aside)
        assert sum(c.records for c in chunks) == len(kept) + len(set_aside)
        # the same file read whole gives the same rows
        whole, rejects = read_all(path)
        assert whole[ROW_COLUMN].tolist() == kept


row_kinds = st.sampled_from(["good", "good", "good", "ragged", "nul", "long", "blank"])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(row_kinds, plain_cell, plain_cell), min_size=1, max_size=25),
       st.integers(min_value=1, max_value=7), st.sampled_from(["\n", "\r\n"]))
def test_generated_hostile_rows_land_where_they_should(rows, chunk_rows, newline):
    lines, expect_kept, expect_rejected, expect_flagged = ["a,b"], [], {}, []
    for kind, a, b in rows:
        number = len(lines) + 1
        if kind == "blank":
            lines.append("")
            continue
        if kind == "ragged":
            lines.append(f"{a},{b},extra")
            expect_rejected[number] = "fields"
        elif kind == "nul":
            lines.append(f"{a}\x00,{b}")
            expect_rejected[number] = "NUL"
        elif kind == "long":
            lines.append(f"{a},{'z' * (MAX_CELL_CHARS + 1)}")
            expect_kept.append((number, a, "z" * MAX_CELL_CHARS))
            expect_flagged.append(number)
        else:
            lines.append(f"{a},{b}")
            expect_kept.append((number, a, b))
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "rows.csv"
        path.write_bytes((newline.join(lines) + newline).encode("utf-8"))
        rejects = Rejects()
        frame = pd.concat(list(iter_table_chunks(path, chunk_rows, rejects=rejects)) or
                          [read_table(path)])
        got = list(zip(frame[ROW_COLUMN], frame["a"], frame["b"]))
        assert got == expect_kept
        table = rejects.frame()
        reasons = dict(zip(table["row"], table["reason"]))
        assert set(reasons) == set(expect_rejected) | set(expect_flagged)
        for row, word in expect_rejected.items():
            assert word in reasons[row]
        for row in expect_flagged:
            assert "truncated" in reasons[row]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.lists(st.text(alphabet=st.characters(blacklist_categories=("Cs",),
                                                         blacklist_characters="\x00\r"), max_size=6),
                         min_size=3, max_size=3), max_size=12))
def test_well_formed_files_read_as_pandas_reads_them(records):
    # well-formed per RFC 4180 (written by Python's csv module); pandas.read_csv is the reference
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n", quoting=csv.QUOTE_MINIMAL)
    writer.writerow(["x", "y", "z"])
    writer.writerows(records)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "w.csv"
        path.write_text(buffer.getvalue(), encoding="utf-8")
        ours = read_table(path).drop(columns=[ROW_COLUMN])
        reference = pd.read_csv(path, dtype=str, keep_default_na=False, skip_blank_lines=False)
        assert ours.values.tolist() == reference.values.tolist() == [list(r) for r in records]


@settings(max_examples=40, deadline=None)
@given(st.lists(st.sampled_from(['1,a', '2,"b\nb"', '3,c,c', '4,"d"x', '5,\x00', '', '6,"unclosed']),
                min_size=1, max_size=20),
       st.integers(min_value=1, max_value=5))
def test_resuming_from_any_chunk_end_gives_the_same_chunks(lines, chunk_rows):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "r.csv"
        path.write_text("id,title\n" + "\n".join(lines) + "\n", encoding="utf-8")
        reader = TableReader(path, chunk_rows=chunk_rows)
        chunks = list(reader.chunks())
        for k, chunk in enumerate(chunks):
            rest = list(reader.chunks(start=chunk.end, first_index=k + 1))
            assert [c.index for c in rest] == [c.index for c in chunks[k + 1:]]
            for a, b in zip(rest, chunks[k + 1:]):
                pd.testing.assert_frame_equal(a.frame, b.frame)
                pd.testing.assert_frame_equal(a.rejects.frame(), b.rejects.frame())
                assert a.end == b.end


def test_read_position_round_trips_through_json_values():
    position = ReadPosition(records=12, line=30, offset=4096)
    assert ReadPosition.from_dict(position.to_dict()) == position
