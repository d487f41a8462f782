"""Linking on every core and against a register index in partitions (issue 12).

The references here are the same computation in one piece: scikit-learn's own
``TfidfVectorizer.fit`` + ``transform`` for the parallel TF-IDF, one process for the parallel link,
an index in one piece for the partitioned one. Equality is exact (same bytes or same values).
"""
from __future__ import annotations

import json
import os
import re
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


def test_fit_link_scores_once_and_equals_fit_then_link(data, one_core):
    # Reference: fit(register, records=batch) then link(batch), the batch scored twice.
    index, expected = one_core
    linker = EstablishmentLinker(workers=1)
    pd.testing.assert_frame_equal(linker.fit_link(index, data["new"]), expected)
    assert hasattr(linker, "model_") and linker.link(data["new"]).equals(expected)


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


def test_released_partitions_are_read_again_and_link_identically(tmp_path, data, one_core):
    index, expected = one_core
    index.save(tmp_path / "index", partition_rows=1_000)
    loaded = RegisterIndex.load(tmp_path / "index")  # the default cache holds all five
    linker = EstablishmentLinker(workers=1).fit(loaded, records=data["new"])
    held = loaded._store._cache
    assert sum(len(p) for p in held.values()) == loaded.release() == len(index) and not held
    pd.testing.assert_frame_equal(linker.link(data["new"]), expected)
    assert len(held) == 5
    assert index.release() == 0 and index.n_partitions == 1  # an index built in memory keeps its partition


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


def test_streaming_build_writes_the_in_memory_index_file_for_file(tmp_path, data, one_core):
    # Reference: RegisterIndex.fit on the whole register in memory, then save. The root manifest
    # holds the SHA-256 of every file, partitions' manifests included, so equal manifests are equal
    # indexes, byte for byte. Chunks of 700 rows cut partitions and vocabularies unevenly.
    from titlematch.linking.build import build_index
    from titlematch.linking.tfidf import tfidf_idf
    from sklearn.feature_extraction.text import TfidfTransformer
    index, _ = one_core
    register = data["register"]
    index.save(tmp_path / "memory", partition_rows=1_000)
    build_index((register.iloc[a:a + 700] for a in range(0, len(register), 700)), tmp_path / "streamed",
                partition_rows=1_000, workers=2)
    assert (tmp_path / "streamed" / "manifest.json").read_bytes() == (tmp_path / "memory" / "manifest.json").read_bytes()
    assert not (tmp_path / "streamed" / "spill").exists()
    # The idf formula against scikit-learn's transformer (documents 0-2, terms with df 3, 1, 2).
    counts = np.array([[1, 0, 2], [1, 1, 0], [3, 0, 1]], dtype=np.float32)
    expected = TfidfTransformer(smooth_idf=True).fit(counts).idf_
    assert np.array_equal(tfidf_idf(np.array([3, 1, 2]), 3, expected.dtype), expected)


def test_register_command_in_chunks_equals_one_chunk_and_finds_repeated_ids_across_chunks(tmp_path, data, capsys):
    register = data["register"].head(1_500).copy()
    register.to_csv(tmp_path / "register.csv", index=False)
    for chunk_rows in ("400", "100000"):
        assert main(["register", str(tmp_path / "register.csv"), "--out", str(tmp_path / chunk_rows),
                     "--chunk-rows", chunk_rows, "--partition-rows", "600", "--quiet"]) == 0
    assert (tmp_path / "400" / "manifest.json").read_bytes() == (tmp_path / "100000" / "manifest.json").read_bytes()
    # An id repeated in two chunks (file rows 3 and 1,202: the header is row 1) is refused by its rows.
    register.iloc[[1200], 0] = register.iloc[1, 0]
    register.to_csv(tmp_path / "repeated.csv", index=False)
    capsys.readouterr()
    assert main(["register", str(tmp_path / "repeated.csv"), "--out", str(tmp_path / "400"), "--chunk-rows", "400",
                 "--quiet"]) == 2
    assert re.search(rf"duplicated id.*'{register.iloc[1, 0]}' in rows 3, 1202", capsys.readouterr().err)
    assert (tmp_path / "400" / "manifest.json").read_bytes() == (tmp_path / "100000" / "manifest.json").read_bytes()


