"""Linking on every core and against a register index in partitions (issue 12).

The references here are the same computation in one piece: scikit-learn's own
``TfidfVectorizer.fit`` + ``transform`` for the parallel TF-IDF, one process for the parallel link,
an index in one piece for the partitioned one. Equality is exact (same bytes or same values).
"""
from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.feature_extraction.text import TfidfVectorizer

import titlematch
from titlematch.cli import main
from titlematch.datasets.scenario import make_register_scenario
from titlematch.io.artefact import ArtefactError
from titlematch.linking.linker import EstablishmentLinker
from titlematch.linking.register import RegisterIndex, fit_tfidf

ROOT = str(Path(titlematch.__file__).resolve().parent.parent)


@pytest.fixture(scope="module")
def data():
    # Large enough that the register (4,500 rows) and the batch (1,200 records) are cut in slices.
    return make_register_scenario(seed=5, register_rows=4_500, new_records=1_200)


@pytest.fixture(scope="module")
def one_core(data):
    index = RegisterIndex(workers=1).fit(data["register"])
    return index, EstablishmentLinker(workers=1).fit(index, records=data["new"]).link(data["new"])


def test_parallel_tfidf_equals_scikit_learn(data):
    # Reference: scikit-learn's TfidfVectorizer fitted and applied in one process.
    text = pd.Series(data["register"]["name"].str.lower().tolist() + ["", ""])
    nonempty = (text != "").to_numpy()
    for make in (lambda vocabulary=None: TfidfVectorizer(analyzer="char_wb", ngram_range=(3, 3), sublinear_tf=True,
                                                         dtype=np.float32, vocabulary=vocabulary),
                 lambda vocabulary=None: TfidfVectorizer(sublinear_tf=True, dtype=np.float32, vocabulary=vocabulary)):
        reference = make().fit(text[nonempty])
        expected = reference.transform(text).tocsr()
        fitted, matrix = fit_tfidf(make, text, nonempty, workers=2)
        assert fitted.vocabulary_ == reference.vocabulary_
        assert np.array_equal(fitted.idf_, reference.idf_)
        assert np.array_equal(matrix.indptr, expected.indptr) and np.array_equal(matrix.indices, expected.indices)
        assert np.array_equal(matrix.data, expected.data)


def test_one_core_and_every_core_give_identical_output(data, one_core):
    index, expected = one_core
    parallel = RegisterIndex(workers=2).fit(data["register"])
    pd.testing.assert_frame_equal(parallel.prepared_, index.prepared_)
    assert (parallel.char_matrix_ != index.char_matrix_).nnz == 0
    linker = EstablishmentLinker(workers=2).fit(parallel, records=data["new"])
    pd.testing.assert_frame_equal(linker.link(data["new"]), expected)
    assert len(linker.candidate_pairs(data["new"])) > len(data["new"])  # the batch had pairs to share out


def test_partitioned_index_links_identically(tmp_path, data, one_core):
    index, expected = one_core
    index.save(tmp_path / "index", partition_rows=1_000)
    loaded = RegisterIndex.load(tmp_path / "index", cache_rows=1_000)  # one partition in memory at a time
    assert loaded.n_partitions == 5
    assert sorted(p.name for p in (tmp_path / "index").glob("part-*")) == [f"part-0000{k}" for k in range(5)]
    sizes = [len(loaded.partition(k)) for k in range(5)]
    assert sum(sizes) == len(index) and max(sizes) < len(index)
    linker = EstablishmentLinker(workers=1).fit(loaded, records=data["new"])
    pd.testing.assert_frame_equal(linker.link(data["new"]), expected)


def test_regional_rules_read_only_the_batch_partitions(tmp_path, data, one_core):
    from titlematch.linking.blocking import KeyRule, NeighbourRule, needed_partitions
    index, _ = one_core
    index.save(tmp_path / "index", partition_rows=500)
    loaded = RegisterIndex.load(tmp_path / "index")
    rules = [NeighbourRule("postcode + name", k=5, min_similarity=0.1, within="postcode.value"),
             KeyRule("house + street + postcode", ("address.house_number", "address.street_name", "postcode.value"))]
    postcodes = loaded.prepare(data["new"])["postcode.value"]
    batch = data["new"][(postcodes == postcodes.iloc[0]).to_numpy()]  # one postcode's records
    assert len(needed_partitions(loaded.prepare(batch), loaded, rules)) == 1 < loaded.n_partitions
    whole = EstablishmentLinker(rules=rules, workers=1).fit(index, records=batch).link(batch)
    pd.testing.assert_frame_equal(EstablishmentLinker(rules=rules, workers=1).fit(loaded, records=batch).link(batch),
                                  whole)


