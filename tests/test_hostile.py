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


@pytest.fixture(scope="module")
def coded(small_demo, tmp_path_factory):
    """The demo's new year coded with its model, and the referral queue issued for it."""
    path = tmp_path_factory.mktemp("hostile")
    assert main(["code", str(small_demo["data"] / "new_2025.csv"), "--dictionary", str(small_demo["dictionary"]),
                 "--model", str(small_demo["model"]), "--out", str(path / "coded.csv"), "--quiet"]) == 0
    assert main(["queue", str(path / "coded.csv"), "--dictionary", str(small_demo["dictionary"]),
                 "--out", str(path / "queue.xlsx"), "--quiet"]) == 0
    return path


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
