"""Calibrated confidence vs the peer's predict_proba, on the held-out year of the Lakeshore scenario.

The threshold is chosen on the gold sample (a sample of the new year with expert and
production codes); its promise is checked on the rest of the new year (a fresh sample).

    python benchmarks/bench_confidence.py [--records-per-year 20000] [--min-accuracy 0.97]
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import _common  # noqa: F401  (first: the same numpy memory setting for titlematch and its peer)
import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from _common import table  # noqa: E402
from bench_coder import peer_model  # noqa: E402

from titlematch.confidence.calibration import calibrate  # noqa: E402
from titlematch.coding.coder import TitleCoder  # noqa: E402
from titlematch.measures.metrics import expected_calibration_error  # noqa: E402
from titlematch.datasets.scenario import classification, make_title_scenario  # noqa: E402


def automated_at(conf: np.ndarray, correct: np.ndarray, accuracy: float) -> float:
    """Largest share of records that can be accepted (highest confidence first) with accepted accuracy >= target."""
    order = np.argsort(-conf, kind="stable")
    running = np.cumsum(correct[order]) / np.arange(1, len(order) + 1)
    ok = np.flatnonzero(running >= accuracy)
    return float((ok.max() + 1) / len(conf)) if len(ok) else 0.0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--records-per-year", type=int, default=20_000)
    parser.add_argument("--new", type=int, default=8_000)
    parser.add_argument("--gold", type=int, default=3_000)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--min-accuracy", type=float, default=0.97)
    args = parser.parse_args(argv)

    data = make_title_scenario(seed=args.seed, records_per_year=args.records_per_year, new_records=args.new,
                               gold_records=args.gold)
    past, new, truth, gold = data["past"], data["new"], data["new_truth"], data["gold"]
    fresh = ~new["record_id"].isin(gold["record_id"]).to_numpy()
    expert = truth["code"].to_numpy()

    t0 = time.perf_counter()
    coder = TitleCoder().fit(past, past["code"], classification=classification())
    result = calibrate(coder, gold, min_accuracy=args.min_accuracy)
    coded = coder.code(new, confidence=result.model)
    t_ours = time.perf_counter() - t0
    conf = coded["confidence"].fillna(0).to_numpy()
    right = (coded["code"].to_numpy() == expert).astype(int)

    text = lambda f: (f["title"].fillna("") + " | " + f["context"].fillna("")).str.lower()
    t0 = time.perf_counter()
    peer = peer_model().fit(text(past), past["code"])
    proba = peer.predict_proba(text(new))
    t_peer = time.perf_counter() - t0
    peer_code = peer.classes_[proba.argmax(axis=1)]
    peer_conf = proba.max(axis=1)
    peer_right = (peer_code == expert).astype(int)

    accepted = fresh & (conf >= result.model.threshold_)
    realised = float(right[accepted].mean()) if accepted.any() else float("nan")
    expected = result.choice.expected_accuracy
    f = fresh
    rows = [
        ("ECE, 15 bins (fresh records)", f"{expected_calibration_error(right[f], conf[f]):.4f}",
         f"{expected_calibration_error(peer_right[f], peer_conf[f]):.4f}", "target <= 0.02"),
        *[(f"share automated at {level:.1%} accuracy (oracle sweep)",
           f"{automated_at(conf[f], right[f], level):.3f}",
           f"{automated_at(peer_conf[f], peer_right[f], level):.3f}",
           "target: peer + 0.05" if level == args.min_accuracy else "")
          for level in sorted({args.min_accuracy, 0.98, 0.99, 0.995})],
        ("top-1 accuracy (fresh records)", f"{right[f].mean():.4f}", f"{peer_right[f].mean():.4f}", ""),
        ("seconds (build + calibrate + code / train + predict)", f"{t_ours:.1f}", f"{t_peer:.1f}", ""),
    ]
    print(f"Lakeshore scenario: {len(past):,} past records; new year {len(new):,} records, gold sample "
          f"{len(gold):,}, fresh records {int(fresh.sum()):,}")
    print(table(rows, ("measure", "titlematch", "peer: TF-IDF + LR", "note")))
    print(f"\nthreshold chosen on the gold sample: {result.model.threshold_:.4f} ({result.choice.policy}); "
          f"{result.choice.describe()}")
    print(f"promise kept on fresh records: expected accuracy {expected:.4f}, realised {realised:.4f} "
          f"on {int(accepted.sum()):,} accepted ({accepted.sum() / fresh.sum():.1%}); "
          f"difference {100 * (realised - expected):+.2f} points (target within 1.5)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
