"""``titlematch normalize`` end to end: columns added, input untouched, rejects, progress, kill and resume.

Expected normalized forms come from outside the project:
- USPS Publication 28, Appendix C1 (street suffixes: STREET -> ST, AVENUE -> AVE), Appendix C2
  (secondary unit designators: SUITE -> STE, APARTMENT -> APT) and section 233 (directionals:
  NORTH -> N) (from memory).
- Job-title shorthand, common practice in job postings: "SR." = senior, "WHSE" = warehouse,
  "ASSOC" = associate, Roman numeral "II" = level 2, "NIGHTS" = night shift.
- "LLC" is the designator of a limited liability company (common practice, US state statutes).
"""
from __future__ import annotations

import hashlib
import json
import logging
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from titlematch.cli import main

TITLE = "SR. WHSE ASSOC II - NIGHTS"


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def cli(*args) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "titlematch", *map(str, args)], capture_output=True, text=True,
                          timeout=300)


def test_title_qualifiers_roles_and_changes_columns_and_input_untouched(tmp_path, capsys):
    path = tmp_path / "jobs.csv"
    path.write_text(f'id,job_title,site\n1,"{TITLE}",north\n2,cashier,south\n3,,east\n', encoding="utf-8")
    before = sha256(path)
    assert main(["normalize", str(path), "--kind", "title", "--column", "job_title", "--out",
                 str(tmp_path / "out.csv")]) == 0
    assert sha256(path) == before
    out = pd.read_csv(tmp_path / "out.csv", dtype=str, keep_default_na=False)
    assert list(out.columns) == ["id", "job_title", "site", "job_title_normalized", "job_title_qualifiers",
                                 "job_title_roles", "job_title_changes"]
    first = out.iloc[0]
    assert first["job_title"] == TITLE and first["site"] == "north"
    assert first["job_title_normalized"] == "warehouse associate"
    assert first["job_title_qualifiers"] == "seniority=senior; level=2; shift=night"
    assert first["job_title_roles"] == "warehouse associate"
    assert "whse->warehouse" in first["job_title_changes"]
    assert out.iloc[1]["job_title_qualifiers"] == "" and out.iloc[1]["job_title_normalized"] == "cashier"
    assert out.iloc[2]["job_title_normalized"] == ""
    summary = capsys.readouterr().out
    assert summary.startswith("titlematch normalize: rows in 3, written 3, rejected 0")


def test_address_parts_in_parquet_out_as_parquet(tmp_path):
    frame = pd.DataFrame({"firm_id": ["A1", "A2"], "street": ["400 north main street suite 200",
                                                               "12 Elm Avenue Apartment 3"]})
    frame.to_parquet(tmp_path / "sites.parquet", index=False)
    assert main(["normalize", str(tmp_path / "sites.parquet"), "--kind", "address", "--column", "street",
                 "--out", str(tmp_path / "out.parquet"), "--quiet"]) == 0
    out = pd.read_parquet(tmp_path / "out.parquet")
    assert out["street_normalized"].tolist() == ["400 N MAIN ST STE 200", "12 ELM AVE APT 3"]
    parts = ["house_number", "predirectional", "street_name", "suffix", "postdirectional", "unit_type", "unit"]
    assert out.loc[0, [f"street_{p}" for p in parts]].tolist() == ["400", "N", "MAIN", "ST", "", "STE", "200"]
    assert out["firm_id"].tolist() == ["A1", "A2"]


def test_name_fields(tmp_path):
    path = tmp_path / "firms.csv"
    path.write_text('name\n"Smith & Sons, LLC"\n', encoding="utf-8")
    assert main(["normalize", str(path), "--kind", "name", "--column", "name", "--out", str(tmp_path / "o.csv"),
                 "--quiet"]) == 0
    out = pd.read_csv(tmp_path / "o.csv", dtype=str, keep_default_na=False)
    assert list(out.columns) == ["name", "name_normalized", "name_legal_form", "name_trade_name", "name_branch"]
    assert out.loc[0, "name_legal_form"] == "llc"
    assert "llc" not in out.loc[0, "name_normalized"]


def test_missing_column_names_the_file_and_its_columns(tmp_path):
    path = tmp_path / "jobs.csv"
    path.write_text("id,job_title\n1,cook\n", encoding="utf-8")
    done = cli("normalize", path, "--kind", "title", "--column", "title", "--out", tmp_path / "o.csv")
    assert done.returncode == 2
    assert done.stderr.strip() == (f"titlematch normalize: error: {path}: missing column(s) 'title'; "
                                   "the file has: id, job_title")
    assert not (tmp_path / "o.csv").exists() and not (tmp_path / "o.csv.run").exists()


