"""``titlematch code``: code new job titles against a dictionary (and a confidence model).

The file is streamed in chunks through :func:`titlematch.runtime.runner.run_chunked`, so memory stays
flat, an interrupted run resumes, and ``--engine dask`` spreads chunks over a cluster with the
dictionary shipped to each worker once. Coding a title depends only on its own text and
context, so the output is the same however the file is cut into chunks.
"""
from __future__ import annotations

import argparse

from ._run import add_run_arguments, run_arguments

ORDER = 30


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("code", help="code new job titles with a dictionary",
                              description="Code new job titles: adds title_normalized, code, code_title, score and "
                                          "the next two candidates; with --model also confidence and decision.")
    p.add_argument("file", metavar="FILE", help="CSV or Parquet with a title column [, context]")
    p.add_argument("--dictionary", required=True, metavar="DIR")
    p.add_argument("--model", metavar="MODEL_DIR", help="confidence model from 'titlematch calibrate'")
    p.add_argument("--out", required=True, metavar="FILE", help="output CSV or Parquet (by suffix)")
    p.add_argument("--title-col", default="title")
    p.add_argument("--context-col", default="context")
    p.add_argument("--output-prefix", default="", metavar="PREFIX",
                   help="write the added columns as PREFIXcode, PREFIXconfidence, ...; input columns are never "
                        "overwritten, so a file with its own code, confidence or decision column needs this")
    p.add_argument("--features", metavar="FILE", help="also write every candidate's features here (reads FILE whole)")
    p.add_argument("--threshold", type=float, help="override the model's acceptance threshold")
    add_run_arguments(p)
    return p


class CodeStep:
    """The per-chunk step: every input column plus the coder's columns. Loaded once per process."""

    def __init__(self, dictionary: str, model: str | None, title_col: str, context_col: str,
                 threshold: float | None = None, output_prefix: str = "", source: str = "<input>"):
        from ..coding.coder import TitleCoder
        self.coder = TitleCoder.load(dictionary).set_params(title_col=title_col, context_col=context_col,
                                                            output_prefix=output_prefix)
        self.model = None
        if model:
            from ..confidence.model import ConfidenceModel
            self.model = ConfidenceModel.load(model)
            if threshold is not None:
                self.model.threshold_ = threshold
        self.source = source

    def __call__(self, frame):
        frame.attrs["source_file"] = self.source
        return self.coder.code(frame, confidence=self.model)


def run(args) -> int:
    import pandas as pd

    from ..io import read_table, write_table
    from ..runtime.progress import Summary
    from ..runtime.fingerprint import run_options
    from ..runtime.runner import run_chunked

    summary = Summary("code", args.quiet)
    step = CodeStep(args.dictionary, args.model, args.title_col, args.context_col, args.threshold,
                    args.output_prefix, str(args.file))
    options = run_options("code", {"dictionary": args.dictionary, "model": args.model},
                          title_col=args.title_col, context_col=args.context_col, threshold=args.threshold,
                          output_prefix=args.output_prefix)
    result = run_chunked(args.file, args.out, step, required=[args.title_col], options=options,
                         desc="code titles", **run_arguments(args))
    counts = {"rows_in": result.rows_in, "coded": result.rows_out}
    if step.model is not None:
        column = args.output_prefix + "decision"
        decisions = pd.read_parquet(result.output, columns=[column]) if str(result.output).endswith(
            (".parquet", ".pq")) else pd.read_csv(result.output, usecols=[column], dtype=str)
        counts |= {"accepted": int((decisions[column] == "accept").sum()),
                   "referred": int((decisions[column] == "refer").sum())}
    counts["rejected"] = result.rows_rejected
    if result.resumed_from:
        counts["chunks_resumed"] = result.resumed_from
    summary.set(**counts)
    summary.print()
    if args.features:
        frame = read_table(args.file, required=(args.title_col,), encoding=args.encoding)
        write_table(step.coder.features(frame), args.features)
    return 0
