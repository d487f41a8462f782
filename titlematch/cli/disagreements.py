"""``titlematch disagreements``: manual codes the model contradicts with high confidence."""
from __future__ import annotations

import argparse

from ._run import check_title_context, probability

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
    p.add_argument("--min-confidence", type=probability, default=0.9, help="list disagreements at or above (default 0.9)")
    p.add_argument("--title-col", default="title")
    p.add_argument("--context-col", default="context")
    p.add_argument("--output-prefix", default="", metavar="PREFIX",
                   help="write the model's columns as PREFIXcode, PREFIXconfidence, ...; needed when the file "
                        "has its own code column (a gold sample's expert code): input columns are never "
                        "overwritten")
    return p


def run(args) -> int:
    check_title_context(args)
    from ..coding.coder import TitleCoder
    from ..confidence.model import ConfidenceModel
    from ..io import read_table, write_table
    from ..runtime.progress import Summary
    from ..review.queue import disagreements

    summary = Summary("disagreements", args.quiet)
    coder = TitleCoder.load(args.dictionary).set_params(title_col=args.title_col, context_col=args.context_col,
                                                        output_prefix=args.output_prefix)
    model = ConfidenceModel.load(args.model)
    frame = read_table(args.file, required=(args.title_col, args.manual_col))
    frame.attrs["source_file"] = str(args.file)
    coded = coder.code(frame, confidence=model)
    found = disagreements(coded, args.manual_col, min_confidence=args.min_confidence, prefix=args.output_prefix)
    write_table(found, args.out)
    summary.set(rows_in=len(frame), disagreements=len(found))
    summary.print()
    return 0
