"""run_chunked: streaming, counts that add up, resuming after a crash, refusing a different run.

The steps here are small invented functions; what is checked is the runner's bookkeeping, against
the input file itself (every record is found exactly once in the output or the rejects) and against
pandas reading the whole output back.
"""
from __future__ import annotations

import fcntl
import json
import tempfile
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from titlematch.io import MAX_CELL_CHARS, InputError
from titlematch.runtime.runner import (REJECT_COLUMN_COLUMN, REJECT_REASON_COLUMN, RunConflict, default_run_dir,
                               options_digest, run_chunked)


def make_input(path: Path, rows: int = 60) -> Path:
    lines = ["id,title"]
    for i in range(1, rows + 1):
        if i % 17 == 0:
            lines.append(f"{i},ragged,row")
        elif i % 23 == 0:
            lines.append(f"{i},nul\x00byte")
        elif i % 29 == 0:
            lines.append(f"{i},{'w' * (MAX_CELL_CHARS + 3)}")
        else:
            lines.append(f"{i},title {i}")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def upper(frame: pd.DataFrame) -> pd.DataFrame:
    """Upper-cases the title; refuses ids divisible by 10 (a row-level refusal, column 'id')."""
    out = frame.assign(title_upper=frame["title"].str.upper(), length=frame["title"].str.len())
    refuse = frame["id"].astype(int) % 10 == 0
    out[REJECT_REASON_COLUMN] = refuse.map({True: "id ends in 0", False: ""})
    out[REJECT_COLUMN_COLUMN] = "id"
    return out


class Failing:
    """Fails on the chunk holding row ``fail_row``, as a crash would interrupt a run."""

    def __init__(self, fail_row: int) -> None:
        self.fail_row = fail_row

    def __call__(self, frame):
        if (frame["_row"] == self.fail_row).any():
            raise RuntimeError("simulated crash")
        return upper(frame)


def run(tmp_path, process=upper, out="out.csv", **kw):
    kw.setdefault("options", {"step": "upper"})
    kw.setdefault("chunk_rows", 8)
    return run_chunked(tmp_path / "in.csv", tmp_path / out, process, required=["title"], quiet=True, **kw)


def test_counts_add_up_and_every_record_is_in_output_or_rejects(tmp_path):
    make_input(tmp_path / "in.csv", 60)
    result = run(tmp_path)
    assert result.rows_in == 60 == result.rows_out + result.rows_rejected
    out = pd.read_csv(result.output, dtype=str, keep_default_na=False)
    rejects = pd.read_csv(result.rejects_path, dtype=str, keep_default_na=False)
    out_ids = [int(i) for i in out["id"]]
    assert out_ids == sorted(out_ids)  # order kept
    rejected_ids = {int(r) - 1 for r in rejects["row"]}  # id i sits on line i + 1
    flagged = {29, 58}
    assert set(out_ids) | rejected_ids == set(range(1, 61))
    assert set(out_ids) & rejected_ids == flagged  # kept with a note, counted once, as kept
    assert result.rows_flagged == 2
    assert len(rejected_ids - flagged) == result.rows_rejected
    assert set(rejects["file"]) == {str(tmp_path / "in.csv")}
    refused = rejects[rejects["reason"] == "id ends in 0"]
    assert refused["column"].tolist() == ["id"] * 6 and refused["value"].tolist() == [str(i) for i in range(10, 61, 10)]
    assert "_row" not in out.columns and REJECT_REASON_COLUMN not in out.columns
    assert out.loc[out["id"] == "29", "title"].str.len().tolist() == [MAX_CELL_CHARS]
    assert result.run_dir is None and not default_run_dir(result.output).exists()


def test_a_row_with_several_reasons_counts_once(tmp_path):
    long = "v" * (MAX_CELL_CHARS + 1)
    (tmp_path / "in.csv").write_text(f"id,title\n1,{long}\n2,{long}\n3,ok\n", encoding="utf-8")

    def refuse_first(frame):  # row 2 (id 1) already has a truncation note; now it is refused too
        return frame.assign(**{REJECT_REASON_COLUMN: (frame["id"] == "1").map({True: "refused", False: ""})})
    result = run_chunked(tmp_path / "in.csv", tmp_path / "o.csv", refuse_first, options={}, quiet=True)
    rejects = pd.read_csv(result.rejects_path, dtype=str, keep_default_na=False)
    assert rejects["row"].tolist() == ["2", "2", "3"]  # two reasons for row 2, one note for row 3
    assert (result.rows_in, result.rows_out, result.rows_rejected, result.rows_flagged) == (3, 2, 1, 1)


