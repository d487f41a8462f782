"""Benchmark: link new establishments to an invented register, against the recordlinkage toolkit.

Both pipelines run on the same data from ``titlematch.datasets.scenario.make_register_scenario``.

- titlematch: ``RegisterIndex`` (built once, timed apart) + ``EstablishmentLinker.link``
  (union blocking, IDF-weighted comparisons, Fellegi–Sunter with EM m/u).
- peer: the recordlinkage toolkit's textbook pipeline: blocking on city plus
  sorted-neighbourhood on name, Jaro–Winkler (>= 0.85) on name, address, city and postcode,
  ``ECMClassifier``, after the toolkit's ``clean``; and the same toolkit tuned by hand
  (postcode blocks, name and address compared), so the comparison is not against a straw man.

Scored on links (record, register id): precision, recall, F1; for titlematch also the
precision of accepted records alone, the referral count, pairs completeness and reduction
ratio of blocking, and the hard negatives (new branches of register chains: the chain's
name at an address the register does not have) and how many were linked.

Also printed: candidate pairs scored per second per core, against the limit of one
rapidfuzz Jaro-Winkler comparison of the two names per pair (the least work that can score a
pair), measured on the same pairs on one core; and the peak memory of the process and its
forked workers (resident set of this process plus the unique memory of each child).

With ``--index-dir`` the index is also saved in partitions (``--partition-rows``) and the
records are linked against the saved index, read back partition by partition, as
``titlematch link --register DIR`` does; ``--dask`` then runs ``titlematch link`` with the
Dask engine on a local cluster of 2 single-threaded workers and with the local engine, on the
same files, and checks the two outputs are the same bytes.

    python benchmarks/bench_link.py --register-rows 50000 --new 5000           # mid case, with the peer
    python benchmarks/bench_link.py --register-rows 2000000 --new 200000 --skip-peer \
        --index-dir /tmp/register_index --partition-rows 500000 --dask          # large case
"""
from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

import _common  # noqa: F401  (first: the same numpy memory setting for titlematch and its peer)
import numpy as np
import pandas as pd

from titlematch.linking.blocking import blocking_quality
from titlematch.linking.linker import EstablishmentLinker
from titlematch.linking.register import RegisterIndex
from titlematch.datasets.scenario import make_register_scenario
from titlematch.runtime.pool import resolve_workers

sys.path.insert(0, str(Path(__file__).parent))
from _common import TreeMemory  # noqa: E402


def cpu_seconds() -> float:
    """CPU time of this process and its finished children (forked workers), user + system."""
    t = os.times()
    return t.user + t.system + t.children_user + t.children_system


def peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux reports KiB


def limit_pairs_per_second(out_pairs: pd.DataFrame, index: RegisterIndex, new_prepared: pd.DataFrame) -> float:
    """The limit: pairs per second of one Jaro-Winkler comparison of the two names, one core."""
    from rapidfuzz import process
    from rapidfuzz.distance import JaroWinkler
    a = new_prepared["name.key"].to_numpy(dtype=object)[out_pairs["new"].to_numpy()]
    names = index.display_["register_name"].str.lower().to_numpy(dtype=object)[out_pairs["register"].to_numpy()]
    start = time.perf_counter()
    process.cpdist(a, names, scorer=JaroWinkler.normalized_similarity, workers=1)
    return len(a) / max(time.perf_counter() - start, 1e-9)


def scores(predicted: pd.DataFrame, truth: dict[str, str]) -> dict:
    """Link-level precision/recall/F1; ``predicted`` has record_id and register_id (one row per link)."""
    n_true = sum(1 for v in truth.values() if v)
    tp = int((predicted["record_id"].map(truth) == predicted["register_id"]).sum())
    precision = tp / len(predicted) if len(predicted) else 0.0
    recall = tp / n_true if n_true else 0.0
    f1 = 2 * precision * recall / (precision + recall) if tp else 0.0
    return {"links": len(predicted), "tp": tp, "precision": precision, "recall": recall, "f1": f1}


def hard_negatives(data: dict) -> set[str]:
    """Record ids of new branches of register chains: same chain name, a new address, not on the register."""
    kinds = data["new_kinds"]
    return set(kinds.loc[kinds["kind"] == "new_branch", "record_id"])


