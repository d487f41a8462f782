"""``titlematch drift``: has the intake moved away from what the dictionary and the threshold were built on?"""
from __future__ import annotations

import argparse

from ._run import probability
from pathlib import Path

ORDER = 70


def add_parser(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "drift", help="compare two periods of coded (or raw) titles and flag shifts",
        description="Compare an old and a new file of coded output (or raw titles, then only the text measures): "
                    "unseen tokens and titles, new frequent titles, shift of the code mix and of the confidences, "
                    "expected automation share. Writes REPORT_DIR/drift.html, drift.csv and new_titles.csv.")
    parser.add_argument("old", metavar="OLD_FILE", help="coded output (or titles) of the reference period")
    parser.add_argument("new", metavar="NEW_FILE", help="coded output (or titles) of the period to check")
    parser.add_argument("--out", required=True, metavar="REPORT_DIR", help="directory for the report")
    parser.add_argument("--dictionary", metavar="DIR", default=None,
                        help="title dictionary to measure unseen tokens and titles against (default: the old file)")
    parser.add_argument("--threshold", type=probability, default=None, metavar="T",
                        help="acceptance threshold for the expected automation share (default: the 'decision' "
                             "column, when both files have it)")
    parser.add_argument("--psi-limit", type=float, default=0.2, metavar="X",
                        help="flag a population stability index above X (default 0.2; common practice reads "
                             "0.1-0.25 as moderate and above 0.25 as a major shift)")
    parser.add_argument("--unseen-limit", type=float, default=0.3, metavar="X",
                        help="flag when more than this share of new titles is unseen (default 0.3)")
    parser.add_argument("--unseen-token-limit", type=float, default=0.05, metavar="X",
                        help="flag when more than this share of new tokens is unseen (default 0.05)")
    parser.add_argument("--js-limit", type=float, default=0.1, metavar="X",
                        help="flag a Jensen-Shannon distance of the code mix above X (default 0.1)")
    parser.add_argument("--ks-limit", type=float, default=0.1, metavar="X",
                        help="flag a Kolmogorov-Smirnov statistic of the confidences above X (default 0.1)")
    parser.add_argument("--automation-drop-limit", type=float, default=0.1, metavar="X",
                        help="flag when the automation share falls by more than X (default 0.1)")
    parser.add_argument("--top", type=int, default=20, help="rows of the new-titles table (default 20)")
    parser.add_argument("--fail-on-flag", action="store_true",
                        help="exit with status 1 when any measure is flagged (for scheduled checks)")
    parser.add_argument("--encoding", default=None, help="encoding of CSV inputs (default: detected)")
    return parser


def run(args) -> int:
    from ..reporting.drift import DriftLimits, measure_drift, prepare, write_drift_report
    from ..io import InputError, Rejects, read_table
    from ..runtime.progress import Summary

    summary = Summary("drift", args.quiet)
    if args.threshold is not None and not 0 <= args.threshold <= 1:
        raise InputError(f"--threshold must lie in [0, 1], got {args.threshold}")
    if args.top < 1:
        raise InputError(f"--top must be at least 1, got {args.top}")
    try:
        limits = DriftLimits(psi=args.psi_limit, unseen_titles=args.unseen_limit,
                             unseen_tokens=args.unseen_token_limit, js_distance=args.js_limit, ks=args.ks_limit,
                             automation_drop=args.automation_drop_limit)
    except ValueError as exc:
        raise InputError(str(exc)) from None
    rejects = Rejects()
    frames = []
    for path in (args.old, args.new):
        name = str(Path(path))
        frames.append(prepare(read_table(path, encoding=args.encoding, rejects=rejects), name, rejects))
    old, new = frames
    vocabulary = known_keys = group_of = None
    if args.dictionary:
        from ..coding.dictionary import TitleDictionary
        dictionary = TitleDictionary.load(args.dictionary)
        vocabulary = dictionary.vocabulary.index
        known_keys = dictionary.entries["key"]
        group_of = dictionary.hierarchy.top_of
    try:
        result = measure_drift(old, new, vocabulary=vocabulary, known_keys=known_keys, threshold=args.threshold,
                               limits=limits, top=args.top, group_of=group_of)
    except ValueError as exc:
        raise InputError(f"{args.old} / {args.new}: {exc}") from None
    if args.dictionary:
        result.facts["title dictionary"] = str(args.dictionary)
    result.facts.update({"old file": str(args.old), "new file": str(args.new)})
    written = write_drift_report(result, args.out)
    rejects.write(Path(args.out) / "rejects.csv")
    flagged = result.flagged
    if not args.quiet:
        for measure, value, limit in zip(flagged["measure"], flagged["value"], flagged["limit"]):
            print(f"flagged: {measure} = {value:.4f} (limit {limit:g})")
        print(f"report: {written['report']}")
    summary.set(rows_in=len(old) + len(new), old=len(old), new=len(new), flagged=len(flagged),
                rejected=len(rejects.rows()))
    summary.print()
    return 1 if (args.fail_on_flag and len(flagged)) else 0