def test_regional_blocking_reads_only_the_partitions_of_a_batch_and_links_identically(tmp_path, data, one_core):
    # Reference: the same regional rules on the index in one piece. The index records which
    # partitions hold each postcode and place, so one town's records read only that town's partitions.
    from titlematch.linking.blocking import default_rules, needed_partitions
    index, _ = one_core
    index.save(tmp_path / "index", partition_rows=500)
    loaded = RegisterIndex.load(tmp_path / "index", cache_rows=500)
    rules = default_rules(loaded.fields_, regional=True)
    assert {r.name for r in rules} >= {"city + name n-grams", "postcode + name n-grams"}
    assert "name n-grams" not in {r.name for r in rules} and "house number + street" not in {r.name for r in rules}
    prepared = loaded.prepare(data["new"])
    town = data["new"][(prepared["city.value"] == prepared["city.value"].iloc[0]).to_numpy()]
    needed = needed_partitions(loaded.prepare(town), loaded, rules)
    assert 0 < len(needed) < loaded.n_partitions
    assert len(needed_partitions(prepared, loaded, default_rules(loaded.fields_))) == loaded.n_partitions
    whole = EstablishmentLinker(regional=True, workers=1).fit_link(index, data["new"])
    read = []
    original = loaded._store.get
    loaded._store.get = lambda k: read.append(k) or original(k)
    pd.testing.assert_frame_equal(EstablishmentLinker(regional=True, workers=1).fit_link(loaded, town),
                                  EstablishmentLinker(regional=True, workers=1).fit_link(index, town))
    assert set(read) == set(needed.tolist())
    pd.testing.assert_frame_equal(EstablishmentLinker(regional=True, workers=2).fit_link(loaded, data["new"]), whole)
    assert (whole["decision"] == "accept").mean() > 0.8  # regional blocking still links most records


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
    # Staging left by the killed runs is hidden beside the index and never read; the next run removes
    # it (its processes are gone), leaves a running process's staging alone, and replaces the index.
    killed = [p.name for p in tmp_path.glob(".index.*")]
    assert len(killed) == 1, killed  # each killed run, starting, removed the one killed before it
    alive = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        from titlematch.io.artefact import _owner_tag
        writing = subprocess.run([sys.executable, "-c", "import os, sys; sys.path.insert(0, sys.argv[1]); "
                                  "from titlematch.io.artefact import _owner_tag, _process_start; "
                                  "host = _owner_tag().split('-')[0]; pid = int(sys.argv[2]); "
                                  "print(f'{host}-{pid}-{_process_start(pid)}')", ROOT, str(alive.pid)],
                                 capture_output=True, text=True, check=True).stdout.strip()
        (tmp_path / f".index.{writing}.abc123").mkdir()  # as a run still writing names its staging
        assert main(["register", str(tmp_path / "new.csv"), "--out", str(tmp_path / "index"),
                     "--partition-rows", "200", "--quiet"]) == 0
        assert [p.name for p in tmp_path.glob(".index.*")] == [f".index.{writing}.abc123"]
        assert _owner_tag().split("-")[0] == writing.split("-")[0]
    finally:
        alive.kill()
        alive.wait()
    assert RegisterIndex.load(tmp_path / "index").display_["register_name"].str.endswith(" X").all()


