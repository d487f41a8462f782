"""Columns the tool adds beside the user's columns: the one clash policy of every command and of the library.

Policy (the same for ``code``, ``link``, ``disagreements``, ``normalize``, ``TitleCoder.code`` and
``EstablishmentLinker.link``):

- An input column is never renamed, changed or dropped: the output holds every input column, under
  its own name, with its values as read.
- The columns the tool adds (``code``, ``confidence``, ``decision``, ...) are written under their
  documented names, or under ``PREFIX + name`` for every added column when an output prefix is given
  (``--output-prefix machine_`` writes ``machine_code``, ``machine_confidence``, ...).
- If an added column would still have the name of an input column, nothing is written: the call is
  refused with :class:`ColumnClash`, naming the columns and the option that avoids the clash.

So a user's own ``code`` column (say the manual code an office keeps) can never be overwritten by the
machine's code, and a column name read downstream always means one thing.

Working columns the library adds for itself are named with :func:`unused_name`, so they never meet a
user's column either.
"""
from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

from .errors import InputError

PREFIX_OPTION = "--output-prefix"


class ColumnClash(InputError):
    """Columns the tool would add have the names of input columns."""


def output_names(input_columns: Iterable, added: Iterable[str], *, prefix: str = "",
                 source: str = "<input>", option: str | None = PREFIX_OPTION) -> dict[str, str]:
    """``{added name: name written}``; :class:`ColumnClash` if a written name is an input column's.

    ``option`` names the setting that sets the prefix, for the message (None: the caller has none).

    >>> output_names(["title", "code"], ["code", "score"], prefix="machine_")
    {'code': 'machine_code', 'score': 'machine_score'}
    """
    prefix = "" if prefix is None else str(prefix)
    names = {name: f"{prefix}{name}" for name in added}
    have = {str(c) for c in input_columns}
    clashes = [written for written in names.values() if written in have]
    if clashes:
        listed = ", ".join(clashes)
        if option is None:
            hint = ""
        elif prefix:
            hint = f", or choose another {option} than {prefix!r}"
        else:
            hint = f", or give {option} PREFIX to write the added columns as PREFIX{next(iter(names))} and so on"
        raise ColumnClash(f"{source}: already has column(s) {listed}, which the output would overwrite; input "
                          f"columns are never overwritten: rename them in the input{hint}")
    return names


def add_outputs(frame: pd.DataFrame, outputs: pd.DataFrame, *, prefix: str = "", source: str = "<input>",
                option: str | None = PREFIX_OPTION) -> pd.DataFrame:
    """A new frame: ``frame``'s columns unchanged, then ``outputs``' columns named by :func:`output_names`.

    ``outputs`` has one row per row of ``frame``, in the same order (its index is ignored).
    """
    if len(outputs) != len(frame):
        raise ValueError(f"outputs have {len(outputs)} rows for {len(frame)} input rows")
    names = output_names(frame.columns, outputs.columns, prefix=prefix, source=source, option=option)
    added = outputs.rename(columns=names)
    added.index = frame.index
    return pd.concat([frame, added], axis=1)


def unused_name(columns: Iterable, stem: str) -> str:
    """``stem``, or ``stem_1``, ``stem_2`` ...: the first name not among ``columns`` (for working columns)."""
    have = {str(c) for c in columns}
    name, n = stem, 0
    while name in have:
        n += 1
        name = f"{stem}_{n}"
    return name
