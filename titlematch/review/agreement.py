"""What a decisions journal yields: the coders' decisions for ``feedback`` and, from the
double-coded sample, how far two coders agree (percent agreement and Cohen's kappa)."""
from __future__ import annotations

import re

import numpy as np
import pandas as pd

from ..io import Rejects
from ..measures.metrics import cohen_kappa, major_group
from .decisions import DECIDED, JournalState

NOT_CODABLE = "(not codable)"  # the label a "not codable" decision without a residual code counts as
PAIR_COLUMNS = ["title", "coder_1", "code_1", "coder_2", "code_2", "group", "records"]


def decisions_by_title(state: JournalState) -> dict[str, list[dict]]:
    """Effective ``code`` / ``uncodable`` lines per title, first decision first."""
    out: dict[str, list[dict]] = {}
    for entry in state.effective(DECIDED):
        out.setdefault(str(entry.get("title", "")), []).append(entry)
    return out


def journal_decisions(state: JournalState, known_codes: set[str], code_pattern: str, *, source: str,
                      rejects: Rejects | None = None) -> pd.DataFrame:
    """Decisions to feed back, in the frame ``read_decisions`` gives for a spreadsheet queue:
    ``title_normalized, context, code, records``.

    One row per title: the first coder's code. Set aside with the reason, by journal line:
    damaged lines, codes outside the classification, "not codable" without a residual code,
    and double-coded titles whose two coders disagree (they need a third look, not a guess).
    """
    rejects = rejects if rejects is not None else Rejects()
    for line, text in state.damaged:
        rejects.add(source, line, "", "unreadable journal line (cut short by a crash, or edited)", text)
    pattern = re.compile(code_pattern or "")  # no pattern: codes are opaque, checked against the catalogue
    rows = []
    for title, entries in decisions_by_title(state).items():
        first = entries[0]
        codes = {str(e.get("code", "")) for e in entries[:2]}
        code, line = str(first.get("code", "")).strip(), first["_line"]
        records = first.get("records", 1)
        if len(codes) > 1:
            shown = ", ".join(f"{e.get('coder')}: {e.get('code') or NOT_CODABLE}" for e in entries[:2])
            rejects.add(source, line, "code", f"double-coded title: the coders disagree ({shown})", title)
        elif not code:
            rejects.add(source, line, "code", "marked not codable; the classification has no residual code", title)
        elif not pattern.match(code) or (known_codes and code not in known_codes):
            rejects.add(source, line, "code", "code is not in the dictionary's catalogue", code)
        elif not title.strip():
            rejects.add(source, line, "title", "empty title", title)
        elif not (isinstance(records, int) and records >= 1):
            rejects.add(source, line, "records", "records must be a whole number >= 1", records)
        else:
            rows.append((title, str(first.get("context", "")).split("; ")[0], code, records))
    return pd.DataFrame(rows, columns=["title_normalized", "context", "code", "records"]).astype(
        {"records": "int64"})


def coder_pairs(state: JournalState) -> pd.DataFrame:
    """The double-coded sample: titles decided by two different coders, first and second decision.

    The parent group is the SOC major group of the first coder's code ("" when not codable).
    """
    rows = []
    for title, entries in decisions_by_title(state).items():
        first = entries[0]
        second = next((e for e in entries[1:] if e.get("coder") != first.get("coder")), None)
        if second is None:
            continue
        code_1 = str(first.get("code", "")) or NOT_CODABLE
        code_2 = str(second.get("code", "")) or NOT_CODABLE
        rows.append((title, first.get("coder"), code_1, second.get("coder"), code_2,
                     major_group(code_1) if code_1 != NOT_CODABLE else "", first.get("records", 1)))
    return pd.DataFrame(rows, columns=PAIR_COLUMNS)


def agreement_table(pairs: pd.DataFrame) -> pd.DataFrame:
    """Percent agreement and Cohen's kappa over the double-coded titles, overall and by parent group.

    Columns ``group, titles, records, agreement, kappa``; the first row (``group = "all"``) is the
    whole sample. A title counts once whatever its records (the coders decide titles, not records).
    """
    def row(group: str, part: pd.DataFrame) -> dict:
        same = (part["code_1"] == part["code_2"]).to_numpy()
        return {"group": group, "titles": len(part), "records": int(part["records"].sum()),
                "agreement": float(same.mean()) if len(part) else np.nan,
                "kappa": cohen_kappa(part["code_1"], part["code_2"]) if len(part) else np.nan}

    rows = [row("all", pairs)]
    for group, part in pairs.groupby("group", sort=True):
        rows.append(row(group or NOT_CODABLE, part))
    return pd.DataFrame(rows, columns=["group", "titles", "records", "agreement", "kappa"])