def run_titlematch(data: dict, truth: dict[str, str], workers: int, index_dir: str | None = None,
                   partition_rows: int | None = None, regional: bool = False) -> dict:
    start, cpu = time.perf_counter(), cpu_seconds()
    index = RegisterIndex(workers=workers).fit(data["register"])
    built = time.perf_counter()
    saved_s = None
    if index_dir:  # link against the saved index, read back partition by partition
        index.save(index_dir, partition_rows=partition_rows)
        del index
        index = RegisterIndex.load(index_dir)
        saved_s = time.perf_counter() - built
        built = time.perf_counter()
    linker = EstablishmentLinker(workers=workers, regional=regional)
    out = linker.fit_link(index, data["new"])  # EM on the batch's own pairs, scored once
    done = time.perf_counter()
    cpu = cpu_seconds() - cpu
    linked = out[out["decision"] != "no-match"]
    accepted = out[out["decision"] == "accept"]
    result = {"index_s": built - start - (saved_s or 0.0), "save_s": saved_s, "link_s": done - built, "out": out,
              "linker": linker, "partitions": index.n_partitions, "cpu_s": cpu}
    result["all"] = scores(linked, truth)
    result["accepted"] = scores(accepted, truth)
    result["referred"] = int((out["decision"] == "refer").sum())
    position = pd.Series(np.arange(len(index)), index=index.ids_)
    row = pd.Series(np.arange(len(out)), index=out["record_id"].to_numpy())
    true_links = [(r, g) for r, g in truth.items() if g and r in row.index]
    true_pairs = pd.DataFrame({"new": row[[r for r, _ in true_links]].to_numpy(),
                               "register": position[[g for _, g in true_links]].to_numpy()})
    pairs = linker.candidate_pairs(data["new"])
    result["limit_pps"] = limit_pairs_per_second(pairs, index, index.prepare(data["new"], workers=workers))
    result["blocking"] = blocking_quality(pairs, true_pairs, len(out), len(index))
    result["rules"] = pairs.attrs["rules"]
    return result


def _toolkit_frames(data: dict):
    from recordlinkage.preprocessing import clean

    new = data["new"].set_index("record_id")
    register = data["register"].set_index("register_id")
    for frame in (new, register):
        for column in ("name", "address", "city"):
            frame[column] = clean(frame[column])  # the toolkit's own cleaning: lower case, no punctuation
    return new, register


def _links(links) -> pd.DataFrame:
    return pd.DataFrame({"record_id": links.get_level_values(0), "register_id": links.get_level_values(1)})


