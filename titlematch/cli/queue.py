"""``titlematch queue``: the referral queue for coders, one row per distinct normalized title."""
from __future__ import annotations

import argparse

ORDER = 60


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("queue", help="write the referral queue for coders (.xlsx or .csv)",
                              description="One row per distinct normalized title among referred records, with the "
                                          "records it covers, the top three candidates and empty columns for the "
                                          "coder's code and remark; most records x uncertainty first.")
    p.add_argument("coded", metavar="CODED_FILE", help="output of 'titlematch code' (with --model for decisions)")
    p.add_argument("--out", required=True, metavar="FILE", help=".xlsx or .csv")
    p.add_argument("--dictionary", metavar="DIR", help="fill official titles of the 2nd and 3rd candidates")
    p.add_argument("--title-col", default="title")
    p.add_argument("--all", action="store_true", help="queue every record, not only the referred ones")
    p.add_argument("--by-group", action="store_true",
                   help="order by the top group of the first candidate first (coders split by major group)")
    return p


def run(args) -> int:
    from ..io import read_table, write_table
    from ..runtime.progress import Summary
    from ..review.feedback import issued_path_for, issued_table
    from ..review.queue import escape_frame, referral_queue

    summary = Summary("queue", args.quiet)
    coded = read_table(args.coded, required=("title_normalized", "code"))
    titles = group_of = None
    if args.dictionary:
        from ..coding.dictionary import TitleDictionary
        dictionary = TitleDictionary.load(args.dictionary)
        titles, group_of = dictionary.code_titles(), dictionary.hierarchy.top_of
    queue = referral_queue(coded, titles, title_col=args.title_col, referred_only=not args.all,
                           group_of=group_of, by_group=args.by_group)
    write_table(escape_frame(queue), args.out)
    # what 'titlematch feedback' checks the returned queue against
    write_table(issued_table(queue), issued_path_for(args.out))
    summary.set(rows_in=len(coded), queued_titles=len(queue), records_covered=int(queue["records"].sum()))
    summary.print()
    print(f"referral queue: {args.out}")
    return 0
