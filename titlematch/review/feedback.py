"""Coders' decisions checked against the queue as it was issued: nothing in a returned file is trusted.

``titlematch queue`` writes, beside the queue, ``QUEUE.issued.csv``: the queue id, normalized
title and record count of every row as issued. A returned spreadsheet (or a decisions file with
the same columns) is checked row by row against it; a decided row is kept only when its queue id
was issued, its title and record count are as issued, it holds one code of the dictionary's
catalogue, and no other row decides the same title. Every other decided row goes to the rejects
with its reason, and the record counts used are the issued ones, so an edited count can neither
add records nor exhaust memory.
"""
from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np
import pandas as pd

from ..coding.dictionary import TitleDictionary
from ..io import ROW_COLUMN, InputError, Rejects, read_table, require_columns

ISSUED_COLUMNS = ["queue_id", "title_normalized", "records"]
MAX_RECORDS = 10_000_000  # records one title of an issued queue may cover; a larger count is damage
MAX_TOTAL = 20_000_000    # records all decisions may add: each becomes a dictionary record in memory
MAX_QUEUE_ID = 1 << 53     # queue ids are row numbers; anything larger is not one


def issued_path_for(queue: str | os.PathLike) -> Path:
    """``QUEUE.issued.csv`` beside a queue file."""
    queue = Path(queue)
    return queue.with_name(queue.stem + ".issued.csv")


def issued_table(queue: pd.DataFrame) -> pd.DataFrame:
    """What is written beside a queue: its rows' ids, titles and record counts."""
    return queue[ISSUED_COLUMNS].copy()


def _whole(values: pd.Series, high: int) -> pd.Series:
    """Whole numbers from 1 to ``high`` as int64; anything else (text, 1.5, 1e9 past ``high``) is NaN.
    Text is parsed exactly (not through a float), so a huge count cannot round into range."""
    text = values.astype(str).str.strip().str.replace(r"\.0+$", "", regex=True)
    ok = text.str.fullmatch(r"[0-9]{1,18}")
    number = pd.to_numeric(text.where(ok), errors="coerce")
    return number.where((number >= 1) & (number <= high))


def read_issued(path: str | os.PathLike) -> pd.DataFrame:
    """The issued queue, checked: whole ids and counts within bounds, ids and titles unique."""
    path = Path(path)
    issued = read_table(path, required=ISSUED_COLUMNS)
    ids, records = _whole(issued["queue_id"], MAX_QUEUE_ID), _whole(issued["records"], MAX_RECORDS)
    bad = ids.isna() | records.isna() | issued["queue_id"].duplicated() | issued["title_normalized"].duplicated()
    if bad.any():
        row = int(issued.loc[bad, ROW_COLUMN].iloc[0])
        raise InputError(f"{path}: row {row}: not a queue as issued by 'titlematch queue' "
                         "(queue_id and records must be whole numbers, ids and titles unique)")
    if records.sum() > MAX_TOTAL:
        raise InputError(f"{path}: the queue covers {int(records.sum()):,} records, more than the "
                         f"{MAX_TOTAL:,} feedback takes at once; split the decisions into several files")
    return pd.DataFrame({"queue_id": ids.astype("int64"), "title_normalized": issued["title_normalized"],
                         "records": records.astype("int64")})