def test_missing_or_altered_partition_is_refused_by_name(tmp_path, data, one_core, capsys):
    index, _ = one_core
    index.save(tmp_path / "index", partition_rows=1_500)
    data["new"].head(50).to_csv(tmp_path / "new.csv", index=False)
    target = tmp_path / "index" / "part-00001"
    # An altered data file inside a partition: refused when the partition is read, naming the file.
    prepared = target / "prepared.parquet"
    original = prepared.read_bytes()
    prepared.write_bytes(original[:-40] + bytes(40))
    loaded = RegisterIndex.load(tmp_path / "index")
    with pytest.raises(ArtefactError, match=r"part-00001[/\\]prepared\.parquet: checksum mismatch"):
        EstablishmentLinker(workers=1).fit(loaded, records=data["new"].head(50))
    assert main(["link", str(tmp_path / "new.csv"), "--register", str(tmp_path / "index"),
                 "--out", str(tmp_path / "out.csv"), "--quiet"]) == 2
    assert "part-00001" in capsys.readouterr().err and not (tmp_path / "out.csv").exists()
    prepared.write_bytes(original)
    # A partition's manifest replaced, or the partition gone: refused when the index opens.
    manifest = target / "manifest.json"
    edited = json.loads(manifest.read_text())
    edited["meta"]["rows"] += 1
    manifest.write_text(json.dumps(edited))
    with pytest.raises(ArtefactError, match="part-00001: register partition replaced or altered"):
        RegisterIndex.load(tmp_path / "index")
    shutil.rmtree(target)
    with pytest.raises(ArtefactError, match="part-00001: register partition missing"):
        RegisterIndex.load(tmp_path / "index")


# Kills ``titlematch register`` with SIGKILL at the n-th file it writes (or just before the new
# index is swapped into place), so each point is hit exactly, not by timing.
_KILLER = """
import os, signal, sys
import titlematch.io.artefact as artefact
import titlematch.linking.partitions as partitions
from titlematch.cli import main
point, writes = sys.argv[1], [0]
def killing(original):
    def wrapped(*args, **kwargs):
        writes[0] += 1
        if point == str(writes[0]):
            os.kill(os.getpid(), signal.SIGKILL)
        return original(*args, **kwargs)
    return wrapped
partitions.write_artefact = killing(partitions.write_artefact)       # each partition (then its 9 arrays)
artefact.np.save = killing(artefact.np.save)                          # each array file
if point == "swap":
    artefact.os.replace = artefact._exchange = lambda *a: os.kill(os.getpid(), signal.SIGKILL)
sys.exit(main(sys.argv[2:]))
"""


def test_register_killed_while_writing_leaves_the_old_index(tmp_path, data):
    register = data["register"].head(600)
    register.to_csv(tmp_path / "old.csv", index=False)
    register.assign(name=register["name"] + " X").to_csv(tmp_path / "new.csv", index=False)
    assert main(["register", str(tmp_path / "old.csv"), "--out", str(tmp_path / "index"),
                 "--partition-rows", "200", "--quiet"]) == 0
    before = (tmp_path / "index" / "manifest.json").read_bytes()
    env = dict(os.environ, PYTHONPATH=ROOT)
    for point in ("14", "33", "swap"):  # inside the second partition, among the index's own arrays, at the swap
        done = subprocess.run([sys.executable, "-c", _KILLER, point, "register", str(tmp_path / "new.csv"),
                               "--out", str(tmp_path / "index"), "--partition-rows", "200", "--quiet",
                               "--workers", "1"], env=env, capture_output=True)
        assert done.returncode == -signal.SIGKILL, (point, done.stderr[-2000:])
        assert (tmp_path / "index" / "manifest.json").read_bytes() == before, point
        index = RegisterIndex.load(tmp_path / "index")
        assert index.display_["register_name"].tolist() == register["name"].tolist()
        assert sum(len(index.partition(k)) for k in range(index.n_partitions)) == len(register)  # all whole
    # Staging left by the killed runs is hidden beside the index and never read; a finished run replaces it all.
    assert main(["register", str(tmp_path / "new.csv"), "--out", str(tmp_path / "index"),
                 "--partition-rows", "200", "--quiet"]) == 0
    assert RegisterIndex.load(tmp_path / "index").display_["register_name"].str.endswith(" X").all()
