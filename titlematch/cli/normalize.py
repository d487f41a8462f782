"""``titlematch normalize``: add normalized forms and extracted fields of a title, name or address column."""
from __future__ import annotations

import argparse
from dataclasses import dataclass

from ._run import add_run_arguments, run_arguments

ORDER = 10

KINDS = ("title", "name", "address")
TITLE_QUALIFIERS = ("seniority", "level", "shift", "employment", "branch")
NAME_FIELDS = ("legal_form", "trade_name", "branch")
ADDRESS_FIELDS = ("house_number", "predirectional", "street_name", "suffix", "postdirectional", "unit_type", "unit")


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "normalize", help="normalize job titles, establishment names or addresses in a table",
        description="Read a CSV or Parquet table and write it again (format by --out suffix) with every column "
                    "kept plus COL_normalized and the fields found: for titles COL_qualifiers "
                    "('seniority=senior; level=2; shift=night'), COL_roles and COL_changes; for names "
                    "COL_legal_form, COL_trade_name and COL_branch; for addresses COL_house_number, "
                    "COL_predirectional, COL_street_name, COL_suffix, COL_postdirectional, COL_unit_type and "
                    "COL_unit. Unreadable rows go to OUT.rejects.csv with row number and reason. The input "
                    "is never modified; an interrupted run resumes when rerun.")
    p.add_argument("file", metavar="FILE", help="CSV or Parquet input")
    p.add_argument("--kind", choices=KINDS, required=True, help="what the column holds")
    p.add_argument("--column", required=True, metavar="COL", help="the column to normalize")
    p.add_argument("--out", required=True, metavar="FILE", help="output CSV or Parquet (by suffix)")
    add_run_arguments(p)
    return p


def output_columns(kind: str, column: str) -> list[str]:
    """The columns ``normalize`` adds for ``kind``, in order."""
    fields = {"title": ("qualifiers", "roles", "changes"), "name": NAME_FIELDS, "address": ADDRESS_FIELDS}[kind]
    return [f"{column}_normalized"] + [f"{column}_{field}" for field in fields]


def qualifiers_text(frame):
    """Compact "seniority=senior; level=2; shift=night" text of the non-empty qualifier columns.

    >>> import pandas as pd
    >>> frame = pd.DataFrame({"seniority": ["senior", ""], "level": ["2", ""], "shift": ["night", ""]})
    >>> qualifiers_text(frame).tolist()
    ['seniority=senior; level=2; shift=night', '']
    """
    import numpy as np
    import pandas as pd

    names = [name for name in TITLE_QUALIFIERS if name in frame.columns]
    if not names or frame.empty:
        return pd.Series("", index=frame.index, dtype=object)
    values = frame[names].fillna("").astype(str)
    # few distinct combinations in many rows: write each combination once
    codes, combinations = pd.MultiIndex.from_frame(values).factorize()
    texts = ["; ".join(f"{name}={value}" for name, value in zip(names, combination) if value)
             for combination in combinations]
    return pd.Series(np.asarray(texts, dtype=object)[codes], index=frame.index, dtype=object)


@dataclass(frozen=True)
class NormalizeStep:
    """The per-chunk step of ``titlematch normalize``: the input columns plus the normalized fields.

    A module-level, frozen object so the Dask engine can send it to workers.

    >>> import pandas as pd
    >>> step = NormalizeStep("address", "street")
    >>> step(pd.DataFrame({"street": ["12 Elm Avenue Apt 3"]}))["street_normalized"].tolist()
    ['12 ELM AVE APT 3']
    """

    kind: str
    column: str
    source: str = "<input>"

    def __call__(self, frame):
        from ..io.columns import add_outputs, output_names
        added = output_columns(self.kind, self.column)
        output_names(frame.columns, added, source=self.source, option=None)  # refuse before the work
        fields = getattr(self, f"_{self.kind}")(frame[self.column])
        fields.columns = added
        return add_outputs(frame, fields, source=self.source, option=None)

    @staticmethod
    def _title(values):
        import pandas as pd

        from ..normalize.title import normalize_titles
        found = normalize_titles(values)
        return pd.DataFrame({"key": found["key"], "qualifiers": qualifiers_text(found),
                             "roles": found["roles"], "changes": found["changes"]})

    @staticmethod
    def _name(values):
        from ..normalize.name import normalize_names
        found = normalize_names(values)
        return found[["key", *NAME_FIELDS]].copy()

    @staticmethod
    def _address(values):
        from ..normalize.address import normalize_addresses
        found = normalize_addresses(values)
        return found[["key", *ADDRESS_FIELDS]].copy()


def run(args) -> int:
    from ..runtime.progress import Summary
    from ..runtime.runner import run_chunked

    summary = Summary("normalize", args.quiet)
    step = NormalizeStep(args.kind, args.column, str(args.file))
    result = run_chunked(args.file, args.out, step, required=[args.column],
                         options={"command": "normalize", "kind": args.kind, "column": args.column},
                         desc=f"normalize {args.column}", **run_arguments(args))
    counts = {"rows_in": result.rows_in, "written": result.rows_out, "rejected": result.rows_rejected}
    if result.rows_flagged:
        counts["flagged"] = result.rows_flagged
    if result.resumed_from:
        counts["chunks_resumed"] = result.resumed_from
    summary.set(**counts)
    summary.note(f"encoding {result.encoding_note}" if result.encoding_note else "")
    summary.print()
    return 0
