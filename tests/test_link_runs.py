"""``titlematch link`` over big files: chunking invariance, rejects in place, Dask identical to local
(the index in partitions, the local run on every core, each Dask worker on one)."""
from __future__ import annotations

import pandas as pd
import pytest

from titlematch.cli import main
from titlematch.datasets.scenario import make_register_scenario


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    path = tmp_path_factory.mktemp("link_runs")
    data = make_register_scenario(seed=3, register_rows=3_000, new_records=900)
    data["register"].to_csv(path / "register.csv", index=False)
    new = data["new"].copy()
    new.loc[5, "name"] = ""  # an empty name is refused with a reason, in the rejects file
    new.to_csv(path / "new.csv", index=False)
    # In three partitions: Dask workers read the ones they need from the index directory themselves.
    assert main(["register", str(path / "register.csv"), "--out", str(path / "index"), "--partition-rows", "1000",
                 "--quiet"]) == 0
    return path, data


def _link(path, out, *extra):
    return main(["link", str(path / "new.csv"), "--register", str(path / "index"), "--out", str(out),
                 "--quiet", *extra])


def test_link_output_does_not_depend_on_chunking(workdir):
    path, data = workdir
    assert _link(path, path / "whole.csv", "--chunk-rows", "100000") == 0
    assert _link(path, path / "chunked.csv", "--chunk-rows", "97") == 0
    assert (path / "whole.csv").read_bytes() == (path / "chunked.csv").read_bytes()
    linked = pd.read_csv(path / "whole.csv", dtype=str, keep_default_na=False)
    assert len(linked) == len(data["new"]) - 1
    rejects = pd.read_csv(path / "whole.rejects.csv")
    assert rejects["row"].tolist() == [7] and "name" in rejects["reason"].iloc[0].lower()
    truth = data["truth"].set_index("record_id")["register_id"]
    accepted = linked[linked["decision"] == "accept"]
    assert (accepted["register_id"].to_numpy() == truth.loc[accepted["record_id"]].to_numpy()).mean() >= 0.98


def test_link_dask_engine_identical_to_local(workdir, monkeypatch):
    from titlematch.linking.register import RegisterIndex
    path, _ = workdir
    distributed = pytest.importorskip("distributed", reason="the [dask] extra is not installed (pip install titlematch[dask]); CI installs it through the test extra")
    released, release = [], RegisterIndex.release
    monkeypatch.setattr(RegisterIndex, "release", lambda index: released.append(release(index)) or released[-1])
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        assert _link(path, path / "dask.csv", "--chunk-rows", "300", "--engine", "dask",
                     "--scheduler", cluster.scheduler_address) == 0
    # the command let go of the partitions its EM pass read (3,000 register rows): the workers read their own
    assert released == [3_000]
    assert _link(path, path / "local.csv", "--chunk-rows", "300") == 0
    assert released == [3_000]  # the local engine links with the command's partitions: kept
    assert (path / "dask.csv").read_bytes() == (path / "local.csv").read_bytes()


def test_link_scores_the_records_em_is_fitted_on_once(workdir, monkeypatch):
    # Reference: the same command with those records linked again in their chunks, as before the
    # command kept fit_link's result for them: the same output and rejects, byte for byte.
    from titlematch.cli.link import LinkStep
    from titlematch.linking.linker import EstablishmentLinker
    path, data = workdir
    # EM on the first 400 records: chunks of 250 hold them whole, in part, and not at all.
    monkeypatch.setitem(EstablishmentLinker.__init__.__kwdefaults__, "em_records", 400)
    scored = []
    score = EstablishmentLinker._score_input

    def counting(self, frame, source="<records>"):
        scored.append(len(frame))
        return score(self, frame, source)

    monkeypatch.setattr(EstablishmentLinker, "_score_input", counting)
    assert _link(path, path / "once.csv", "--chunk-rows", "250") == 0
    once, scored[:] = sum(scored), []
    monkeypatch.setattr(LinkStep, "_already_linked", lambda self, chunk: None)
    assert _link(path, path / "again.csv", "--chunk-rows", "250") == 0
    assert (path / "once.csv").read_bytes() == (path / "again.csv").read_bytes()
    assert (path / "once.rejects.csv").read_bytes() == (path / "again.rejects.csv").read_bytes()
    valid = len(data["new"]) - 1  # one empty name, among the first 400
    assert once == valid and sum(scored) == valid + 399