def checked_decisions(returned: pd.DataFrame, issued: pd.DataFrame, dictionary: TitleDictionary, *,
                      source: str = "queue", rejects: Rejects | None = None) -> pd.DataFrame:
    """Decisions of ``returned`` (the queue with ``coder_code`` filled in) that agree with ``issued``.

    Returns ``title_normalized, context, code, records`` (records as issued). Decided rows that
    fail a check go to ``rejects`` with the row, column and reason; undecided rows are ignored.
    """
    rejects = rejects if rejects is not None else Rejects()
    require_columns(returned, ("queue_id", "title_normalized", "records", "coder_code"), source)
    coder_code = returned["coder_code"].fillna("").astype(str).str.strip()
    decided = returned[coder_code != ""].assign(coder_code=coder_code[coder_code != ""])
    by_id = issued.set_index("queue_id")
    ids = _whole(decided["queue_id"], MAX_QUEUE_ID)
    known = set(dictionary.catalogue["code"]) or set(dictionary.entries["code"])
    pattern = re.compile(dictionary.code_pattern) if dictionary.code_pattern else None
    # one code per title: a title decided on two rows (a copied row, an added row) is refused on both
    title_twice = decided["title_normalized"].astype(str).duplicated(keep=False)
    id_twice = decided["queue_id"].astype(str).duplicated(keep=False)
    keep = []
    for (idx, row), qid, twice, again in zip(decided.iterrows(), ids, title_twice, id_twice):
        reason, column = _reason(row, qid, twice or again, by_id, pattern, known, dictionary.code_pattern)
        if reason:
            value = row[column] if column in row.index else ""
            rejects.add(source, int(row[ROW_COLUMN]) if ROW_COLUMN in row.index else "", column, reason, value)
        else:
            keep.append(idx)
    kept = decided.loc[keep]
    issued_records = by_id["records"].reindex(ids.loc[keep].astype("int64")).to_numpy()
    context = (kept["context"].fillna("").astype(str).str.split("; ").str[0] if "context" in kept
               else pd.Series("", index=kept.index))
    return pd.DataFrame({"title_normalized": kept["title_normalized"].astype(str).to_numpy(),
                         "context": context.to_numpy(dtype=object), "code": kept["coder_code"].to_numpy(),
                         "records": np.asarray(issued_records, dtype="int64")})


def _reason(row, qid, twice, by_id, pattern, known, code_pattern) -> tuple[str, str]:
    code = row["coder_code"]
    if qid != qid:  # NaN
        return f"queue_id {row['queue_id']!r} is not a queue row number", "queue_id"
    qid = int(qid)
    if qid not in by_id.index:
        return f"queue_id {qid} was not in the queue as issued (an added row?)", "queue_id"
    issued = by_id.loc[qid]
    if str(row["title_normalized"]) != issued["title_normalized"]:
        return (f"title_normalized changed: queue_id {int(qid)} was issued as "
                f"{issued['title_normalized']!r}"), "title_normalized"
    records = _whole(pd.Series([row["records"]]), MAX_RECORDS).iloc[0]
    if records != issued["records"]:
        return f"records changed: queue_id {qid} was issued with {issued['records']} records", "records"
    if twice:
        return "one code per title: this title or queue row is decided on more than one row", "coder_code"
    if pattern is not None and not pattern.fullmatch(code):
        return f"code {code!r} is not one code of the form {code_pattern}", "coder_code"
    if known and code not in known:
        return f"code {code!r} is not in the dictionary's catalogue", "coder_code"
    return "", ""


def read_returned_queue(path: str | os.PathLike, issued: str | os.PathLike | None, dictionary: TitleDictionary,
                        rejects: Rejects) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Read a returned queue and its issued table (``issued`` or the one beside ``path``); return
    (returned rows, checked decisions)."""
    from ..io.write import unescape_formula

    issued_file = Path(issued) if issued else issued_path_for(path)
    if not issued_file.is_file():
        raise InputError(f"{path}: cannot check it against the queue as issued: {issued_file} not found; "
                         "give --issued FILE (written by 'titlematch queue' beside the queue)")
    returned = read_table(path, rejects=rejects)
    returned.columns = [unescape_formula(str(c)) for c in returned.columns]
    for col in ("queue_id", "title_normalized", "records", "coder_code", "context"):
        if col in returned.columns:
            returned[col] = returned[col].map(unescape_formula)
    return returned, checked_decisions(returned, read_issued(issued_file), dictionary, source=str(path),
                                       rejects=rejects)


def bounded_records(decisions: pd.DataFrame, source: str, rejects: Rejects) -> pd.DataFrame:
    """Decisions whose record counts are within bounds (a decisions journal carries its own counts):
    a count above ``MAX_RECORDS`` is refused with its title, and all of them together above
    ``MAX_TOTAL`` stop the command, so no count can exhaust memory when fanned out."""
    records = pd.to_numeric(decisions["records"], errors="coerce")
    over = ~(records <= MAX_RECORDS)
    for title, count in zip(decisions.loc[over, "title_normalized"], decisions.loc[over, "records"]):
        rejects.add(source, "", "records", f"records {count!r} above {MAX_RECORDS:,} for one title", title)
    kept = decisions[~over]
    if kept["records"].sum() > MAX_TOTAL:
        raise InputError(f"{source}: the decisions cover {int(kept['records'].sum()):,} records, more than the "
                         f"{MAX_TOTAL:,} feedback takes at once; split them into several files")
    return kept
