"""``titlematch disagreements``: manual codes the model contradicts with high confidence."""
from __future__ import annotations

import argparse

ORDER = 64


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("disagreements", help="list manual codes the model contradicts with high confidence",
                              description="Code a file that already has manual codes and list the records whose "
                                          "manual code the model contradicts with high confidence, most confident "
                                          "first: the review-first mode before trusting automation.")
    p.add_argument("file", metavar="FILE", help="CSV or Parquet with title [, context] and the manual code column")
    p.add_argument("--dictionary", required=True, metavar="DIR")
    p.add_argument("--model", required=True, metavar="MODEL")
    p.add_argument("--manual-col", required=True, metavar="COL")
    p.add_argument("--out", required=True, metavar="FILE")
    p.add_argument("--min-confidence", type=float, default=0.9, help="list disagreements at or above (default 0.9)")
    p.add_argument("--title-col", default="title")
    p.add_argument("--context-col", default="context")
    return p


def run(args) -> int:
    from ..coding.coder import TitleCoder
    from ..confidence.model import ConfidenceModel
    from ..io import read_table, write_table
    from ..runtime.progress import Summary
    from ..review.queue import disagreements

    summary = Summary("disagreements", args.quiet)
    coder = TitleCoder.load(args.dictionary)
    model = ConfidenceModel.load(args.model)
    frame = read_table(args.file, required=(args.title_col, args.manual_col))
    work = frame.rename(columns={args.title_col: "title", args.context_col: "context"})
    coded = coder.code(work, confidence=model).rename(columns={"title": args.title_col, "context": args.context_col})
    found = disagreements(coded, args.manual_col, min_confidence=args.min_confidence)
    write_table(found, args.out)
    summary.set(rows_in=len(frame), disagreements=len(found))
    summary.print()
    return 0