@pytest.mark.parametrize("out", ["out.csv", "out.parquet"])
def test_resume_after_a_crash_gives_the_same_bytes(tmp_path, out):
    make_input(tmp_path / "in.csv", 60)
    reference = run(tmp_path, out="ref" + Path(out).suffix)
    with pytest.raises(RuntimeError, match="simulated crash"):
        run(tmp_path, Failing(fail_row=40), out=out)  # row 40 is in the 5th chunk of 8
    run_dir = default_run_dir(tmp_path / out)
    journal = (run_dir / "journal.jsonl").read_text().splitlines()
    assert [json.loads(line)["chunk"] for line in journal] == [0, 1, 2, 3]
    result = run(tmp_path, out=out)
    assert result.resumed_from == 4 and result.chunks == 8
    assert (tmp_path / out).read_bytes() == reference.output.read_bytes()
    assert result.rejects_path.read_bytes() == reference.rejects_path.read_bytes()
    assert (result.rows_in, result.rows_out, result.rows_rejected) == \
        (reference.rows_in, reference.rows_out, reference.rows_rejected)


def test_torn_journal_line_orphan_and_damaged_chunk_files_are_redone(tmp_path):
    make_input(tmp_path / "in.csv", 60)
    reference = run(tmp_path, out="ref.csv")
    with pytest.raises(RuntimeError):
        run(tmp_path, Failing(fail_row=50))
    run_dir = default_run_dir(tmp_path / "out.csv")
    journal = run_dir / "journal.jsonl"
    lines = journal.read_bytes().splitlines(keepends=True)
    assert len(lines) == 6
    # a crash mid-append leaves half a line; a chunk written but never journaled is an orphan;
    # a chunk file changed after it was journaled no longer matches its checksum
    journal.write_bytes(b"".join(lines[:5]) + lines[5][:20])
    (run_dir / "chunk-000009.csv").write_bytes(b"half a chunk")
    damaged = run_dir / "chunk-000003.csv"
    damaged.write_bytes(damaged.read_bytes() + b"\0")
    result = run(tmp_path)
    assert result.resumed_from == 3
    assert result.output.read_bytes() == reference.output.read_bytes()


def test_refuses_to_resume_with_other_options_input_or_chunk_size(tmp_path):
    make_input(tmp_path / "in.csv", 60)
    with pytest.raises(RuntimeError):
        run(tmp_path, Failing(fail_row=30))
    with pytest.raises(RunConflict, match=r"different options.*--restart"):
        run(tmp_path, options={"step": "upper", "version": 2})
    with pytest.raises(RunConflict, match="--chunk-rows"):
        run(tmp_path, chunk_rows=9)
    make_input(tmp_path / "in.csv", 61)
    with pytest.raises(RunConflict, match="input file content"):
        run(tmp_path)
    result = run(tmp_path, restart=True)
    assert result.resumed_from == 0 and result.rows_in == 61


def test_keep_run_keeps_a_finished_run_and_a_rerun_only_reassembles(tmp_path):
    make_input(tmp_path / "in.csv", 30)
    first = run(tmp_path, out="out.parquet", keep_run=True)
    manifest = json.loads((first.run_dir / "manifest.json").read_text())
    assert manifest["state"] == "complete"
    assert manifest["rows_in"] == manifest["rows_out"] + manifest["rows_rejected"] == 30
    assert manifest["identity"]["options_sha256"] == options_digest({"step": "upper"})
    before = first.output.read_bytes()
    first.output.unlink()
    again = run(tmp_path, Failing(fail_row=2), out="out.parquet", keep_run=True)  # no chunk is recomputed
    assert again.resumed_from == again.chunks == 4
    assert again.output.read_bytes() == before
    table = pq.read_table(again.output)
    assert table.num_rows == first.rows_out and pq.ParquetFile(again.output).num_row_groups == 4


def test_same_inputs_give_byte_identical_outputs(tmp_path):
    make_input(tmp_path / "in.csv", 45)
    a = run(tmp_path, out="a.parquet")
    b = run(tmp_path, out="b.parquet")
    assert a.output.read_bytes() == b.output.read_bytes()
    back = pd.read_parquet(a.output)
    assert back["length"].dtype == "int64" and len(back) == a.rows_out


