"""``titlematch dictionary``: build or update a title dictionary from past coded records."""
from __future__ import annotations

import argparse
from pathlib import Path

ORDER = 20


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("dictionary", help="build a title dictionary from past coded records",
                              description="Build a title dictionary (and its search index) from past years of coded "
                                          "records plus the official classification titles.")
    p.add_argument("past", nargs="+", metavar="PAST_FILE", help="CSV or Parquet with title, code [, context, year]")
    p.add_argument("--classification", metavar="NAME|FILE",
                   help="official list: a built-in name (isco08, onet2019, soc2018) or a file with code, title "
                        "[, parent | level]; codes not on it are rejected")
    p.add_argument("--code-pattern", metavar="REGEX",
                   help="also reject codes that do not match this regular expression (codes are otherwise opaque "
                        "strings, kept exactly as written)")
    p.add_argument("--out", required=True, metavar="DIR", help="dictionary directory to write")
    p.add_argument("--update", metavar="DIR", help="add PAST_FILE(s) to this existing dictionary instead of building anew")
    p.add_argument("--title-col", default="title")
    p.add_argument("--code-col", default="code")
    p.add_argument("--context-col", default="context")
    p.add_argument("--year-col", default="year")
    p.add_argument("--half-life", type=float, default=3.0, help="years after which a record counts half (default 3)")
    p.add_argument("--code-level", choices=["as-is", "soc"], default="as-is",
                   help="'soc' maps O*NET-SOC codes to SOC 2018 detailed occupations")
    p.add_argument("--source", default="past records", help="provenance label written in the manifest")
    return p


def run(args) -> int:
    from ..coding.coder import TitleCoder
    from ..coding.dictionary import TitleDictionary, _read_records
    from ..runtime.progress import Stages, Summary

    summary = Summary("dictionary", args.quiet)
    stages = Stages(3, "dictionary", args.quiet)
    cols = dict(title_col=args.title_col, code_col=args.code_col, context_col=args.context_col,
                year_col=args.year_col)
    if args.update:
        dictionary = TitleCoder.load(args.update).dictionary_
        for path in args.past:
            records = _read_records(path, args.title_col, args.code_col, args.context_col, args.year_col)
            dictionary = dictionary.update(records, source=args.source)
    else:
        if args.code_pattern:
            _check_pattern(args.code_pattern)
        dictionary = TitleDictionary.from_files(args.past, args.classification, half_life=args.half_life,
                                                code_level=args.code_level, code_pattern=args.code_pattern,
                                                source=args.source, **cols)
    stages.step("records counted")
    coder = TitleCoder.from_dictionary(dictionary)
    stages.step("search index and classifier built")
    coder.save(args.out)
    stages.step("saved")
    stages.close()
    meta = dictionary.meta()
    summary.set(rows_in=meta["rows"]["in"], kept=meta["rows"]["kept"], rejected=meta["rows"]["rejected"],
                titles=meta["titles"], codes=meta["codes"])
    summary.print()
    if meta["rows"]["rejected"]:
        print(f"rejected rows with reasons: {Path(args.out) / 'rejects.csv'}")
    return 0


def _check_pattern(pattern: str) -> None:
    import re

    from ..io import InputError
    try:
        re.compile(pattern)
    except re.error as exc:
        raise InputError(f"--code-pattern {pattern!r} is not a regular expression: {exc}") from None
