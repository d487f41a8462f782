"""Title coder vs the published TF-IDF + logistic regression method, same data, same run.

Data: the invented Lakeshore scenario (titlematch.datasets.scenario), several past years with production
label noise, and a held-out new year with expert codes. Prints accuracy, candidate recall,
reduction ratio, times and ratios; then a scale run (build from --scale-records past records,
code throughput, peak memory).

    python benchmarks/bench_coder.py [--records-per-year 20000] [--scale-records 1000000]
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import _common  # noqa: F401  (first: the same numpy memory setting for titlematch and its peer)
import numpy as np
import pandas as pd
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline, make_union

sys.path.insert(0, str(Path(__file__).parent))
from _common import PeakMemory, table  # noqa: E402

from titlematch.coding.coder import TitleCoder  # noqa: E402
from titlematch.datasets.scenario import classification, make_title_scenario  # noqa: E402


def peer_model():
    """The published method: TF-IDF word 1-2-grams + character 4-grams into logistic regression."""
    features = make_union(TfidfVectorizer(analyzer="word", ngram_range=(1, 2), sublinear_tf=True, min_df=1),
                          TfidfVectorizer(analyzer="char_wb", ngram_range=(4, 4), sublinear_tf=True, min_df=1))
    return make_pipeline(features, LogisticRegression(C=10.0, max_iter=100))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--records-per-year", type=int, default=20_000)
    parser.add_argument("--new", type=int, default=6_000)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--scale-records", type=int, default=0, help="also build from this many past records")
    parser.add_argument("--scale-new", type=int, default=100_000)
    parser.add_argument("--scale-only", action="store_true", help="only the scale run (no peer, no accuracy)")
    args = parser.parse_args(argv)

    if args.scale_only:
        return scale_run(args, classification())
    data = make_title_scenario(seed=args.seed, records_per_year=args.records_per_year, new_records=args.new)
    past, new, truth = data["past"], data["new"], data["new_truth"]
    soc = classification()
    expert = truth["code"].to_numpy()

    t0 = time.perf_counter()
    coder = TitleCoder().fit(past, past["code"], classification=soc)
    t_build = time.perf_counter() - t0
    t0 = time.perf_counter()
    coded = coder.code(new)
    t_code = time.perf_counter() - t0
    feats = coder.features(new)
    ours_acc = float((coded["code"].to_numpy() == expert).mean())
    hit = feats.assign(ok=feats["code"].to_numpy() == expert[feats["record"].to_numpy()]).groupby("record")["ok"].any()
    recall = float(hit.reindex(range(len(new)), fill_value=False).mean())
    per_record = feats.groupby("record").size().reindex(range(len(new)), fill_value=0)
    reduction = 1 - per_record.mean() / len(coder.classes_)

    text = lambda f: (f["title"].fillna("") + " | " + f["context"].fillna("")).str.lower()
    peer = peer_model()
    t0 = time.perf_counter()
    peer.fit(text(past), past["code"])
    t_peer_train = time.perf_counter() - t0
    t0 = time.perf_counter()
    peer_pred = peer.predict(text(new))
    t_peer_predict = time.perf_counter() - t0
    peer_acc = float((peer_pred == expert).mean())
    manual_acc = float((truth["manual_code"].to_numpy() == expert).mean())

    ours_total, peer_total = t_build + t_code, t_peer_train + t_peer_predict
    print(f"Lakeshore scenario: {len(past):,} past records ({past['year'].nunique()} years), "
          f"{len(new):,} new records with expert codes; production coding is right at {manual_acc:.1%}")
    rows = [("top-1 accuracy vs expert codes", f"{ours_acc:.4f}", f"{peer_acc:.4f}", f"{100 * (ours_acc - peer_acc):+.1f} points"),
            ("candidate recall (true code among candidates)", f"{recall:.4f}", "-", ""),
            ("reduction ratio (1 - candidates / codes)", f"{reduction:.4f}", "-", ""),
            ("build / train seconds", f"{t_build:.2f}", f"{t_peer_train:.2f}", f"{t_peer_train / t_build:.1f}x faster"),
            ("code / predict seconds", f"{t_code:.2f}", f"{t_peer_predict:.2f}", ""),
            ("build + code vs train + predict", f"{ours_total:.2f}", f"{peer_total:.2f}", f"{peer_total / ours_total:.1f}x faster")]
    print(table(rows, ("measure", "titlematch", "peer: TF-IDF + LR", "difference")))

    if args.scale_records:
        scale_run(args, soc)
    return 0


def scale_run(args, soc) -> int:
    if args.scale_records:
        big = make_title_scenario(seed=args.seed + 1, records_per_year=args.scale_records // 3,
                                  new_records=args.scale_new, gold_records=100)
        with PeakMemory() as mem:
            t0 = time.perf_counter()
            big_coder = TitleCoder().fit(big["past"], big["past"]["code"], classification=soc)
            t_big = time.perf_counter() - t0
            t0 = time.perf_counter()
            big_coder.code(big["new"])
            t_big_code = time.perf_counter() - t0
            # real files repeat heavily: 1M titles drawn Zipf-like from 30,000 (bench_normalize's pool)
            from bench_normalize import sample_rows, title_pool
            repeated = pd.DataFrame({"title": sample_rows(title_pool(30_000), 1_000_000).to_numpy()})
            t0 = time.perf_counter()
            big_coder.code(repeated)
            t_repeated = time.perf_counter() - t0
        rate = len(big["new"]) / t_big_code
        print(f"\nscale: build from {len(big['past']):,} records {t_big:.1f} s (target < 120 s); "
              f"peak memory {mem.peak_mb:,.0f} MB (target < 4,096 MB)")
        print(f"coding (target >= 25,000 titles/s): the scenario's new year, {len(big['new']):,} titles "
              f"({big['new'][['title', 'context']].drop_duplicates().shape[0]:,} distinct title + context), "
              f"{t_big_code:.1f} s = {rate:,.0f} titles/s; 1,000,000 repetitive titles "
              f"({repeated['title'].nunique():,} distinct), {t_repeated:.1f} s = {1e6 / t_repeated:,.0f} titles/s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
