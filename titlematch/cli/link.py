"""``titlematch link``: link new establishment records to a business register (or find duplicates)."""
from __future__ import annotations

import argparse
import logging
from dataclasses import replace
from pathlib import Path

from ._run import add_run_arguments, run_arguments, probability

# The library is imported inside the functions below: building the command line's parser imports
# this module, and must not load pandas or scikit-learn (see titlematch.cli).

ORDER = 40
log = logging.getLogger(__name__)


def parse_fields(text: str | None, option: str = "--fields") -> dict[str, str]:
    """``"name=employer_name,address=street"`` -> ``{"name": "employer_name", "address": "street"}``."""
    from ..io import InputError

    if not text:
        return {}
    mapping = {}
    for item in text.split(","):
        role, sep, column = item.partition("=")
        if not sep or not role.strip() or not column.strip():
            raise InputError(f"{option}: expected ROLE=COLUMN pairs separated by commas, got {item!r}")
        mapping[role.strip()] = column.strip()
    return mapping


def add_workers_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--workers", type=int, default=-1, metavar="N",
                        help="processes sharing the work on this machine (default -1: every core); "
                             "the output is the same for any number")


def add_common_field_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--id-col", default="register_id", help="register id column (default register_id)")
    parser.add_argument("--encoding", help="CSV encoding (default: detected)")


def add_parser(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "link", help="link establishment records to a business register",
        description="Link each record of FILE to at most one register entry (blocking, comparisons, "
                    "Fellegi-Sunter or a supervised model) and write every input column plus register_id, "
                    "confidence, decision (accept/refer/no-match), register_name, register_address, "
                    "register_id_2, confidence_2 and explanation. With --dedupe, group duplicates within FILE.")
    parser.add_argument("file", help="records to link (CSV, Parquet or .xlsx)")
    parser.add_argument("--register", help="register table, or an index directory built by 'titlematch register'")
    parser.add_argument("--out", required=True, help="output table (CSV, Parquet or .xlsx)")
    parser.add_argument("--fields", metavar="ROLE=COLUMN,...",
                        help="record columns of the compared fields (roles name, address, city, postcode, naics), "
                             "e.g. name=employer_name,address=street")
    parser.add_argument("--record-id", help="record id column (default record_id when present)")
    parser.add_argument("--training", help="labelled records: record id (or the fields) and register id; "
                                           "gives a supervised model")
    parser.add_argument("--dedupe", action="store_true", help="find duplicates within FILE instead of linking")
    parser.add_argument("--threshold", type=probability, default=0.9, help="accept at this confidence (default 0.9)")
    parser.add_argument("--refer-threshold", type=probability, default=0.5,
                        help="refer to a person at this confidence (default 0.5); below: no-match")
    parser.add_argument("--one-to-one", action="store_true",
                        help="a register entry takes at most one record of the file")
    parser.add_argument("--neighbours", type=int, default=10, help="nearest names per record in blocking")
    parser.add_argument("--max-block", type=int, default=100, help="skip key blocks larger than this")
    parser.add_argument("--blocking", choices=("default", "regional"), default="default",
                        help="'regional' keeps every blocking rule inside a postcode or place, so each chunk "
                             "reads only the index partitions of its postcodes and places (for registers "
                             "larger than memory); records whose postcode and place are both wrong are then "
                             "not found (default: 'default', which also searches the whole register)")
    add_workers_argument(parser)
    parser.add_argument("--cache-rows", type=int, default=None, metavar="N",
                        help="register rows of a partitioned index kept in memory while linking (default "
                             "4000000); a chunk whose partitions hold more reads them a few at a time, each "
                             "once per chunk. The output is the same for any value")
    parser.add_argument("--register-fields", metavar="ROLE=COLUMN,...",
                        help="register column names when they differ from the records' (same syntax as --fields)")
    parser.add_argument("--id-col", default="register_id", help="register id column (default register_id)")
    parser.add_argument("--output-prefix", default="", metavar="PREFIX",
                        help="write the added columns as PREFIXregister_id, PREFIXdecision, ...; input columns are "
                             "never overwritten, so a file with its own register_id or decision column needs this")
    add_run_arguments(parser)
    return parser


