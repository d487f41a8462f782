"""``titlematch code``: code new job titles against a dictionary (and a confidence model).

The file is streamed in chunks through :func:`titlematch.runtime.runner.run_chunked`, so memory stays
flat, an interrupted run resumes, and ``--engine dask`` spreads chunks over a cluster with the
dictionary shipped to each worker once. Coding a title depends only on its own text and
context, so the output is the same however the file is cut into chunks.
"""
from __future__ import annotations

import argparse

from ._run import add_run_arguments, check_title_context, probability, run_arguments

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
    p.add_argument("--features", metavar="FILE",
                   help="also write every candidate's features here (CSV or Parquet), from the same streamed "
                        "pass: one row per (input row, candidate), with the input's row number in 'row'")
    p.add_argument("--threshold", type=probability, help="override the model's acceptance threshold")
    add_run_arguments(p)
    return p


class CodeStep:
    """The per-chunk step: every input column plus the coder's columns. Loaded once per process."""

    def __init__(self, dictionary: str, model: str | None, title_col: str, context_col: str,
                 threshold: float | None = None, output_prefix: str = "", source: str = "<input>",
                 features_dir: str | None = None):
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
        self.features_dir = features_dir

    def __call__(self, frame):
        frame.attrs["source_file"] = self.source
        if self.features_dir is None or not len(frame):
            return self.coder.code(frame, confidence=self.model)
        coded, features = self.coder.code_and_features(frame, confidence=self.model)
        _write_features_part(features, frame, self.features_dir)
        return coded


def _write_features_part(features, frame, directory: str) -> None:
    """A chunk's features beside the run, named by its first source row; written before the runner
    journals the chunk, so a resumed run finds the parts of every chunk it does not redo."""
    from pathlib import Path

    from ..io import ROW_COLUMN, atomic_path
    rows = frame[ROW_COLUMN].to_numpy()
    features = features.rename(columns={"record": "row"})
    features["row"] = rows[features["row"].to_numpy()]
    with atomic_path(Path(directory) / f"part-{int(rows[0]):012d}.parquet") as tmp:
        features.to_parquet(tmp, index=False)


def _assemble_features(directory, out) -> int:
    """The parts in row order into ``out`` (CSV or Parquet by suffix), one part in memory at a time."""
    from pathlib import Path

    import pandas as pd
    import pyarrow as pa
    import pyarrow.parquet as pq

    from ..io import PARQUET_SUFFIXES, atomic_path
    parts = sorted(Path(directory).glob("part-*.parquet"))
    out, rows = Path(out), 0
    with atomic_path(out) as tmp:
        if out.suffix.lower() in PARQUET_SUFFIXES:
            schema = pa.unify_schemas([pq.read_schema(p).remove_metadata() for p in parts]) if parts else None
            if schema is None:
                pd.DataFrame(columns=["row", "code", "key"]).to_parquet(tmp, index=False)
            else:
                with pq.ParquetWriter(tmp, schema) as writer:
                    for part in parts:
                        table = pq.read_table(part).replace_schema_metadata(None)
                        rows += table.num_rows
                        writer.write_table(table.select(schema.names).cast(schema))
        else:
            with open(tmp, "w", encoding="utf-8", newline="") as handle:
                for k, part in enumerate(parts):
                    frame = pd.read_parquet(part)
                    rows += len(frame)
                    frame.to_csv(handle, index=False, header=k == 0, lineterminator="\n")
                if not parts:
                    handle.write("row,code,key\n")
    return rows


def run(args) -> int:
    check_title_context(args)
    import pandas as pd

    from ..io import read_column
    from ..runtime.progress import Summary
    from ..runtime.fingerprint import run_options
    from ..runtime.runner import run_chunked

    summary = Summary("code", args.quiet)
    features_dir = None
    if args.features:
        import shutil
        from pathlib import Path

        from ..io import InputError
        from ..runtime.runner import default_run_dir
        if args.engine != "dask":
            run_dir = Path(args.run_dir) if args.run_dir else default_run_dir(args.out)
            features_dir = Path(str(run_dir) + ".features")
            if args.restart or not run_dir.exists():  # a fresh run: no parts of an earlier one
                shutil.rmtree(features_dir, ignore_errors=True)
            features_dir.mkdir(parents=True, exist_ok=True)
        else:
            raise InputError("--features is written beside the run directory, which Dask workers may not share; "
                             "use --engine local with --features")
    step = CodeStep(args.dictionary, args.model, args.title_col, args.context_col, args.threshold,
                    args.output_prefix, str(args.file), None if features_dir is None else str(features_dir))
    options = run_options("code", {"dictionary": args.dictionary, "model": args.model},
                          title_col=args.title_col, context_col=args.context_col, threshold=args.threshold,
                          output_prefix=args.output_prefix, features=bool(args.features))
    result = run_chunked(args.file, args.out, step, required=[args.title_col], options=options,
                         desc="code titles", **run_arguments(args))
    counts = {"rows_in": result.rows_in, "coded": result.rows_out}
    if step.model is not None:
        decisions = read_column(result.output, args.output_prefix + "decision")  # .csv, .parquet or .xlsx
        counts |= {"accepted": int((decisions == "accept").sum()), "referred": int((decisions == "refer").sum())}
    counts["rejected"] = result.rows_rejected
    if result.resumed_from:
        counts["chunks_resumed"] = result.resumed_from
    summary.set(**counts)
    summary.note(f"encoding {result.encoding_note}" if result.encoding_note else "")
    summary.print()
    if features_dir is not None:
        _assemble_features(features_dir, args.features)
        if not args.keep_run:  # a kept run is only reassembled when rerun: its parts are needed again
            import shutil
            shutil.rmtree(features_dir, ignore_errors=True)
    return 0
