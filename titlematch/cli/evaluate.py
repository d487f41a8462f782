"""``titlematch evaluate``: quality of coded output on a gold sample, the threshold to use, an HTML report."""
from __future__ import annotations

import argparse

from ._run import probability
from pathlib import Path

from ..coding.levels import SOC_LEVELS

ORDER = 66


def add_parser(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "evaluate", help="measure coded output against a gold sample and choose the referral threshold",
        description="Join coded output to a gold sample (expert codes in column 'code', optional 'manual_code'), "
                    "report accuracy, macro-F1, calibration and the automation-versus-quality curve, and choose "
                    "the threshold above which codes are accepted. Writes REPORT_DIR/report.html and CSV files.")
    parser.add_argument("coded", metavar="CODED_FILE", help="output of 'titlematch code' (CSV, Parquet or .xlsx)")
    parser.add_argument("--gold", required=True, metavar="FILE", help="gold sample with the expert's 'code'")
    parser.add_argument("--out", required=True, metavar="REPORT_DIR", help="directory for the report")
    parser.add_argument("--min-accuracy", type=probability, default=None, metavar="A",
                        help="choose the most automation whose accepted records are right at rate A or better "
                             "(default: no worse than coders alone when the gold sample has 'manual_code', "
                             "else A = 0.97)")
    parser.add_argument("--margin", type=float, default=0.0, metavar="M",
                        help="with manual codes: how much lower than coders alone the overall accuracy may be "
                             "(default 0)")
    parser.add_argument("--level", choices=SOC_LEVELS, default="as_given",
                        help="compare codes at this SOC level (default: as given)")
    parser.add_argument("--classification", metavar="NAME|FILE|DICTIONARY_DIR", default=None,
                        help="group codes by this classification's hierarchy: a built-in name (isco08, onet2019, "
                             "soc2018), a classification file or a dictionary directory (default: the codes' shape)")
    parser.add_argument("--bootstrap", type=int, default=1000, metavar="N", help="bootstrap resamples (default 1000)")
    parser.add_argument("--seed", type=int, default=0, help="random seed of the bootstrap (default 0)")
    parser.add_argument("--bins", type=int, default=15, help="confidence bins for calibration (default 15)")
    parser.add_argument("--top", type=int, default=20, help="rows of the confusion table (default 20)")
    parser.add_argument("--decisions", metavar="FILE",
                        help="decisions file of 'titlematch review': adds the coders' agreement on its "
                             "double-coded sample (percent agreement, Cohen's kappa, by parent group)")
    parser.add_argument("--encoding", default=None, help="encoding of CSV inputs (default: detected)")
    return parser


def run(args) -> int:
    from ..reporting.evaluate import evaluate, write_report
    from ..io import InputError, Rejects, read_table
    from ..runtime.progress import Summary

    summary = Summary("evaluate", args.quiet)
    for name, value, low in (("--bootstrap", args.bootstrap, 1), ("--bins", args.bins, 1), ("--top", args.top, 1)):
        if value < low:
            raise InputError(f"{name} must be at least {low}, got {value}")
    if args.min_accuracy is not None and not 0 < args.min_accuracy <= 1:
        raise InputError(f"--min-accuracy must lie in (0, 1], got {args.min_accuracy}")
    if args.margin < 0:
        raise InputError(f"--margin must be zero or positive, got {args.margin}")
    rejects = Rejects()
    coded = read_table(args.coded, required=["code"], encoding=args.encoding, rejects=rejects)
    gold = read_table(args.gold, required=["code"], encoding=args.encoding, rejects=rejects)
    result = evaluate(coded, gold, min_accuracy=args.min_accuracy, margin=args.margin, n_boot=args.bootstrap,
                      seed=args.seed, n_bins=args.bins, level=args.level, top=args.top,
                      coded_name=str(Path(args.coded)), gold_name=str(Path(args.gold)), rejects=rejects,
                      quiet=args.quiet, hierarchy=_hierarchy(args.classification))
    if args.decisions:
        from ..reporting.evaluate import add_agreement
        from ..review.decisions import read_journal
        add_agreement(result, read_journal(args.decisions), str(args.decisions))
    written = write_report(result, args.out)
    counts = {"rows_in": len(gold), "evaluated": len(result.records)}
    if result.choice is not None:
        accepted = int((result.records["confidence"] >= result.choice.threshold).sum())
        counts.update(accepted=accepted, referred=len(result.records) - accepted)
        if not args.quiet:
            print(result.choice.describe())
    counts["rejected"] = len(rejects.rows())
    if not args.quiet:
        print(f"report: {written['report']}")
    summary.set(**counts)
    summary.print()
    return 0


def _hierarchy(name: str | None):
    if name is None:
        return None
    if (Path(name) / "manifest.json").is_file():
        from ..coding.dictionary import TitleDictionary
        return TitleDictionary.load(name).hierarchy
    from ..coding.classification import Classification
    return Classification.resolve(name)
