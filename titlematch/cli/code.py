"""``titlematch code``: code new job titles against a dictionary (and a confidence model)."""
from __future__ import annotations

import argparse

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
    p.add_argument("--features", metavar="FILE", help="also write every candidate's features here")
    p.add_argument("--threshold", type=float, help="override the model's acceptance threshold")
    return p


def run(args) -> int:
    from ..coder import TitleCoder
    from ..io import read_table, rejects_path_for, Rejects, write_table
    from ..progress import Summary

    summary = Summary("code", args.quiet)
    coder = TitleCoder.load(args.dictionary)
    model = _load_model(args)
    rejects = Rejects()
    frame = read_table(args.file, required=(args.title_col,), rejects=rejects)
    work = frame.rename(columns={args.title_col: "title", args.context_col: "context"})
    coded = coder.code(work, confidence=model)
    coded = coded.rename(columns={"title": args.title_col, "context": args.context_col})
    write_table(coded, args.out)
    if args.features:
        write_table(coder.features(work), args.features)
    rejects.write(rejects_path_for(args.out))
    counts = {"rows_in": len(frame) + len(rejects.rows()), "coded": int((coded["code"] != "").sum())}
    if model is not None:
        counts |= {"accepted": int((coded["decision"] == "accept").sum()),
                   "referred": int((coded["decision"] == "refer").sum())}
    summary.set(**counts, rejected=len(rejects.rows()))
    summary.print()
    return 0


def _load_model(args):
    if not args.model:
        return None
    from ..confidence import ConfidenceModel
    model = ConfidenceModel.load(args.model)
    if args.threshold is not None:
        model.threshold_ = args.threshold
    return model