def run_peer(data: dict, truth: dict[str, str], block: str = "city",
             compared: tuple[str, ...] = ("name", "address", "city", "postcode")) -> dict:
    """The toolkit pipeline: block on ``block`` + sorted neighbourhood on name (window 9),
    Jaro-Winkler >= 0.85 on ``compared``, ``ECMClassifier``."""
    import recordlinkage

    start, cpu = time.perf_counter(), cpu_seconds()
    new, register = _toolkit_frames(data)
    indexer = recordlinkage.Index()
    indexer.block(block)
    indexer.sortedneighbourhood("name", window=9)
    pairs = indexer.index(new, register)
    compare = recordlinkage.Compare()
    for column in compared:
        compare.string(column, column, method="jarowinkler", threshold=0.85, label=column)
    features = compare.compute(pairs, new, register)
    matches = _links(recordlinkage.ECMClassifier().fit_predict(features))
    return {"time_s": time.perf_counter() - start, "cpu_s": cpu_seconds() - cpu, "pairs": len(pairs),
            "all": scores(matches, truth),
            "predicted": matches}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--register-rows", type=int, default=20_000)
    parser.add_argument("--new", type=int, default=3_000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--workers", type=int, default=-1)
    parser.add_argument("--skip-peer", action="store_true", help="do not run the recordlinkage pipeline")
    parser.add_argument("--index-dir", help="also save the index here in partitions and link against it")
    parser.add_argument("--partition-rows", type=int, default=None)
    parser.add_argument("--dask", action="store_true",
                        help="with --index-dir: titlematch link with the Dask engine (2 workers) and the local one")
    parser.add_argument("--chunk-rows", type=int, default=50_000, help="records per chunk for the --dask runs")
    parser.add_argument("--regional", action="store_true",
                        help="also link with regional blocking (every rule inside a postcode or place)")
    args = parser.parse_args(argv)
    memory = TreeMemory().__enter__()

    t0 = time.perf_counter()
    data = make_register_scenario(seed=args.seed, register_rows=args.register_rows, new_records=args.new)
    truth = dict(zip(data["truth"]["record_id"], data["truth"]["register_id"].fillna("")))
    print(f"scenario: register {len(data['register']):,} rows, new {len(data['new']):,} records "
          f"({sum(1 for v in truth.values() if v):,} on the register), built in {time.perf_counter() - t0:.1f} s")

    ours = run_titlematch(data, truth, args.workers, args.index_dir, args.partition_rows)
    a, acc, bq = ours["all"], ours["accepted"], ours["blocking"]
    cores = resolve_workers(args.workers)
    per_core = bq["pairs"] / ours["link_s"] / cores
    saved = f", saved in {ours['partitions']} partitions {ours['save_s']:.1f} s" if ours["save_s"] is not None else ""
    print(f"titlematch on {cores} core(s): index {ours['index_s']:.1f} s{saved}, link {ours['link_s']:.1f} s; "
          f"F1 {a['f1']:.4f} (precision {a['precision']:.4f}, recall {a['recall']:.4f}); "
          f"accepted precision {acc['precision']:.4f} on {acc['links']:,}, referred {ours['referred']:,}")
    print(f"  blocking: {bq['pairs']:,} pairs, pairs completeness {bq['pairs_completeness']:.4f}, "
          f"reduction ratio {bq['reduction_ratio']:.6f}")
    print(f"  {per_core:,.0f} candidate pairs scored per second per core (blocking, comparisons, model, "
          f"decisions); the limit, one Jaro-Winkler of the names per pair on one core: {ours['limit_pps']:,.0f} "
          f"pairs/s; ratio {per_core / ours['limit_pps']:.4f}")
    for name, info in ours["rules"].items():
        print(f"    {name}: {info['pairs']:,} pairs, {info['skipped_keys']:,} oversized keys skipped")
    negatives = hard_negatives(data)
    out = ours["out"]
    linked_ids = set(out.loc[out["decision"] != "no-match", "record_id"])
    accepted_ids = set(out.loc[out["decision"] == "accept", "record_id"])
    print(f"  hard negatives (new branches of register chains): {len(negatives):,}; linked "
          f"{len(negatives & linked_ids):,} (accepted {len(negatives & accepted_ids):,}, referred "
          f"{len(negatives & (linked_ids - accepted_ids)):,})")

    if args.regional:
        regional = run_titlematch(data, truth, args.workers, args.index_dir, args.partition_rows, regional=True)
        r, racc, rbq = regional["all"], regional["accepted"], regional["blocking"]
        print(f"titlematch, regional blocking: index {regional['index_s']:.1f} s, link {regional['link_s']:.1f} s; "
              f"F1 {r['f1']:.4f} (precision {r['precision']:.4f}, recall {r['recall']:.4f}); accepted precision "
              f"{racc['precision']:.4f} on {racc['links']:,}, referred {regional['referred']:,}; blocking "
              f"{rbq['pairs']:,} pairs, pairs completeness {rbq['pairs_completeness']:.4f}")
    if not args.skip_peer:
        total = ours["link_s"] + ours["index_s"]
        peers = [("peer as specified (block city + sorted neighbourhood name; Jaro-Winkler name, address, city, "
                  "postcode; ECM)", run_peer(data, truth)),
                 ("peer tuned by hand (block postcode + sorted neighbourhood name; Jaro-Winkler name, address; ECM)",
                  run_peer(data, truth, block="postcode", compared=("name", "address")))]
        for label, peer in peers:
            p = peer["all"]
            print(f"{label}: {peer['time_s']:.1f} s on {peer['pairs']:,} pairs; F1 {p['f1']:.4f} "
                  f"(precision {p['precision']:.4f}, recall {p['recall']:.4f}); hard negatives linked "
                  f"{len(negatives & set(peer['predicted']['record_id'])):,}")
            print(f"  titlematch vs this peer: F1 {100 * (a['f1'] - p['f1']):+.1f} points; titlematch's time "
                  f"(index + link) = {total / peer['time_s']:.3f}x the peer's ({peer['time_s'] / total:.1f}x "
                  f"faster; {peer['time_s'] / ours['link_s']:.1f}x with a built index); CPU time "
                  f"{ours['cpu_s']:.1f} s against {peer['cpu_s']:.1f} s ({ours['cpu_s'] / peer['cpu_s']:.3f}x)")
    if args.dask and args.index_dir:
        run_engines(data, args)
    memory.__exit__()
    print(f"peak memory {memory.peak_mb:,.0f} MB (this process and its workers; peak RSS of this process "
          f"{peak_rss_mb():,.0f} MB)")
    return 0


def run_engines(data: dict, args) -> None:
    """``titlematch link`` on the saved index with the Dask engine (2 workers) and the local engine."""
    import distributed
    from titlematch.cli import main as cli

    work = Path(tempfile.mkdtemp(prefix="bench_link_"))
    data["new"].to_csv(work / "new.csv", index=False)
    common = ["--register", args.index_dir, "--quiet", "--chunk-rows", str(args.chunk_rows)]
    start = time.perf_counter()
    assert cli(["link", str(work / "new.csv"), "--out", str(work / "local.csv"), *common]) == 0
    local_s = time.perf_counter() - start
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        start = time.perf_counter()
        assert cli(["link", str(work / "new.csv"), "--out", str(work / "dask.csv"), "--engine", "dask",
                    "--scheduler", cluster.scheduler_address, *common]) == 0
        dask_s = time.perf_counter() - start
    same = (work / "local.csv").read_bytes() == (work / "dask.csv").read_bytes()
    print(f"titlematch link on the saved index, {len(data['new']):,} records in chunks of {args.chunk_rows:,}: "
          f"local engine {local_s:.1f} s, Dask engine (2 workers) {dask_s:.1f} s "
          f"({local_s / dask_s:.2f}x the local engine's speed); outputs identical: {same}")


if __name__ == "__main__":
    sys.exit(main())