def test_scheduler_without_the_dask_engine_is_refused(tmp_path, capsys):
    path = tmp_path / "jobs.csv"
    path.write_text("title\ncook\n", encoding="utf-8")
    assert main(["normalize", str(path), "--kind", "title", "--column", "title", "--out", str(tmp_path / "o.csv"),
                 "--scheduler", "tcp://127.0.0.1:8786"]) == 2
    assert "--scheduler tcp://127.0.0.1:8786 needs --engine dask" in capsys.readouterr().err
    assert not (tmp_path / "o.csv").exists()


def test_existing_output_column_is_refused_without_leaving_a_run(tmp_path, capsys):
    path = tmp_path / "jobs.csv"
    path.write_text("title,title_normalized\ncook,x\n", encoding="utf-8")
    assert main(["normalize", str(path), "--kind", "title", "--column", "title", "--out",
                 str(tmp_path / "o.csv")]) == 2
    assert "already has column(s) title_normalized" in capsys.readouterr().err
    assert not (tmp_path / "o.csv.run").exists()


def test_unreadable_rows_go_to_the_rejects_file_with_row_and_reason(tmp_path, capsys):
    path = tmp_path / "jobs.csv"
    path.write_bytes(b"id,title\n1,cook\n2,too,many\n3,nul\x00x\n4,\"bad\"quote\n5,\"two\nlines\"\n6,baker\n")
    before = sha256(path)
    assert main(["normalize", str(path), "--kind", "title", "--column", "title", "--out", str(tmp_path / "o.csv")]) == 0
    assert "rows in 6, written 3, rejected 3" in capsys.readouterr().out
    rejects = pd.read_csv(tmp_path / "o.rejects.csv", dtype=str, keep_default_na=False)
    assert rejects["row"].tolist() == ["3", "4", "5"]
    assert [r.split(":")[0].split(",")[0] for r in rejects["reason"]] == \
        ["row has 3 fields", "cell contains a NUL byte", "unreadable CSV row"]
    out = pd.read_csv(tmp_path / "o.csv", dtype=str, keep_default_na=False)
    assert out["id"].tolist() == ["1", "5", "6"] and out["title"].iloc[1] == "two\nlines"
    assert sha256(path) == before


def test_progress_bar_over_ten_thousand_rows_unless_quiet(tmp_path, capsys):
    path = tmp_path / "big.csv"
    path.write_text("title\n" + "line cook\n" * 10_500, encoding="utf-8")
    args = ["normalize", str(path), "--kind", "title", "--column", "title", "--out"]
    assert main(args + [str(tmp_path / "a.csv")]) == 0
    shown = capsys.readouterr()
    assert main(args + [str(tmp_path / "b.csv"), "--quiet"]) == 0
    quiet = capsys.readouterr()
    assert "normalize title" in shown.err and "%|" in shown.err
    assert "%|" not in quiet.err
    assert "rows in 10,500" in shown.out and "rows in 10,500" in quiet.out  # --quiet keeps the summary
    small = tmp_path / "small.csv"
    small.write_text("title\n" + "line cook\n" * 50, encoding="utf-8")
    assert main(["normalize", str(small), "--kind", "title", "--column", "title", "--out", str(tmp_path / "c.csv")]) == 0
    assert "%|" not in capsys.readouterr().err


# -- interrupted runs -------------------------------------------------------------------------------
def make_titles(path: Path, rows: int) -> None:
    stems = ["SR. WHSE ASSOC II - NIGHTS", "Registered Nurse (PRN)", "Jr software developer", "Asst. Store Mgr",
             "forklift operator 2nd shift", "Customer Service Rep III", "admin asst", "RN - ICU", "line cook"]
    with open(path, "w", encoding="utf-8", newline="") as handle:
        handle.write("id,title\n")
        for i in range(1, rows + 1):
            if i % 9973 == 0:
                handle.write(f"{i},ragged,row\n")
            elif i % 10007 == 0:
                handle.write(f"{i},nul\x00byte\n")
            else:
                handle.write(f'{i},"{stems[i % len(stems)]} {i % 1500}"\n')


def journal_lines(run_dir: Path) -> int:
    try:
        return (run_dir / "journal.jsonl").read_bytes().count(b"\n")
    except FileNotFoundError:
        return 0


