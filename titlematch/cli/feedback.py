"""``titlematch feedback``: coders' decisions from a referral queue into a new dictionary version."""
from __future__ import annotations

import argparse

ORDER = 62


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("feedback", help="add coders' decisions from a queue to the dictionary",
                              description="Read coders' decisions back from a referral queue, validate the codes "
                                          "against the catalogue, fan them out to the records they cover and write "
                                          "an updated dictionary whose manifest records the provenance.")
    p.add_argument("queue", metavar="QUEUE_OR_DECISIONS",
                   help="the queue from 'titlematch queue' with coder_code filled in, or the decisions file "
                        "(.jsonl) written by 'titlematch review'")
    p.add_argument("--dictionary", required=True, metavar="DIR")
    p.add_argument("--out", required=True, metavar="DIR2", help="the updated dictionary")
    p.add_argument("--year", type=int, help="year the decisions belong to (default: the dictionary's newest + 1)")
    p.add_argument("--issued", metavar="FILE",
                   help="the queue as issued (default QUEUE.issued.csv beside the queue, written by 'titlematch "
                        "queue'); every decided row is checked against it")
    return p


def run(args) -> int:
    from pathlib import Path

    from ..coding.coder import TitleCoder
    from ..io import Rejects
    from ..runtime.progress import Summary
    from ..review.feedback import read_returned_queue
    from ..review.queue import apply_feedback

    summary = Summary("feedback", args.quiet)
    coder = TitleCoder.load(args.dictionary)
    rejects = Rejects()
    if _is_journal(args.queue):
        from ..review.agreement import journal_decisions
        from ..review.decisions import read_journal
        from ..review.feedback import bounded_records

        dictionary = coder.dictionary_
        known = set(dictionary.catalogue["code"]) or set(dictionary.entries["code"])
        decisions = journal_decisions(read_journal(args.queue), known, dictionary.code_pattern,
                                      source=str(args.queue), rejects=rejects)
        decisions = bounded_records(decisions, str(args.queue), rejects)
        queue = decisions
    else:
        queue, decisions = read_returned_queue(args.queue, args.issued, coder.dictionary_, rejects)
    year = args.year if args.year is not None else coder.dictionary_.reference_year + 1
    if not 1900 <= year <= 2200:
        from ..io import InputError
        raise InputError(f"--year {year}: expected a calendar year from 1900 to 2200")
    updated = apply_feedback(coder.dictionary_, decisions, year=year)
    updated.rejects = rejects  # this version's rejects: the queue rows refused
    TitleCoder.from_dictionary(updated, **{k: v for k, v in coder.get_params().items()
                                           if k not in ("half_life", "code_level")}).save(args.out)
    summary.set(queue_rows=len(queue), decisions=len(decisions), records_added=int(decisions["records"].sum()),
                rejected=len(rejects.rows()))
    summary.print()
    if len(rejects):
        print(f"refused queue rows with reasons: {Path(args.out) / 'rejects.csv'}")
    return 0


def _is_journal(path) -> bool:
    """A decisions journal: named .jsonl / .ndjson, or a text file whose first character is '{'."""
    from pathlib import Path

    path = Path(path)
    if path.suffix.lower() in (".jsonl", ".ndjson"):
        return True
    if path.suffix.lower() in (".csv", ".tsv", ".txt", ".xlsx", ".xls", ".parquet"):
        return False
    try:
        with open(path, "rb") as handle:
            return handle.read(64).lstrip().startswith(b"{")
    except OSError:
        return False
