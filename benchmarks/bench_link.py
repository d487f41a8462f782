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

    python benchmarks/bench_link.py                                   # 20,000 x 3,000, with the peer
    python benchmarks/bench_link.py --register-rows 1000000 --new 100000 --skip-peer
"""
from __future__ import annotations

import argparse
import resource
import sys
import time

import numpy as np
import pandas as pd

from titlematch.linking.blocking import blocking_quality
from titlematch.linking.linker import EstablishmentLinker
from titlematch.linking.register import RegisterIndex
from titlematch.datasets.scenario import make_register_scenario


def peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux reports KiB


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


def run_titlematch(data: dict, truth: dict[str, str], workers: int) -> dict:
    start = time.perf_counter()
    index = RegisterIndex().fit(data["register"])
    built = time.perf_counter()
    linker = EstablishmentLinker(workers=workers).fit(index, records=data["new"])  # EM on the batch
    out = linker.link(data["new"])
    done = time.perf_counter()
    linked = out[out["decision"] != "no-match"]
    accepted = out[out["decision"] == "accept"]
    result = {"index_s": built - start, "link_s": done - built, "out": out, "linker": linker}
    result["all"] = scores(linked, truth)
    result["accepted"] = scores(accepted, truth)
    result["referred"] = int((out["decision"] == "refer").sum())
    position = pd.Series(np.arange(len(index)), index=index.ids_)
    row = pd.Series(np.arange(len(out)), index=out["record_id"].to_numpy())
    true_links = [(r, g) for r, g in truth.items() if g and r in row.index]
    true_pairs = pd.DataFrame({"new": row[[r for r, _ in true_links]].to_numpy(),
                               "register": position[[g for _, g in true_links]].to_numpy()})
    pairs = linker.candidate_pairs(data["new"])
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

    start = time.perf_counter()
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
    return {"time_s": time.perf_counter() - start, "pairs": len(pairs), "all": scores(matches, truth),
            "predicted": matches}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--register-rows", type=int, default=20_000)
    parser.add_argument("--new", type=int, default=3_000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--workers", type=int, default=-1)
    parser.add_argument("--skip-peer", action="store_true", help="do not run the recordlinkage pipeline")
    args = parser.parse_args(argv)

    t0 = time.perf_counter()
    data = make_register_scenario(seed=args.seed, register_rows=args.register_rows, new_records=args.new)
    truth = dict(zip(data["truth"]["record_id"], data["truth"]["register_id"].fillna("")))
    print(f"scenario: register {len(data['register']):,} rows, new {len(data['new']):,} records "
          f"({sum(1 for v in truth.values() if v):,} on the register), built in {time.perf_counter() - t0:.1f} s")

    ours = run_titlematch(data, truth, args.workers)
    a, acc, bq = ours["all"], ours["accepted"], ours["blocking"]
    print(f"titlematch: index {ours['index_s']:.1f} s, link {ours['link_s']:.1f} s; "
          f"F1 {a['f1']:.4f} (precision {a['precision']:.4f}, recall {a['recall']:.4f}); "
          f"accepted precision {acc['precision']:.4f} on {acc['links']:,}, referred {ours['referred']:,}")
    print(f"  blocking: {bq['pairs']:,} pairs, pairs completeness {bq['pairs_completeness']:.4f}, "
          f"reduction ratio {bq['reduction_ratio']:.6f}")
    for name, info in ours["rules"].items():
        print(f"    {name}: {info['pairs']:,} pairs, {info['skipped_keys']:,} oversized keys skipped")
    negatives = hard_negatives(data)
    out = ours["out"]
    linked_ids = set(out.loc[out["decision"] != "no-match", "record_id"])
    accepted_ids = set(out.loc[out["decision"] == "accept", "record_id"])
    print(f"  hard negatives (new branches of register chains): {len(negatives):,}; linked "
          f"{len(negatives & linked_ids):,} (accepted {len(negatives & accepted_ids):,}, referred "
          f"{len(negatives & (linked_ids - accepted_ids)):,})")

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
            print(f"  titlematch vs this peer: F1 {100 * (a['f1'] - p['f1']):+.1f} points; time ratio "
                  f"{peer['time_s'] / total:.1f}x (index + link), {peer['time_s'] / ours['link_s']:.1f}x "
                  f"(link with a built index)")
    print(f"peak RSS {peak_rss_mb():,.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