def start_and_kill_after(args: list, run_dir: Path, chunks: int) -> int:
    """Start ``titlematch normalize``, SIGKILL it once the journal holds ``chunks`` chunks; return that count."""
    process = subprocess.Popen([sys.executable, "-m", "titlematch", *map(str, args)],
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    while journal_lines(run_dir) < chunks and process.poll() is None and time.monotonic() < deadline:
        time.sleep(0.01)
    os.kill(process.pid, signal.SIGKILL)
    process.wait()
    assert process.returncode == -signal.SIGKILL, "the run finished before it could be interrupted"
    return journal_lines(run_dir)


def test_killed_runs_resume_to_the_bytes_of_an_uninterrupted_run(tmp_path, capsys):
    rows = 100_000  # 40 chunks of 2,500
    source = tmp_path / "titles.csv"
    make_titles(source, rows)
    before = sha256(source)
    common = ["normalize", str(source), "--kind", "title", "--column", "title", "--chunk-rows", "2500", "--quiet"]
    assert main([*common, "--out", str(tmp_path / "reference.csv")]) == 0

    out = tmp_path / "out.csv"
    run_dir = tmp_path / "out.csv.run"
    done = [start_and_kill_after([*common, "--out", out], run_dir, k) for k in (1, 2, 5)]
    assert done[0] >= 1 and done == sorted(done) and not out.exists()
    capsys.readouterr()

    assert main([*common[:3], "address", *common[4:], "--out", str(out)]) == 2  # same run, other --kind
    refused = capsys.readouterr().err
    assert "different options" in refused and "--restart" in refused

    assert main([*common, "--out", str(out)]) == 0
    assert f"chunks resumed {done[-1]}" in capsys.readouterr().out
    assert out.read_bytes() == (tmp_path / "reference.csv").read_bytes()
    assert (tmp_path / "out.rejects.csv").read_bytes() == (tmp_path / "reference.rejects.csv").read_bytes()
    assert not run_dir.exists() and not list(tmp_path.glob(".*.tmp"))
    assert sha256(source) == before

    # every input row exactly once, in the output or in the rejects (row r holds id r - 1)
    ids = pd.read_csv(out, usecols=["id"], dtype=str)["id"].astype(int).tolist()
    rejected = (pd.read_csv(tmp_path / "out.rejects.csv")["row"] - 1).tolist()
    assert len(ids) == len(set(ids)) and ids == sorted(ids)
    assert sorted(ids + rejected) == list(range(1, rows + 1))
    assert len(rejected) == rows // 9973 + rows // 10007


def test_restart_discards_an_unfinished_run(tmp_path):
    source = tmp_path / "titles.csv"
    make_titles(source, 30)
    out = tmp_path / "o.csv"
    run_dir = tmp_path / "o.csv.run"
    run_dir.mkdir()
    (run_dir / "manifest.json").write_text(json.dumps({"identity": {"format": 1}, "state": "running"}))
    (run_dir / "journal.jsonl").write_text("")
    args = ["normalize", str(source), "--kind", "title", "--column", "title", "--out", str(out), "--quiet"]
    assert main(args) == 2
    assert main(args + ["--restart", "--keep-run"]) == 0
    manifest = json.loads((run_dir / "manifest.json").read_text())
    assert manifest["state"] == "complete" and manifest["rows_in"] == 30
    assert manifest["options"] == {"command": "normalize", "kind": "title", "column": "title"}


@pytest.mark.parametrize("engine", ["local", "dask"])
def test_engines_write_the_same_file(tmp_path, engine):
    if engine == "dask":
        pytest.importorskip("distributed", reason="the [dask] extra is not installed (pip install titlematch[dask]); CI installs it through the test extra")
    source = tmp_path / "titles.csv"
    make_titles(source, 400)
    assert main(["normalize", str(source), "--kind", "title", "--column", "title", "--out",
                 str(tmp_path / f"{engine}.csv"), "--chunk-rows", "100", "--engine", engine, "--quiet"]) == 0
    reference = tmp_path / "reference.csv"
    assert main(["normalize", str(source), "--kind", "title", "--column", "title", "--out", str(reference),
                 "--chunk-rows", "100", "--quiet"]) == 0
    assert (tmp_path / f"{engine}.csv").read_bytes() == reference.read_bytes()


def test_cp1252_input_is_detected_logged_and_written_as_utf8(tmp_path, caplog):
    # CP1252.TXT (Unicode Consortium mapping of Windows code page 1252): 0xE9 is U+00E9
    path = tmp_path / "jobs.csv"
    path.write_bytes(b"title\r\nCaf\xe9 Manager\r\n")
    caplog.set_level(logging.INFO, logger="titlematch")
    assert main(["normalize", str(path), "--kind", "title", "--column", "title", "--out", str(tmp_path / "o.csv"),
                 "--verbose"]) == 0
    assert f"{path}: decoded as cp1252 (detected)" in caplog.text
    out = pd.read_csv(tmp_path / "o.csv", dtype=str, encoding="utf-8")
    assert out["title"].tolist() == ["Café Manager"]
