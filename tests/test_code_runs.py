"""``titlematch code`` over big files: chunking invariance, kill and resume, Dask identical to local."""
from __future__ import annotations

import pandas as pd
import pytest
from test_cli_normalize import start_and_kill_after  # the SIGKILL helper shared with the normalize runs

from titlematch.cli import main
from titlematch.datasets.scenario import classification, make_title_scenario


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    path = tmp_path_factory.mktemp("code_runs")
    data = make_title_scenario(seed=5, records_per_year=1_500, new_records=1_000, gold_records=200)
    data["past"].to_csv(path / "past.csv", index=False)
    classification().to_csv(path / "soc.csv", index=False)
    assert main(["dictionary", str(path / "past.csv"), "--classification", str(path / "soc.csv"),
                 "--out", str(path / "dict"), "--quiet"]) == 0
    new = pd.concat([data["new"]] * 6, ignore_index=True)  # 6,000 rows, titles repeat as in real files
    new["record_id"] = [f"R{i:05d}" for i in range(len(new))]
    new.loc[7, "title"] = ""  # an empty title is coded blank, never dropped
    new.to_csv(path / "new.csv", index=False)
    with open(path / "new.csv", "a", encoding="utf-8") as handle:
        handle.write("R99999,too,many,fields\n")  # a ragged row goes to the rejects file
    return path


def _code(path, out, *extra):
    return main(["code", str(path / "new.csv"), "--dictionary", str(path / "dict"), "--out", str(out),
                 "--quiet", *extra])


def test_output_does_not_depend_on_chunking(workdir):
    assert _code(workdir, workdir / "whole.csv", "--chunk-rows", "100000") == 0
    assert _code(workdir, workdir / "chunked.csv", "--chunk-rows", "333") == 0
    assert (workdir / "whole.csv").read_bytes() == (workdir / "chunked.csv").read_bytes()
    coded = pd.read_csv(workdir / "whole.csv", dtype=str, keep_default_na=False)
    assert len(coded) == 6_000 and coded.loc[7, "code"] == ""
    rejects = pd.read_csv(workdir / "whole.rejects.csv")
    assert rejects["row"].tolist() == [6_002]  # header is line 1, the ragged row is the last line


def test_killed_code_runs_resume_to_the_same_bytes(workdir):
    reference = workdir / "reference.csv"
    assert _code(workdir, reference, "--chunk-rows", "500") == 0
    out = workdir / "killed.csv"
    args = ["code", workdir / "new.csv", "--dictionary", workdir / "dict", "--out", out, "--chunk-rows", "500",
            "--quiet"]
    done = [start_and_kill_after(args, workdir / "killed.csv.run", k) for k in (1, 3)]
    assert done[0] >= 1 and done == sorted(done) and not out.exists()
    assert _code(workdir, out, "--chunk-rows", "500") == 0
    assert out.read_bytes() == reference.read_bytes()
    ids = pd.read_csv(out, usecols=["record_id"], dtype=str)["record_id"]
    assert ids.is_unique and len(ids) == 6_000


def test_dask_engine_codes_identically(workdir):
    distributed = pytest.importorskip("distributed", reason="the [dask] extra is not installed (pip install titlematch[dask]); CI installs it through the test extra")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        assert _code(workdir, workdir / "dask.csv", "--chunk-rows", "1500", "--engine", "dask",
                     "--scheduler", cluster.scheduler_address) == 0
    assert _code(workdir, workdir / "local.csv", "--chunk-rows", "1500") == 0
    assert (workdir / "dask.csv").read_bytes() == (workdir / "local.csv").read_bytes()
