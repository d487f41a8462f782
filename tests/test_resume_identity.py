"""A run resumes only with the same artefacts, by content: one fingerprint for every streaming command."""
from __future__ import annotations

import pandas as pd
import pytest

from titlematch.cli import main
from titlematch.datasets.scenario import make_register_scenario
from titlematch.io.artefact import save_artefact
from titlematch.runtime.fingerprint import fingerprint, run_options


def _journal_lines(run_dir) -> int:
    path = run_dir / "journal.jsonl"
    return len(path.read_text().splitlines()) if path.exists() else 0


def test_register_index_rebuilt_in_place_makes_an_interrupted_link_start_over(tmp_path, monkeypatch, capsys):
    from titlematch.cli import link as link_command

    data = make_register_scenario(seed=3, register_rows=300, new_records=60)
    data["register"].to_csv(tmp_path / "register.csv", index=False)
    data["new"].to_csv(tmp_path / "new.csv", index=False)
    index, out = tmp_path / "index", tmp_path / "linked.csv"
    assert main(["register", str(tmp_path / "register.csv"), "--out", str(index), "--quiet"]) == 0
    link = ["link", str(tmp_path / "new.csv"), "--register", str(index), "--chunk-rows", "15", "--quiet"]

    # interrupt the run after two of its four chunks
    original, calls = link_command.LinkStep.__call__, []

    def crash_on_third_chunk(self, chunk):
        calls.append(len(chunk))
        if len(calls) == 3:
            raise RuntimeError("power cut")
        return original(self, chunk)

    monkeypatch.setattr(link_command.LinkStep, "__call__", crash_on_third_chunk)
    # the command line turns the crash into one line (no traceback) and a failing exit status
    assert main([*link, "--out", str(out)]) == 1
    assert "unexpected RuntimeError: power cut" in capsys.readouterr().err
    monkeypatch.undo()
    assert _journal_lines(tmp_path / "linked.csv.run") == 2 and not out.exists()

    # the index is rebuilt in place, under the same path, from a register whose ids changed
    changed = data["register"].assign(register_id="X" + data["register"]["register_id"].astype(str))
    changed.to_csv(tmp_path / "register_changed.csv", index=False)
    assert main(["register", str(tmp_path / "register_changed.csv"), "--out", str(index), "--quiet"]) == 0
    capsys.readouterr()

    assert main([*link, "--out", str(out)]) == 2  # not resumed onto the old index's chunks
    refused = capsys.readouterr().err
    assert "different options" in refused and "--restart" in refused and not out.exists()
    assert main([*link, "--out", str(out), "--restart"]) == 0
    assert main([*link, "--out", str(tmp_path / "fresh.csv")]) == 0
    assert out.read_bytes() == (tmp_path / "fresh.csv").read_bytes()
    linked = pd.read_csv(out, dtype=str, keep_default_na=False)
    ids = linked.loc[linked["register_id"] != "", "register_id"]
    assert len(ids) and ids.str.startswith("X").all()  # every link points into the rebuilt index


def test_fingerprint_follows_content_not_path(tmp_path):
    table = {"t": pd.DataFrame({"a": [1, 2]})}
    save_artefact(tmp_path / "art", "test-kind", table, meta={"threshold": 0.9})
    first = fingerprint(tmp_path / "art")
    save_artefact(tmp_path / "art", "test-kind", table, meta={"threshold": 0.9})
    assert fingerprint(tmp_path / "art") == first  # same content rebuilt: same identity
    save_artefact(tmp_path / "art", "test-kind", table, meta={"threshold": 0.8})
    assert fingerprint(tmp_path / "art") != first  # a setting saved in the artefact counts too
    (tmp_path / "f.csv").write_text("a\n1\n", encoding="utf-8")
    before = fingerprint(tmp_path / "f.csv")
    (tmp_path / "f.csv").write_text("a\n2\n", encoding="utf-8")
    assert fingerprint(tmp_path / "f.csv") != before
    assert fingerprint(None) is None
    options = run_options("link", {"register": tmp_path / "art", "training": None}, threshold=0.9)
    assert options == {"command": "link", "register": fingerprint(tmp_path / "art"), "training": None,
                       "threshold": 0.9}
