"""``titlematch calibrate``: learn calibrated confidences and choose the acceptance threshold."""
from __future__ import annotations

import argparse

from ._run import probability

ORDER = 40


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("calibrate", help="learn calibrated confidences and the acceptance threshold",
                              description="Learn a confidence model for a dictionary from its own history, re-fit it "
                                          "on a gold sample when given, and choose the threshold by simulating "
                                          "machine plus human coding on the gold sample.")
    p.add_argument("--dictionary", required=True, metavar="DIR")
    p.add_argument("--gold", metavar="FILE", help="gold sample: title [, context], code (expert) [, manual_code]")
    p.add_argument("--min-accuracy", type=probability, metavar="A",
                   help="accept the most records whose accepted accuracy stays >= A (bootstrap lower bound)")
    p.add_argument("--out", required=True, metavar="MODEL_DIR")
    p.add_argument("--bootstrap", type=int, default=500, help="bootstrap resamples (default 500)")
    p.add_argument("--seed", type=int, default=0)
    return p


def run(args) -> int:
    from ..confidence.calibration import calibrate, save_calibration
    from ..coding.coder import TitleCoder
    from ..io import read_table
    from ..runtime.progress import Summary

    summary = Summary("calibrate", args.quiet)
    coder = TitleCoder.load(args.dictionary)
    gold = None
    if args.gold:
        gold = read_table(args.gold, required=("title", "code"))
    if args.min_accuracy is not None and not 0 < args.min_accuracy <= 1:
        raise SystemExit(f"titlematch calibrate: --min-accuracy must be in (0, 1], got {args.min_accuracy}")
    result = calibrate(coder, gold, min_accuracy=args.min_accuracy, n_boot=args.bootstrap, random_state=args.seed,
                       quiet=args.quiet)
    paths = save_calibration(result, args.out)
    r = result.report
    print(result.choice.describe())
    print(f"model {r['base_model']} ({r['label_source']}), ECE {r['ece_15_bins']:.4f}, Brier {r['brier']:.4f}, "
          f"evaluated on {r['evaluated_on']}")
    if "warning" in r:
        print("warning: " + r["warning"])
    print(f"model and report: {paths['model']}")
    summary.set(records=r["records"])
    summary.print()
    return 0
