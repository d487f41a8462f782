"""Real titles: titlematch's command line against the protocol's peer on ESCO's human-written labels.

The protocol in ../shared/reference/README.md (see _esco.py): ESCO v1.0 occupation labels of the dev
half, split by a stable hash of the label into past coded records (three years), a gold sample and
new records; codes are the 436 ISCO-08 unit groups. titlematch runs as an office would run it:
``dictionary --classification isco08`` -> ``calibrate --gold --min-accuracy 0.9`` -> ``code --model``;
the peer (TF-IDF word 1-2-grams + char_wb 2-4-grams, sublinear tf, LogisticRegression(C=10)) is fitted
on the same past records, its threshold chosen on the same gold sample. Printed side by side.

    python benchmarks/bench_real_titles.py [--two-per-code]

``--two-per-code`` keeps at most two past labels per code: the few-examples regime.
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import _common  # noqa: F401  (first: the same numpy memory setting for titlematch and its peer)
import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).parent))
import _esco  # noqa: E402
from _common import table  # noqa: E402

from titlematch.cli import main as cli  # noqa: E402
from titlematch.coding.coder import TitleCoder  # noqa: E402
from titlematch.confidence.model import ConfidenceModel  # noqa: E402
from titlematch.measures.metrics import expected_calibration_error  # noqa: E402
from titlematch.runtime.pool import map_slices, slices  # noqa: E402


def _measures(codes: pd.DataFrame, truth: np.ndarray, conf: np.ndarray, accepted: dict) -> dict:
    right = codes["code"].to_numpy() == truth
    top3 = right | (codes["code_2"].to_numpy() == truth) | (codes["code_3"].to_numpy() == truth)
    parent = np.array([c[:3] for c in codes["code"]]) == np.array([t[:3] for t in truth])  # ISCO-08 minor group
    out = {"top-1 accuracy": right.mean(), "top-3 accuracy": top3.mean(),
           "parent-group accuracy (3-digit minor group)": parent.mean(),
           "ECE (15 bins)": expected_calibration_error(right.astype(int), np.nan_to_num(conf), n_bins=15)}
    for level, mask in accepted.items():
        share = mask.mean()
        acc = right[mask].mean() if mask.any() else float("nan")
        out[f"automated at {level:.0%} (accuracy realised)"] = f"{share:.3f} ({acc:.3f})"
    return out


def run_titlematch(data: dict, work: Path) -> dict:
    files = {}
    for name in ("past", "gold", "new"):
        files[name] = str(work / f"{name}.csv")
        data[name][["title"] if name == "new" else data[name].columns].to_csv(files[name], index=False)
    times = {}
    start = time.perf_counter()
    cli(["dictionary", files["past"], "--classification", "isco08", "--out", str(work / "dictionary"), "--quiet"])
    times["build"] = time.perf_counter() - start
    start = time.perf_counter()
    cli(["calibrate", "--dictionary", str(work / "dictionary"), "--gold", files["gold"], "--min-accuracy", "0.9",
         "--out", str(work / "model"), "--quiet"])
    times["calibrate"] = time.perf_counter() - start
    start = time.perf_counter()
    cli(["code", files["new"], "--dictionary", str(work / "dictionary"), "--model", str(work / "model"),
         "--out", str(work / "coded.csv"), "--quiet"])
    times["code"] = time.perf_counter() - start
    # the 95% threshold, chosen by titlematch on the same gold sample (not timed: a second policy)
    cli(["calibrate", "--dictionary", str(work / "dictionary"), "--gold", files["gold"], "--min-accuracy", "0.95",
         "--out", str(work / "model95"), "--quiet"])
    coded = pd.read_csv(work / "coded.csv", dtype=str, keep_default_na=False)
    conf = pd.to_numeric(coded["confidence"], errors="coerce").fillna(0.0).to_numpy()
    t95 = ConfidenceModel.load(work / "model95").threshold_
    accepted = {0.9: coded["decision"].to_numpy() == "accept", 0.95: conf >= t95}
    result = _measures(coded, data["new"]["code"].to_numpy(), conf, accepted)
    # throughput once loaded: distinct new titles through the coder and the confidence model
    coder, model = TitleCoder.load(work / "dictionary"), ConfidenceModel.load(work / "model")
    titles = data["new"][["title"]].drop_duplicates()
    start = time.perf_counter()
    one = coder.code(titles, confidence=model)
    rate = len(titles) / (time.perf_counter() - start)
    # both cores: the same coder forked into two processes, each coding half the titles (a title's
    # code never depends on the rest of its batch, so the halves give the same output)
    start = time.perf_counter()
    halves = map_slices(lambda part: coder.code(titles.iloc[part], confidence=model), slices(len(titles), 2), workers=2)
    rate2 = len(titles) / (time.perf_counter() - start)
    assert pd.concat(halves).equals(one), "two workers must give the output of one"
    return result | {"time (s)": f"{sum(times.values()):.1f} (build {times['build']:.1f}, calibrate "
                                  f"{times['calibrate']:.1f}, code {times['code']:.1f})",
                     "distinct titles per second once loaded": f"{rate:,.0f} (2 workers: {rate2:,.0f})",
                     "_seconds": sum(times.values())}


def run_peer(data: dict) -> dict:
    peer = _esco.run_peer(data)
    truth_gold, truth_new = data["gold"]["code"].to_numpy(), data["new"]["code"].to_numpy()
    right_gold = peer["gold"]["code"].to_numpy() == truth_gold
    right_new = peer["new"]["code"].to_numpy() == truth_new
    accepted = {}
    for level in (0.9, 0.95):
        threshold, _, _ = _esco.share_at(peer["gold"]["confidence"], right_gold, peer["new"]["confidence"],
                                        right_new, level)
        accepted[level] = peer["new"]["confidence"].to_numpy() >= threshold
    result = _measures(peer["new"], truth_new, peer["new"]["confidence"].to_numpy(), accepted)
    titles = data["new"]["title"].drop_duplicates()
    start = time.perf_counter()
    peer["model"].predict_proba(titles)
    rate = len(titles) / (time.perf_counter() - start)
    return result | {"time (s)": f"{peer['seconds']:.1f} (fit + predict)",
                     "distinct titles per second once loaded": f"{rate:,.0f}", "_seconds": peer["seconds"]}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--two-per-code", action="store_true", help="at most two past labels per code")
    args = parser.parse_args(argv)
    data = _esco.split(_esco.load_labels())
    if args.two_per_code:
        data["past"] = _esco.two_per_code(data["past"])
    print(f"ESCO dev half{' (two past labels per code)' if args.two_per_code else ''}: past "
          f"{len(data['past']):,}, gold {len(data['gold']):,}, new {len(data['new']):,}; ISCO-08, 436 unit groups")
    with tempfile.TemporaryDirectory() as tmp:
        ours = run_titlematch(data, Path(tmp))
    peer = run_peer(data)
    rows = []
    for key in ours:
        if key.startswith("_"):
            continue
        fmt = (lambda v: f"{v:.3f}" if isinstance(v, float) else str(v))
        rows.append((key, fmt(ours[key]), fmt(peer[key])))
    rows.append(("time ratio titlematch / peer", f"{ours['_seconds'] / peer['_seconds']:.2f}", "1"))
    print(table(rows, ("measure (new records)", "titlematch", "peer")))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
