"""The Dask engine gives the local engine's bytes; process_dask keeps rows in order; Dask stays optional.

The cluster is a real ``dask.distributed.LocalCluster`` with two single-threaded worker processes
(the reference implementation of the scheduler the engine targets).
"""
from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pandas as pd
import pytest

DASK_MISSING = "the [dask] extra is not installed (pip install titlematch[dask]); CI installs it through the test extra"

from titlematch.cli.normalize import NormalizeStep
from titlematch.runtime.dask_engine import process_dask
from titlematch.runtime.runner import run_chunked


class CountingStep:
    """An address step that notes, in a file, each time it is unpacked in a process (shipping count)."""

    def __init__(self, marker: str) -> None:
        self.marker = marker
        self.step = NormalizeStep("address", "street")

    def __setstate__(self, state):
        self.__dict__.update(state)
        with open(self.marker, "a", encoding="utf-8") as handle:
            handle.write(f"{os.getpid()}\n")

    def __call__(self, frame):
        return self.step(frame)


def make_addresses(path: Path, rows: int) -> Path:
    streets = ["Elm Avenue", "north main street", "Oak Blvd Suite 200", "1st st apt 4", "River Road Unit B"]
    lines = ["id,street"]
    for i in range(1, rows + 1):
        lines.append(f"{i},{i % 97 + 1} {streets[i % len(streets)]}" if i % 41 else f"{i},bad,row")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed", reason=DASK_MISSING)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as c:
        yield c


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_dask_engine_output_is_byte_identical_to_local(tmp_path, client, suffix):
    make_addresses(tmp_path / "in.csv", 900)
    marker = tmp_path / "unpacked.txt"
    step = CountingStep(str(marker))
    common = dict(required=["street"], options={"kind": "address"}, chunk_rows=50, quiet=True)
    local = run_chunked(tmp_path / "in.csv", tmp_path / f"local{suffix}", step, **common)
    remote = run_chunked(tmp_path / "in.csv", tmp_path / f"dask{suffix}", step, engine="dask", scheduler=client,
                         **common)
    assert remote.output.read_bytes() == local.output.read_bytes()
    assert remote.rejects_path.read_bytes() == local.rejects_path.read_bytes()
    assert (remote.rows_in, remote.rows_out, remote.rows_rejected) == (900, 879, 21)  # every 41st row is ragged
    # the step is scattered to the workers (and may be copied again when the scheduler replicates
    # it), not sent with each of the 18 chunks
    unpacked = marker.read_text().split()
    assert remote.chunks == 18
    assert len(unpacked) in (1, 2, 3, 4) and len(set(unpacked)) <= 2


def test_process_dask_matches_the_local_step_row_for_row(client):
    dd = pytest.importorskip("dask.dataframe", reason=DASK_MISSING)
    frame = pd.DataFrame({"street": ["12 Elm Avenue Apt 3", "400 n main street suite 200", "", "PO Box 12"] * 5,
                          "id": [str(i) for i in range(20)]})
    step = NormalizeStep("address", "street")
    ddf = dd.from_pandas(frame, npartitions=3)
    got = process_dask(ddf, step).compute()
    expected = step(frame)
    assert got.index.tolist() == list(range(20))
    pd.testing.assert_frame_equal(got.reset_index(drop=True).astype(object),
                                  expected.reset_index(drop=True).astype(object))


def test_process_dask_runs_without_a_distributed_client():
    dask = pytest.importorskip("dask", reason=DASK_MISSING)
    dd = pytest.importorskip("dask.dataframe", reason=DASK_MISSING)
    frame = pd.DataFrame({"street": ["9 Oak Road", "77 Sunset Boulevard"]})
    step = NormalizeStep("address", "street")
    with dask.config.set(scheduler="synchronous"):
        got = process_dask(dd.from_pandas(frame, npartitions=2), step).compute()
    assert got["street_normalized"].tolist() == step(frame)["street_normalized"].tolist()
    with pytest.raises(TypeError, match="dask.dataframe.DataFrame"):
        process_dask(frame, step)


def _python(code: str, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], cwd=cwd, capture_output=True, text=True,
                          timeout=120)


def test_importing_titlematch_does_not_import_dask(tmp_path):
    done = _python("""
        import sys
        import titlematch, titlematch.runtime.runner, titlematch.runtime.dask_engine, titlematch.io
        from titlematch.cli import build_parser
        build_parser()
        print(sorted(m for m in sys.modules if m == "dask" or m.startswith(("dask.", "distributed"))))
    """, tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"


def test_dask_engine_without_dask_says_how_to_install(tmp_path):
    make_addresses(tmp_path / "in.csv", 5)
    done = _python(f"""
        import sys
        sys.modules["dask"] = None          # as if dask were not installed
        sys.modules["dask.dataframe"] = None
        sys.modules["distributed"] = None
        from titlematch.cli import main
        sys.exit(main(["normalize", {str(tmp_path / 'in.csv')!r}, "--kind", "address", "--column", "street",
                       "--out", {str(tmp_path / 'out.csv')!r}, "--engine", "dask"]))
    """, tmp_path)
    assert done.returncode == 2
    assert "pip install titlematch[dask]" in done.stderr
    assert not (tmp_path / "out.csv").exists() and not (tmp_path / "out.csv.run").exists()