def test_empty_input_still_writes_the_header_of_the_step(tmp_path):
    (tmp_path / "in.csv").write_text("id,title\n", encoding="utf-8")
    result = run(tmp_path)
    assert (result.rows_in, result.chunks) == (0, 0)
    assert result.output.read_text().splitlines() == ["id,title,title_upper,length"]
    assert result.rejects_path.read_text().splitlines() == ["file,row,column,reason,value"]


def test_a_step_breaking_the_contract_is_named(tmp_path):
    make_input(tmp_path / "in.csv", 20)
    with pytest.raises(ValueError, match="one row per input row"):
        run(tmp_path, lambda f: f.iloc[1:])
    with pytest.raises(ValueError, match="reordered"):
        run(tmp_path, lambda f: f.iloc[::-1])
    with pytest.raises(TypeError, match="must return a DataFrame"):
        run(tmp_path, lambda f: f["title"])
    # a fresh run that fails before its first chunk leaves no run directory behind
    assert not default_run_dir(tmp_path / "out.csv").exists()

    def shifting(frame):
        return frame.assign(**{f"c{frame['_row'].iloc[0]}": "x"})
    with pytest.raises(ValueError, match="same columns"):
        run(tmp_path, shifting)


def test_a_run_directory_in_use_or_not_ours_is_refused(tmp_path):
    make_input(tmp_path / "in.csv", 20)
    run_dir = default_run_dir(tmp_path / "out.csv")
    run_dir.mkdir()
    with open(run_dir / "lock", "a+b") as lock:
        fcntl.flock(lock.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        with pytest.raises(RunConflict, match="another titlematch run"):
            run(tmp_path)
    (run_dir / "holiday.jpg").write_bytes(b"\xff\xd8")
    with pytest.raises(RunConflict, match="not a titlematch run directory"):
        run(tmp_path, restart=True)
    assert (run_dir / "holiday.jpg").exists()


def test_bad_arguments_are_named(tmp_path):
    make_input(tmp_path / "in.csv", 5)
    with pytest.raises(InputError, match="overwrite the input"):
        run_chunked(tmp_path / "in.csv", tmp_path / "in.csv", upper, options={})
    with pytest.raises(ValueError, match="engine must be one of"):
        run(tmp_path, engine="spark")
    with pytest.raises(ValueError, match="only used with engine='dask'"):
        run(tmp_path, scheduler="tcp://127.0.0.1:8786")
    with pytest.raises(ValueError, match="JSON values"):
        run(tmp_path, options={"when": object()})
    with pytest.raises(InputError, match="unknown output format"):
        run(tmp_path, out="out.json")
    with pytest.raises(InputError, match=r"in.csv: missing column\(s\) 'nope'; the file has: id, title"):
        run_chunked(tmp_path / "in.csv", tmp_path / "o.csv", upper, required=["title", "id", "nope"],
                    options={})


def test_parquet_input_streams_to_csv_with_source_row_numbers(tmp_path):
    frame = pd.DataFrame({"id": [str(i) for i in range(1, 21)], "title": [f"t{i}" for i in range(1, 21)]})
    frame.to_parquet(tmp_path / "in.parquet", index=False)
    seen = []

    def record(chunk):
        seen.append(chunk["_row"].tolist())
        return upper(chunk)
    result = run_chunked(tmp_path / "in.parquet", tmp_path / "o.csv", record, options={}, chunk_rows=6, quiet=True)
    assert seen == [list(range(1, 7)), list(range(7, 13)), list(range(13, 19)), [19, 20]]
    assert result.rows_in == 20 and result.rows_rejected == 2


@settings(max_examples=40, deadline=None)
@given(st.binary(max_size=300), st.integers(min_value=1, max_value=6))
def test_arbitrary_bytes_never_crash_a_run_and_the_counts_add_up(data, chunk_rows):
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        (tmp / "in.csv").write_bytes(data)
        try:
            result = run_chunked(tmp / "in.csv", tmp / "out.parquet", lambda f: f.assign(n=f["_row"] * 2),
                                 options={}, chunk_rows=chunk_rows, quiet=True)
        except InputError as exc:  # no header, or a header that cannot be used: the message names the file
            assert str(exc).startswith(str(tmp / "in.csv"))
            return
        out = pd.read_parquet(result.output)
        rejects = pd.read_csv(result.rejects_path, dtype=str, keep_default_na=False)
        assert result.rows_in == result.rows_out + result.rows_rejected == len(out) + result.rows_rejected
        kept = set((out["n"] // 2).tolist())
        noted = {int(r) for r in rejects["row"]}
        assert len(noted - kept) == result.rows_rejected and len(noted & kept) == result.rows_flagged
        assert not (tmp / "out.parquet.run").exists()
