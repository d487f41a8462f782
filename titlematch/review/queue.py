"""The human side of the loop: referral queues, coders' decisions back, disagreements.

A referral queue has one row per distinct normalized title among the referred records,
with how many records it covers, the top three candidate codes with their official titles
and confidences, and empty columns for the coder's code and remark. Coders' decisions come
back through :mod:`titlematch.review.feedback`, which checks them against the queue as issued,
and ``apply_feedback`` adds them to the dictionary as a new, provenance-stamped version. ``disagreements`` lists records whose manual code the model
contradicts with high confidence: the review-first mode before an office trusts automation.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..coding.classification import implicit_top
from ..coding.dictionary import TitleDictionary
from ..io import require_columns
from ..confidence.routing import read_confidence
from ..io.columns import add_outputs
from ..io.write import escape_formula, unescape_formula  # noqa: F401  (re-exported for the queue's readers)

QUEUE_COLUMNS = ["queue_id", "title_normalized", "records", "example_title", "context", "group",
                 "code", "code_title", "confidence", "code_2", "code_2_title", "confidence_2",
                 "code_3", "code_3_title", "confidence_3", "coder_code", "coder_remark"]


def escape_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """Formula-looking text escaped in every cell and name: for a queue written as CSV, which a
    spreadsheet program opens too (an .xlsx is escaped by ``write_table`` itself)."""
    out = frame.copy()
    for col in out.columns:
        if out[col].dtype == object:
            out[col] = out[col].map(escape_formula)
    out.columns = [escape_formula(str(c)) for c in out.columns]
    return out


def referral_queue(coded: pd.DataFrame, code_titles: dict | None = None, *, title_col: str = "title",
                   referred_only: bool = True, group_of=None, by_group: bool = False) -> pd.DataFrame:
    """One row per distinct normalized title among the referred records, most work first.

    Order: records covered x uncertainty (1 - confidence; 1 - score without a model), so the
    coders' first hour goes where it settles the most records. ``group`` is the top group of the
    first candidate in the classification (``group_of``, e.g. ``Classification.top_of``; by default
    the code's shape); ``by_group`` orders by group first, for offices whose coders split the work
    by major group.
    """
    require_columns(coded, ("title_normalized", "code"), "coded file")
    work = coded
    if referred_only and "decision" in coded.columns:
        work = coded[coded["decision"].astype(str) == "refer"]
    work = work[work["title_normalized"].astype(str) != ""]
    titles = code_titles or {}
    conf_col = "confidence" if "confidence" in work.columns else "score"
    if not len(work):
        return pd.DataFrame(columns=QUEUE_COLUMNS)
    number = read_confidence if conf_col == "confidence" else (lambda v: (pd.to_numeric(v, errors="coerce"),))
    numeric = {c: number(work[c])[0] for c in (conf_col, f"{conf_col}_2", f"{conf_col}_3") if c in work.columns}
    work = work.assign(**{c: v for c, v in numeric.items()})
    groups = work.groupby("title_normalized", sort=True)
    first = groups.first()
    out = pd.DataFrame({"title_normalized": first.index, "records": groups.size().to_numpy()})
    out["example_title"] = first[title_col].to_numpy() if title_col in first.columns else ""
    if "context" in work.columns:
        contexts = groups["context"].agg(lambda s: "; ".join(s[s.astype(str) != ""].value_counts().index[:3]))
        out["context"] = contexts.to_numpy()
    else:
        out["context"] = ""
    for pos, suffix in ((1, ""), (2, "_2"), (3, "_3")):
        code = first.get("code" + suffix, pd.Series("", index=first.index)).fillna("").astype(str)
        out["code" + suffix] = code.to_numpy()
        label = "code_title" if pos == 1 else f"code{suffix}_title"
        out[label] = [titles.get(c, "") for c in code]
        if pos == 1 and "code_title" in first.columns and not titles:
            out[label] = first["code_title"].fillna("").to_numpy()
        conf = first.get(conf_col + suffix)
        out["confidence" + suffix] = conf.to_numpy() if conf is not None else np.nan
    top_of = group_of or (lambda codes: [implicit_top(c) for c in codes])
    out["group"] = np.asarray(top_of(out["code"].tolist()), dtype=object)
    uncertainty = 1 - out["confidence"].fillna(0).clip(0, 1)
    out["priority"] = out["records"] * uncertainty
    order = ["priority", "records", "title_normalized"]
    out = out.sort_values((["group"] if by_group else []) + order,
                          ascending=([True] if by_group else []) + [False, False, True], kind="stable")
    out = out.drop(columns="priority").reset_index(drop=True)
    out.insert(0, "queue_id", np.arange(1, len(out) + 1))
    out["coder_code"] = ""
    out["coder_remark"] = ""
    return out[QUEUE_COLUMNS]


def apply_feedback(dictionary: TitleDictionary, decisions: pd.DataFrame, *, year: int | None = None,
                   source: str = "coder review") -> TitleDictionary:
    """Fan each decision out to the records it covers and add them as a new dictionary version."""
    fanned = decisions.loc[decisions.index.repeat(decisions["records"])]
    records = pd.DataFrame({"title": fanned["title_normalized"].to_numpy(), "code": fanned["code"].to_numpy(),
                            "context": fanned["context"].to_numpy()})
    if year is not None:
        records["year"] = str(int(year))
    records.attrs["source_file"] = f"coder review{'' if year is None else f' {year}'}"
    return dictionary.update(records, source=source)


def disagreements(coded: pd.DataFrame, manual_col: str, *, min_confidence: float = 0.9,
                  prefix: str = "") -> pd.DataFrame:
    """Records whose manual code differs from a model code held with at least ``min_confidence``,
    most confident first, with the model's confidence in the manual code when it was a candidate
    (``PREFIXmanual_code_confidence``). ``prefix`` is the coder's ``output_prefix``."""
    code, confidence = prefix + "code", prefix + "confidence"
    require_columns(coded, (manual_col, code, confidence), "coded file")
    manual = coded[manual_col].fillna("").astype(str).str.strip()
    conf = read_confidence(coded[confidence])[0].fillna(0)
    manual_conf = pd.Series(np.nan, index=coded.index)
    for suffix in ("_2", "_3"):
        if f"{code}{suffix}" in coded.columns:
            hit = coded[f"{code}{suffix}"].astype(str) == manual
            manual_conf = manual_conf.where(~hit, read_confidence(coded[f"{confidence}{suffix}"])[0])
    mask = (manual != "") & (coded[code].astype(str) != manual) & (conf >= min_confidence)
    out = add_outputs(coded[mask], pd.DataFrame({"manual_code_confidence": manual_conf[mask].to_numpy()}),
                      prefix=prefix, source="coded file")
    return out.sort_values(confidence, ascending=False, kind="stable").reset_index(drop=True)