def test_key_rule_pairs_are_the_inner_join_on_the_key(tmp_path, data, one_core):
    # Reference: pandas' inner join (merge) of the records and the register on the key, which is
    # what a key rule is without a block limit. The partitioned index groups each partition's
    # rows by key once; a second batch on the same partitions finds the same pairs.
    from titlematch.linking.blocking import KeyRule, candidate_pairs
    index, _ = one_core
    columns = ["address.house_number", "address.street_name", "postcode.value"]
    new = index.prepare(data["new"])

    def keyed(frame, side):
        key = frame[columns].astype(str).agg("|".join, axis=1)
        out = pd.DataFrame({"key": key, side: np.arange(len(frame))})
        return out[(frame[columns] != "").all(axis=1).to_numpy()]

    expected = keyed(new, "new").merge(keyed(index.prepared_, "register"), on="key")
    expected = expected.sort_values(["new", "register"])[["new", "register"]].reset_index(drop=True)
    assert len(expected) > 0.5 * len(new)
    index.save(tmp_path / "index", partition_rows=1_000)
    loaded = RegisterIndex.load(tmp_path / "index")
    for _ in range(2):
        pairs = candidate_pairs(new, loaded, [KeyRule("house + street + postcode", tuple(columns))],
                                max_block=10 ** 9)
        pd.testing.assert_frame_equal(pairs.astype(np.int64), expected.astype(np.int64))


def test_word_rule_pairs_are_the_inner_join_on_place_and_rare_word(tmp_path, data, one_core):
    # Reference: pandas' inner join of (place, rare name word) rows of the records and the register,
    # which is what a word rule is without a block limit. The partitioned index groups each
    # partition's (place, word) rows once; a second batch on the same partitions finds the same pairs.
    from titlematch.linking.blocking import TokenRule, candidate_pairs
    index, _ = one_core
    within = next(c for c in index.prepared_.columns if c.endswith(".value") and "city" in c)
    rule = TokenRule("place + name words", within=within)
    new = index.prepare(data["new"])
    _, new_words = index.vectorize(new["text"])
    rare = index.word_frequency_ <= max(1, rule.max_share * len(index))

    def words(frame, matrix, side):
        rows = np.repeat(np.arange(matrix.shape[0]), np.diff(matrix.indptr))
        keep = rare[matrix.indices]
        out = pd.DataFrame({side: rows[keep], "word": matrix.indices[keep],
                            "place": frame[within].fillna("").astype(str).to_numpy()[rows[keep]]})
        return out[out["place"] != ""]

    expected = words(new, new_words, "new").merge(words(index.prepared_, index.word_matrix_, "register"),
                                                  on=["place", "word"])
    expected = (expected[["new", "register"]].drop_duplicates().sort_values(["new", "register"])
                .reset_index(drop=True))
    assert len(expected) > 0.5 * len(new)
    index.save(tmp_path / "index", partition_rows=1_000)
    loaded = RegisterIndex.load(tmp_path / "index")
    for _ in range(2):
        pairs = candidate_pairs(new, loaded, [rule], max_block=10 ** 9)
        pd.testing.assert_frame_equal(pairs.astype(np.int64), expected.astype(np.int64))


def test_neighbour_search_in_small_product_blocks_finds_the_same_pairs(monkeypatch, data, one_core):
    # Reference: the same search with each region's product in one block.
    from titlematch.linking import blocking
    index, _ = one_core
    new = index.prepare(data["new"])
    chars, _ = index.vectorize(new["text"])
    part = index.partition(0)
    monkeypatch.setattr(blocking, "PRODUCT_ENTRIES", 500)
    assert len(blocking._product_blocks(chars, np.arange(len(new)), part.char_matrix_.T.tocsr(), 2000)) > 20
    for regional in (False, True):
        rules = [r for r in blocking.default_rules(index.fields_, regional=regional)
                 if isinstance(r, blocking.NeighbourRule)]
        cut = blocking.candidate_pairs(new, index, rules)
        monkeypatch.setattr(blocking, "PRODUCT_ENTRIES", 10 ** 12)
        whole = blocking.candidate_pairs(new, index, rules)
        monkeypatch.setattr(blocking, "PRODUCT_ENTRIES", 500)
        pd.testing.assert_frame_equal(cut, whole)
        assert cut.attrs == whole.attrs and len(cut) > len(new)