def _fields(args):
    from ..linking.register import resolve_fields

    new = parse_fields(args.fields)
    register = parse_fields(getattr(args, "register_fields", None), "--register-fields")
    fields = resolve_fields(new or None)
    return [replace(f, register_column=register.get(f.name, f.column)) for f in fields]


def load_register(args, fields, rejects):
    from ..io import InputError, read_table
    from ..linking.register import RegisterIndex

    path = Path(args.register)
    if path.is_dir():
        cache_rows = getattr(args, "cache_rows", None)
        if cache_rows is not None and cache_rows < 1:
            raise InputError(f"--cache-rows: expected a positive number, got {cache_rows}")
        index = RegisterIndex.load(path, **({} if cache_rows is None else {"cache_rows": cache_rows}))
        columns = parse_fields(args.fields)
        index.fields_ = [replace(f, column=columns.get(f.name, f.column)) for f in index.fields_]
        return index
    frame = read_table(path, required=[args.id_col], encoding=args.encoding, rejects=rejects)
    return RegisterIndex(fields, args.id_col, workers=args.workers).fit(frame, source=str(path))


class LinkStep:
    """The per-chunk step of ``titlematch link``: a fitted linker applied to one chunk. Records the
    linker sets aside (an empty name) come back in place, marked for the runner's rejects file.

    ``fitted`` is what ``fit_link`` gave for the records EM was fitted on (those records, their
    result and their rejects): a chunk holding them takes their rows from there instead of linking
    them a second time. A record's pairs, features and decision do not depend on the other records
    of its batch (so the rows are the ones ``link`` would give), except with ``one_to_one``, where
    records compete for register entries: then every chunk is linked whole."""

    def __init__(self, linker, source: str, fitted=None):
        self.linker, self.source = linker, source
        self.fitted = None if linker.one_to_one else fitted

    def __call__(self, chunk):
        import numpy as np
        import pandas as pd

        from ..io import ROW_COLUMN, Rejects
        from ..runtime.runner import REJECT_COLUMN_COLUMN, REJECT_REASON_COLUMN

        rejects = Rejects()
        result = self._link(chunk, rejects)
        added = [c for c in result.columns if c not in chunk.columns]
        position = pd.Series(np.arange(len(chunk)), index=chunk[ROW_COLUMN].to_numpy())
        out = chunk.reset_index(drop=True).copy()
        for column in added:
            values = pd.Series(pd.NA, index=out.index, dtype=object)
            values.iloc[position.loc[result[ROW_COLUMN].to_numpy()].to_numpy()] = result[column].to_numpy()
            out[column] = values
        refused = rejects.frame()
        out[REJECT_REASON_COLUMN] = ""
        out[REJECT_COLUMN_COLUMN] = ""
        if len(refused):
            at = position.loc[refused["row"].to_numpy()].to_numpy()
            out.loc[at, REJECT_REASON_COLUMN] = refused["reason"].to_numpy()
            out.loc[at, REJECT_COLUMN_COLUMN] = refused["column"].to_numpy()
        return out

    def _link(self, chunk, rejects):
        import pandas as pd

        from ..io import ROW_COLUMN

        known = self._already_linked(chunk)
        if known is None or not known.any():
            return self.linker.link(chunk, rejects=rejects, source=self.source)
        records, result, refused = self.fitted
        rows = set(chunk.loc[known, ROW_COLUMN].tolist())
        for entry in refused:
            if entry["row"] in rows:
                rejects.add(entry["file"], entry["row"], entry["column"], entry["reason"], entry["value"])
        done = result[result[ROW_COLUMN].isin(rows)]
        if known.all():
            return done
        rest = self.linker.link(chunk[~known.to_numpy()], rejects=rejects, source=self.source)
        return pd.concat([done, rest], ignore_index=True)

    def _already_linked(self, chunk):
        """Which rows of ``chunk`` are records linked when fitting (the same row, the same values),
        or None when there are none to take."""
        from ..io import ROW_COLUMN

        if self.fitted is None or ROW_COLUMN not in chunk.columns:
            return None
        records = self.fitted[0]
        if list(records.columns) != list(chunk.columns):
            return None
        known = chunk[ROW_COLUMN].isin(records[ROW_COLUMN])
        if not known.any():
            return known
        mine = chunk[known].reset_index(drop=True)
        theirs = records.set_index(ROW_COLUMN, drop=False).loc[mine[ROW_COLUMN]].reset_index(drop=True)
        # Read by another reader: taken only when the values are the same, else linked again.
        return known if mine.equals(theirs) else None


