"""Options shared by the commands that stream a table through :func:`titlematch.runtime.runner.run_chunked`."""
from __future__ import annotations

import argparse


def add_run_arguments(parser: argparse.ArgumentParser) -> None:
    """Add --chunk-rows, --encoding, --engine, --scheduler, --run-dir, --restart and --keep-run."""
    group = parser.add_argument_group("running over big files")
    group.add_argument("--chunk-rows", type=_positive, default=50_000, metavar="N",
                       help="rows per chunk (default 50000); memory grows with this, not with the file")
    group.add_argument("--encoding", metavar="E", help="CSV encoding (default: detect UTF-8, UTF-8 with BOM, cp1252)")
    group.add_argument("--engine", choices=("local", "dask"), default="local",
                       help="where chunks are processed (dask: pip install titlematch[dask])")
    group.add_argument("--scheduler", metavar="ADDRESS",
                       help="Dask scheduler address; default: a local cluster, one worker per core")
    group.add_argument("--run-dir", metavar="DIR",
                       help="where finished chunks are kept so an interrupted run resumes (default OUT.run)")
    group.add_argument("--restart", action="store_true",
                       help="discard an earlier unfinished run of this output and start over")
    group.add_argument("--keep-run", action="store_true",
                       help="keep the run directory after success (a rerun then only reassembles the output)")


def run_arguments(args: argparse.Namespace) -> dict:
    """The keyword arguments of run_chunked that the options above set."""
    if args.scheduler and args.engine != "dask":
        from ..io import InputError
        raise InputError(f"--scheduler {args.scheduler} needs --engine dask")
    return {"chunk_rows": args.chunk_rows, "encoding": args.encoding, "engine": args.engine,
            "scheduler": args.scheduler, "run_dir": args.run_dir, "restart": args.restart,
            "keep_run": args.keep_run, "quiet": args.quiet}


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}")
    return value


def probability(text: str) -> float:
    """An argparse type: a number from 0 to 1 (``nan``, ``inf`` and negatives are refused)."""
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not 0.0 <= value <= 1.0:  # false for nan too
        raise argparse.ArgumentTypeError(f"expected a number from 0 to 1, got {text!r}")
    return value


def check_title_context(args: argparse.Namespace) -> None:
    """--title-col and --context-col must name two different columns."""
    if args.title_col == args.context_col:
        from ..io import InputError
        raise InputError(f"--title-col and --context-col both name the column {args.title_col!r}; "
                         "the context must be another column (or one the file does not have)")