def test_partitions_that_do_not_fit_together_are_read_once_per_batch(tmp_path, data, one_core, monkeypatch):
    # Reference: the pairs and features of the index in one piece. With a cache of 2,000 rows a
    # batch needing all five partitions reads them a few at a time, each once at most (before,
    # every slice and then the comparisons read them again, evicting each other).
    from titlematch.linking import partitions
    from titlematch.linking.blocking import default_rules
    from titlematch.linking.scoring import pairs_and_features
    index, _ = one_core
    index.save(tmp_path / "index", partition_rows=1_000)
    loaded = RegisterIndex.load(tmp_path / "index", cache_rows=2_000)
    groups = loaded.partition_groups(range(5))
    assert [k for g in groups for k in g] == list(range(5)) and 1 < len(groups) < 5
    assert all(sum(len(loaded.partition(k)) for k in g) <= 2_000 for g in groups if len(g) > 1)
    reads = []
    original = partitions.RegisterPartition.read.__func__
    monkeypatch.setattr(partitions.RegisterPartition, "read",
                        classmethod(lambda cls, d, sha: reads.append(d.name) or original(cls, d, sha)))
    rules = default_rules(loaded.fields_)  # the whole-register search: every partition, every batch
    whole_prepared = index.prepare(data["new"])
    expected = pairs_and_features(whole_prepared, index, rules, workers=1)
    prepared = loaded.prepare(data["new"])
    pairs_and_features(prepared, loaded, rules, workers=1)  # the first batch also counts block sizes
    every = {f"part-0000{k}" for k in range(5)}
    for workers in (1, 2):
        held = {f"part-0000{k}" for k in loaded._store._cache}
        reads.clear()
        pairs, features = pairs_and_features(prepared, loaded, rules, workers=workers)
        pd.testing.assert_frame_equal(pairs, expected[0])
        pd.testing.assert_frame_equal(features, expected[1])
        assert pairs.attrs["rules"] == expected[0].attrs["rules"]
        # each at most once; those the last batch left in memory are used first, not read again
        assert len(reads) == len(set(reads)) and set(reads) == every - held and held


def test_block_sizes_counted_once_over_the_register_skip_the_same_keys_for_any_batch(tmp_path, data, one_core):
    # Reference: pandas' value_counts of the key over the whole register. Counted over every
    # partition once (keys held by one record then left out), a later batch needing only some
    # partitions, and any block limit down to 0, skips exactly the keys over the limit.
    from titlematch.linking.blocking import KeyRule, _key_hashes, _keys, _oversized, needed_partitions
    index, _ = one_core
    columns = ("name.phonetic", "city.value")
    rule = KeyRule("phonetic + place", columns)
    counts = pd.Series(_keys(index.prepared_, columns)).value_counts()
    index.save(tmp_path / "index", partition_rows=1_000)
    loaded = RegisterIndex.load(tmp_path / "index")
    new = loaded.prepare(data["new"])
    _oversized(loaded, rule, np.empty(0, np.uint64), 100, range(loaded.n_partitions))  # every partition once
    town = new[(new["city.value"] == new["city.value"].iloc[0]).to_numpy()].reset_index(drop=True)
    scope = needed_partitions(town, loaded, [rule])
    assert len(scope) < loaded.n_partitions
    for batch, partitions in ((new, range(loaded.n_partitions)), (town, scope)):
        keys = _keys(batch, columns)
        rows, hashes = _key_hashes(keys)
        size = counts.reindex(keys[rows]).fillna(0).to_numpy()
        for limit in (0, 1, 2, 5):
            assert np.array_equal(_oversized(loaded, rule, hashes, limit, partitions), size > limit)
    assert (counts == 1).any() and (counts > 5).any()
