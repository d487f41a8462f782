"""``titlematch register``: build a register index once, for reuse by ``titlematch link --register DIR``."""
from __future__ import annotations

import argparse

from .link import _fields, add_common_field_options, add_workers_argument

ORDER = 39


def add_parser(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "register", help="build a business register index for linking",
        description="Normalize a register's names, addresses and postcodes, fit the TF-IDF models and save "
                    "everything as a checksummed index directory that 'titlematch link --register DIR' reads.")
    parser.add_argument("file", help="register table (CSV, Parquet or .xlsx) with an id column")
    parser.add_argument("--out", required=True, help="index directory to write")
    parser.add_argument("--fields", metavar="ROLE=COLUMN,...",
                        help="register columns of the compared fields, e.g. name=legal_name,address=street")
    parser.add_argument("--partition-rows", type=int, default=None, metavar="N",
                        help="register records per partition of the index (default 1000000); 'link' reads "
                             "one partition at a time, so the register may be larger than memory")
    parser.add_argument("--chunk-rows", type=int, default=200_000, metavar="N",
                        help="register rows read and prepared at a time (default 200000): the index is built "
                             "without holding the register in memory, and is the same for any N")
    add_common_field_options(parser)
    add_workers_argument(parser)
    return parser


def run(args) -> int:
    from ..io import InputError, Rejects, TableReader, rejects_path_for
    from ..linking.build import EmptyRegister, build_index
    from ..runtime.progress import Summary

    summary = Summary("register", args.quiet)
    rejects = Rejects()
    if args.partition_rows is not None and args.partition_rows < 1:
        raise InputError(f"--partition-rows: expected a positive number, got {args.partition_rows}")
    if args.chunk_rows < 1:
        raise InputError(f"--chunk-rows: expected a positive number, got {args.chunk_rows}")
    reader = TableReader(args.file, chunk_rows=args.chunk_rows, required=[args.id_col], encoding=args.encoding)
    counted = {"rows": 0}

    def frames():
        for chunk in reader.chunks():
            rejects.extend(chunk.rejects)
            counted["rows"] += len(chunk.frame)
            yield chunk.frame

    try:
        build_index(frames(), args.out, fields=_fields(args), id_column=args.id_col,
                    partition_rows=args.partition_rows, workers=args.workers, source=args.file)
    except EmptyRegister:
        raise InputError(f"{args.file}: no register rows to index (the file has a header only"
                         f"{' or every row was refused' if len(rejects) else ''})") from None
    summary.set(rows_in=counted["rows"] + len(rejects.rows()), indexed=counted["rows"], rejected=len(rejects.rows()))
    if len(rejects):
        rejects.write(rejects_path_for(args.out.rstrip("/") + ".csv"))
    summary.print()
    return 0