def run(args) -> int:
    from ..io import InputError, Rejects, TableReader, read_column, read_table, rejects_path_for, write_table
    from ..linking.linker import EstablishmentLinker
    from ..runtime.progress import Summary
    from ..runtime.fingerprint import run_options
    from ..runtime.runner import run_chunked

    summary = Summary("link", args.quiet)
    fields = _fields(args)
    linker = EstablishmentLinker(fields, id_column=args.id_col, record_id=args.record_id,
                                 threshold=args.threshold, refer_threshold=args.refer_threshold,
                                 one_to_one=args.one_to_one, k=args.neighbours, max_block=args.max_block,
                                 regional=args.blocking == "regional", workers=args.workers,
                                 output_prefix=args.output_prefix)
    rejects = Rejects()
    if args.dedupe:  # duplicates can be anywhere in the file: it is read whole
        records = read_table(args.file, encoding=args.encoding, rejects=rejects)
        if not len(records):
            raise InputError(f"{args.file}: no records to search for duplicates (the file has a header only"
                             f"{' or every row was refused' if len(rejects) else ''})")
        result = linker.dedupe(records, rejects=rejects, source=args.file)
        write_table(result, args.out)
        prefix = args.output_prefix
        summary.set(rows_in=len(records), groups=result[prefix + "cluster_id"].nunique(),
                    records_with_duplicates=int((result[prefix + "cluster_size"] > 1).sum()),
                    rejected=len(rejects.rows()))
        if len(rejects):
            rejects.write(rejects_path_for(args.out))
        summary.print()
        return 0
    if not args.register:
        raise InputError("link: give --register FILE_OR_INDEX (or --dedupe to search FILE itself)")
    index = load_register(args, fields, rejects)
    training = read_table(args.training, encoding=args.encoding, rejects=rejects) if args.training else None
    sample = next((c.frame for c in TableReader(args.file, chunk_rows=linker.em_records,
                                                 encoding=args.encoding).chunks() if len(c.frame)), None)
    if sample is None:
        raise InputError(f"{args.file}: no records to link (the file has a header only, or every row is refused)")
    # Without training, m and u are estimated by EM once, on the file's first records, and then kept:
    # every chunk (and every Dask worker) is scored with the same weights. Those records are
    # scored once: fit_link keeps their result for the chunks that hold them.
    if training is None:
        sample_rejects = Rejects()
        first = linker.fit_link(index, sample, rejects=sample_rejects, records_source=str(args.file))
        step = LinkStep(linker, str(args.file), (sample, first, sample_rejects.frame().to_dict("records")))
    else:
        linker.fit(index, training, records=sample, records_source=str(args.file))
        step = LinkStep(linker, str(args.file))
    if args.engine == "dask":  # the workers read the partitions they need: the command holds none
        from ..runtime.memory import return_freed_memory
        released = index.release()
        if released:
            return_freed_memory()
            log.info("let go of %d register rows read for the EM pass before the chunks go to Dask", released)
    # the register and training by content: an index rebuilt in place never resumes stale chunks
    options = run_options("link", {"register": args.register, "training": args.training}, fields=args.fields,
                          register_fields=args.register_fields, id_col=args.id_col, threshold=args.threshold,
                          refer_threshold=args.refer_threshold, one_to_one=args.one_to_one,
                          neighbours=args.neighbours, max_block=args.max_block, output_prefix=args.output_prefix,
                          blocking=args.blocking)
    result = run_chunked(args.file, args.out, step, options=options,
                         desc="link records", **run_arguments(args))
    # .csv, .parquet or .xlsx, as written
    counts = read_column(result.output, args.output_prefix + "decision").value_counts()
    summary.set(rows_in=result.rows_in, accepted=counts.get("accept", 0), referred=counts.get("refer", 0),
                no_match=counts.get("no-match", 0), rejected=result.rows_rejected + len(rejects.rows()))
    if len(rejects):  # register rows refused while building the index
        rejects.write(rejects_path_for(Path(args.out).with_name(Path(args.out).stem + ".register")))
    summary.note(f"encoding {result.encoding_note}" if result.encoding_note else "")
    summary.print()
    return 0
