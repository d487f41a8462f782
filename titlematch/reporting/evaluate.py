"""Evaluation of coded output against a gold sample: quality figures, threshold choice, report.

The gold sample holds the expert's code (column ``code``) for a set of records and, when the
office has it, the code a coder gave in routine work (``manual_code``). It is joined to the
coded output in the first way that applies:

1. both files have ``record_id``: joined on it (each id once per file);
2. the files have the same number of rows: joined row by row (titles, when both files
   have them, must then agree row by row, so a re-sorted file is caught);
3. both files have ``title`` (and ``context`` when both have it): joined on those, the
   first coded record of each title standing for all (the coder codes equal input alike).

Gold records that find no coded record, lack the expert code or carry an unreadable
confidence go to the rejects with the reason; every other record is evaluated.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import htmlpage
from ..measures import metrics
from ..measures import plots
from ..io import ROW_COLUMN, InputError, Rejects, require_columns, write_table
from ..coding.gate import FLAG_COLUMN
from ..confidence.routing import ThresholdChoice, choose_threshold, gated, read_confidence, route

RECORD_ID = "record_id"
DECISIONS = ("accept", "refer")
ONET_ATTRIBUTION = ("This file includes information from the O*NET Database by the U.S. Department of Labor, "
                    "Employment and Training Administration (USDOL/ETA). Used under the CC BY 4.0 license.")


@dataclass
class Evaluation:
    """Everything the report shows; ``records`` is the joined gold sample that was evaluated."""

    records: pd.DataFrame
    summary: pd.DataFrame
    major_groups: pd.DataFrame
    confusions: pd.DataFrame
    join_method: str
    choice: ThresholdChoice | None = None
    reliability: pd.DataFrame | None = None
    facts: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    rejects: Rejects = field(default_factory=Rejects)
    n_bins: int = 15
    agreement: pd.DataFrame | None = None   # inter-coder agreement on a double-coded sample


def add_agreement(evaluation: Evaluation, state, source: str = "decisions file") -> Evaluation:
    """Attach the inter-coder agreement of a review journal's double-coded sample (percent
    agreement and Cohen's kappa, overall and by parent group) to an evaluation."""
    from ..review.agreement import agreement_table, coder_pairs

    pairs = coder_pairs(state)
    evaluation.agreement = agreement_table(pairs)
    if not len(pairs):
        evaluation.notes.append(f"{source} holds no title decided by two coders; start 'titlematch review' "
                                f"with --double-code to get an agreement figure.")
    else:
        overall = evaluation.agreement.iloc[0]
        evaluation.facts["double-coded titles"] = f"{len(pairs):,}"
        evaluation.summary = pd.concat([evaluation.summary, pd.DataFrame([
            _measure("inter-coder agreement", float(overall["agreement"]), len(pairs), None,
                     "double-coded titles where both coders chose the same code"),
            _measure("inter-coder kappa", float(overall["kappa"]), len(pairs), None,
                     "Cohen's kappa: agreement beyond chance (1 = perfect, 0 = chance)")])], ignore_index=True)
    return evaluation


def _with_rows(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame.reset_index(drop=True)
    if ROW_COLUMN not in frame.columns:
        frame = frame.assign(**{ROW_COLUMN: np.arange(2, len(frame) + 2)})  # CSV line numbers below a header
    return frame


def _text(series: pd.Series) -> pd.Series:
    return series.fillna("").astype(str).str.strip()


def _unique_ids(frame: pd.DataFrame, name: str) -> None:
    ids = _text(frame[RECORD_ID])
    dup = frame.loc[ids.duplicated(keep=False) & (ids != ""), ROW_COLUMN]
    if len(dup):
        raise InputError(f"{name}: column 'record_id' repeats ids (rows {', '.join(map(str, dup.head(5)))}); "
                         f"each record needs its own id")


def join_gold(coded: pd.DataFrame, gold: pd.DataFrame, *, coded_name: str = "coded file",
              gold_name: str = "gold file", rejects: Rejects | None = None) -> tuple[pd.DataFrame, str]:
    """Join coded output to the gold sample (see the module notes for the order of methods).

    Returns the joined frame (gold columns with the expert's ``code`` renamed ``expert_code``,
    coded columns suffixed ``_coded`` where names clash, the machine's code as
    ``machine_code``, ``_row`` the gold row and ``_row_coded`` the coded row) and the method:
    ``"record_id"``, ``"row order"`` or ``"title"`` / ``"title and context"``.
    """
    rejects = rejects if rejects is not None else Rejects()
    coded, gold = _with_rows(coded), _with_rows(gold)
    require_columns(coded, ["code"], coded_name)
    require_columns(gold, ["code"], gold_name)
    left = gold.rename(columns={"code": "expert_code"})
    right = coded.rename(columns={"code": "machine_code", ROW_COLUMN: "_row_coded"})
    if RECORD_ID in coded.columns and RECORD_ID in gold.columns:
        _unique_ids(coded, coded_name)
        _unique_ids(gold, gold_name)
        left = left.assign(_key=_text(left[RECORD_ID]))
        right = right.assign(_key=_text(right[RECORD_ID])).drop(columns=[RECORD_ID])
        right = right[right["_key"] != ""]  # an empty id matches nothing
        method, key_column = "record_id", RECORD_ID
        missing_reason = "record_id not found in the coded file"
    elif len(coded) == len(gold):
        if "title" in coded.columns and "title" in gold.columns:
            _same_titles(coded, gold, coded_name, gold_name)
            right = right.drop(columns=["title"])
        left = left.assign(_key=np.arange(len(left)))
        right = right.assign(_key=np.arange(len(right)))
        method, key_column, missing_reason = "row order", "expert_code", ""
    elif "title" in coded.columns and "title" in gold.columns:
        keys = ["title"] + (["context"] if "context" in coded.columns and "context" in gold.columns else [])
        left = left.assign(_key=_key_of(left, keys))
        right = right.assign(_key=_key_of(right, keys)).drop(columns=keys).drop_duplicates("_key", keep="first")
        method, key_column = " and ".join(keys), "title"
        missing_reason = f"no coded record with the same {method}"
    else:
        raise InputError(f"cannot join {coded_name} ({len(coded):,} rows) with {gold_name} ({len(gold):,} rows): "
                         f"give both a 'record_id' column, or give them the same rows in the same order, "
                         f"or give both a 'title' column (and 'context' if used)")
    joined = left.merge(right, on="_key", how="left", suffixes=("", "_coded"))
    unmatched = joined["_row_coded"].isna()
    for row, value in zip(joined.loc[unmatched, ROW_COLUMN], joined.loc[unmatched, key_column]):
        reason = missing_reason if str(value).strip() else f"{key_column} is empty"
        rejects.add(gold_name, int(row), key_column, reason, value)
    joined = joined.loc[~unmatched].drop(columns=["_key"]).reset_index(drop=True)
    joined["_row_coded"] = joined["_row_coded"].astype(int)
    return joined, method


def _same_titles(coded: pd.DataFrame, gold: pd.DataFrame, coded_name: str, gold_name: str) -> None:
    """Joining by row order is safe only if the rows line up; equal titles row by row show they do."""
    differ = np.flatnonzero(_text(coded["title"]).str.casefold().to_numpy()
                            != _text(gold["title"]).str.casefold().to_numpy())
    if len(differ):
        i = differ[0]
        raise InputError(f"{gold_name} row {gold[ROW_COLUMN].iloc[i]} and {coded_name} row "
                         f"{coded[ROW_COLUMN].iloc[i]}: the files have equal length but different titles "
                         f"({gold['title'].iloc[i]!r} vs {coded['title'].iloc[i]!r}); add a 'record_id' "
                         f"column to both files to join them")


def _key_of(frame: pd.DataFrame, keys: list[str]) -> pd.Series:
    parts = [_text(frame[k]).str.casefold().str.split().str.join(" ") for k in keys]
    return parts[0] if len(parts) == 1 else parts[0] + "\x1f" + parts[1]


def _clean(joined: pd.DataFrame, coded_name: str, gold_name: str, rejects: Rejects, notes: list) -> pd.DataFrame:
    """Drop (to the rejects) records without an expert code or with an unreadable confidence or decision."""
    keep = pd.Series(True, index=joined.index)
    expert = _text(joined["expert_code"])
    for row in joined.loc[expert == "", ROW_COLUMN]:
        rejects.add(gold_name, int(row), "code", "the gold record has no expert code", "")
    keep &= expert != ""
    if "confidence" in joined.columns:
        text = _text(joined["confidence"])
        number, bad = read_confidence(joined["confidence"])
        for row, value in zip(joined.loc[bad, "_row_coded"], text[bad]):
            rejects.add(coded_name, int(row), "confidence", "confidence is not a number in [0, 1]", value)
        keep &= ~bad
        joined = joined.assign(confidence=number)
        if (text == "").any():
            notes.append(f"{int(((text == '') & keep).sum()):,} records have no confidence (no code offered); "
                         f"they count as referred and are left out of the calibration figures.")
    if "decision" in joined.columns:
        decision = _text(joined["decision"]).str.lower()
        bad = ~decision.isin(DECISIONS)
        for row, value in zip(joined.loc[bad, "_row_coded"], joined.loc[bad, "decision"]):
            rejects.add(coded_name, int(row), "decision", "decision is neither 'accept' nor 'refer'", value)
        keep &= ~bad
        joined = joined.assign(decision=decision)
    return joined.loc[keep].reset_index(drop=True)


def _measure(name: str, value: float, n: int, interval=None, note: str = "") -> dict:
    lower, upper = (interval.lower, interval.upper) if interval is not None else (np.nan, np.nan)
    return {"measure": name, "value": value, "ci_lower": lower, "ci_upper": upper, "records": n, "note": note}


def _mean_rows(a):
    return a.mean(axis=-1)


def _difference(a, b):
    return a.mean(axis=-1) - b.mean(axis=-1)


def evaluate(coded: pd.DataFrame, gold: pd.DataFrame, *, min_accuracy: float | None = None, margin: float = 0.0,
             n_boot: int = 1000, seed: int = 0, n_bins: int = 15, level: str = "as_given", top: int = 20,
             coded_name: str = "coded file", gold_name: str = "gold file", rejects: Rejects | None = None,
             quiet: bool = True, hierarchy=None) -> Evaluation:
    """Evaluate coded output against a gold sample.

    Parameters
    ----------
    coded : coded output (columns ``code`` and, with a confidence model, ``confidence``, ``decision``).
    gold : gold sample with the expert's ``code`` and optional ``manual_code``.
    min_accuracy, margin : threshold policy, passed to ``routing.choose_threshold``.
    n_boot, seed : bootstrap resamples for the intervals and the threshold choice.
    n_bins : bins of the reliability table and the ECE.
    level : compare codes at this SOC level (``metrics.code_at_level``), e.g. ``"detailed"``
        when one file has O*NET-SOC codes and the other SOC codes.
    top : rows of the confusion table.
    hierarchy : a ``Classification`` whose groups the results by group and the parent-group accuracy
        use; by default the codes' own shape (``classification.implicit_parent`` / ``implicit_top``).

    Returns
    -------
    Evaluation; pass it to ``write_report``.

    Example
    -------
    >>> coded = pd.DataFrame({"code": ["11-1011", "15-1252"], "confidence": ["0.9", "0.4"]})
    >>> gold = pd.DataFrame({"code": ["11-1011", "15-1251"]})
    >>> float(evaluate(coded, gold, n_boot=50).summary.set_index("measure").loc["machine accuracy", "value"])
    0.5
    """
    rejects = rejects if rejects is not None else Rejects()
    notes: list[str] = []
    joined, method = join_gold(coded, gold, coded_name=coded_name, gold_name=gold_name, rejects=rejects)
    records = _clean(joined, coded_name, gold_name, rejects, notes)
    if records.empty:
        raise InputError(f"{gold_name}: no gold record could be evaluated against {coded_name} "
                         f"({len(rejects):,} set aside; see the rejects file)")
    for column in ("expert_code", "machine_code", "manual_code"):
        if column in records.columns:
            records[column] = metrics.code_at_level(records[column], level).to_numpy()
    if "manual_code" in records.columns and (records["manual_code"] == "").all():
        notes.append("The manual_code column is empty; coders alone are not compared.")
        records = records.drop(columns=["manual_code"])
    elif "manual_code" in records.columns and (records["manual_code"] == "").any():
        notes.append(f"{int((records['manual_code'] == '').sum()):,} gold records have no manual code; "
                     f"they count as coded wrong by coders alone.")
    has_manual = "manual_code" in records.columns
    has_conf = "confidence" in records.columns and records["confidence"].notna().any()
    n = len(records)
    expert, machine = records["expert_code"], records["machine_code"]
    machine_right = (expert == machine).to_numpy(dtype=float)
    rows = [_measure("machine accuracy", metrics.accuracy(expert, machine), n,
                     metrics.bootstrap_ci(_mean_rows, machine_right, n_boot=n_boot, seed=seed, vectorized=True),
                     "top code against the expert's code"),
            _measure("machine macro-F1", metrics.macro_f1(expert, machine), n, None, "mean F1 over codes")]
    parent_of = hierarchy.parent_of if hierarchy is not None else _implicit_parents
    parent_right = (parent_of(expert.to_numpy()) == parent_of(machine.to_numpy())).astype(float)
    rows.append(_measure("machine parent-group accuracy", float(parent_right.mean()), n,
                         metrics.bootstrap_ci(_mean_rows, parent_right, n_boot=n_boot, seed=seed, vectorized=True),
                         "the group directly above the code (e.g. ISCO-08 minor group, SOC broad occupation)"))
    if has_manual:
        manual = records["manual_code"]
        manual_right = (expert == manual).to_numpy(dtype=float)
        rows += [_measure("coders alone accuracy", metrics.accuracy(expert, manual), n,
                          metrics.bootstrap_ci(_mean_rows, manual_right, n_boot=n_boot, seed=seed, vectorized=True),
                          "manual code against the expert's code"),
                 _measure("coders alone macro-F1", metrics.macro_f1(expert, manual), n),
                 _measure("machine minus coders accuracy", float(machine_right.mean() - manual_right.mean()), n,
                          metrics.bootstrap_ci(_difference, machine_right, manual_right, n_boot=n_boot, seed=seed,
                                               vectorized=True), "paired: same records resampled together")]
    choice = reliability = None
    if has_conf:
        with_conf = records["confidence"].notna().to_numpy()
        right, conf = machine_right[with_conf], records["confidence"].to_numpy()[with_conf]
        reliability = metrics.reliability_table(right, conf, n_bins=n_bins)
        ece = metrics.bootstrap_ci(lambda y, p: metrics.expected_calibration_error(y, p, n_bins=n_bins), right, conf,
                                   n_boot=min(n_boot, 200), seed=seed)
        rows += [_measure("expected calibration error", ece.estimate, len(conf), ece,
                          f"{n_bins} equal-width bins; 0 = confidence matches the share right"),
                 _measure("Brier score", metrics.brier_score(right, conf), len(conf), None, "lower is better"),
                 _measure("log loss", metrics.log_loss(right, conf), len(conf), None, "lower is better")]
        # titles the coder's gate flagged are referred whatever their confidence, here as in the run
        flags = records[FLAG_COLUMN].fillna("").astype(str) if FLAG_COLUMN in records.columns else None
        choice = choose_threshold(gated(records["confidence"], flags), machine, expert, records.get("manual_code"),
                                  min_accuracy=min_accuracy, margin=margin, n_boot=n_boot, seed=seed, quiet=quiet)
        rows += _choice_rows(choice, records, n)
    if "decision" in records.columns:
        accepted = (records["decision"] == "accept").to_numpy()
        rows.append(_measure("share accepted in the coded file", float(accepted.mean()), n, None,
                             "the decision column as the run routed it"))
        if accepted.any():
            rows.append(_measure("accuracy of records accepted in the coded file",
                                 float(machine_right[accepted].mean()), int(accepted.sum())))
    summary = pd.DataFrame(rows)
    groups = metrics.per_major_group(expert, machine, records.get("manual_code"),
                                     group_of=hierarchy.top_of if hierarchy is not None else None)
    confusion = _titled(metrics.confusions(expert, machine, top=top), records)
    facts = {"gold records": f"{len(gold):,}", "records evaluated": f"{n:,}", "records set aside": f"{len(rejects):,}",
             "joined by": method, "codes compared at level": level, "bootstrap resamples": f"{n_boot:,}",
             "seed": seed}
    return Evaluation(records, summary, groups, confusion, method, choice, reliability, facts, notes, rejects, n_bins)


def _implicit_parents(codes) -> np.ndarray:
    from ..coding.classification import implicit_parent
    return np.array([implicit_parent(c) for c in codes], dtype=object)


def _choice_rows(choice: ThresholdChoice, records: pd.DataFrame, n: int) -> list[dict]:
    rows = [_measure("chosen threshold", choice.threshold, n, None, choice.describe()),
            _measure("share automated at the threshold", choice.expected_share_automated, n),
            _measure("accuracy of accepted records at the threshold", choice.expected_accuracy,
                     int(round(choice.expected_share_automated * n)), None, "")]
    if choice.mix_accuracy == choice.mix_accuracy:
        flags = records[FLAG_COLUMN].fillna("").astype(str) if FLAG_COLUMN in records.columns else None
        accepted = route(records["confidence"], choice.threshold, flags=flags) == "accept"
        mix = np.where(accepted, records["machine_code"], records["manual_code"])
        rows += [_measure("machine + coders accuracy at the threshold", choice.mix_accuracy, n),
                 _measure("machine + coders macro-F1 at the threshold",
                          metrics.macro_f1(records["expert_code"], mix), n)]
    return rows


def _titled(confusion: pd.DataFrame, records: pd.DataFrame) -> pd.DataFrame:
    """Add code titles from the coded file's ``code_title``, else from the shipped O*NET titles."""
    titles: dict[str, str] = {}
    try:
        from ..io.lexicon import load_lexicon
        onet = load_lexicon("onet_soc_2019_titles")
        for code, title in zip(onet["onet_soc_code"].astype(str), onet["title"].astype(str)):
            titles[code] = title
            if code.endswith(".00"):
                titles[code[:-3]] = title
    except (FileNotFoundError, KeyError, ValueError):
        pass  # titles are a convenience; the codes say it all
    if "code_title" in records.columns:
        pairs = records[["machine_code", "code_title"]].drop_duplicates("machine_code")
        titles.update({c: t for c, t in zip(pairs["machine_code"], _text(pairs["code_title"])) if t})
    confusion = confusion.copy()
    confusion.insert(1, "truth_title", confusion["truth"].map(titles).fillna(""))
    confusion.insert(3, "predicted_title", confusion["predicted"].map(titles).fillna(""))
    return confusion


SUMMARY_FORMATS = {"ci_lower": ".4f", "ci_upper": ".4f", "value": ".4f", "records": ","}


def write_report(evaluation: Evaluation, out_dir: str | os.PathLike) -> dict[str, Path]:
    """Write ``report.html`` (self-contained), the figures as PNG and their data as CSV into ``out_dir``.

    Returns a mapping of what was written (``report``, ``summary``, ``major_groups``,
    ``confusions``, ``rejects`` and, with confidences, ``curve``, ``thresholds``,
    ``reliability``, ``automation_figure``, ``reliability_figure``).
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    ev = evaluation
    written = {"summary": write_table(ev.summary, out / "summary.csv"),
               "major_groups": write_table(ev.major_groups, out / "major_groups.csv"),
               "confusions": write_table(ev.confusions, out / "confusions.csv"),
               "rejects": ev.rejects.write(out / "rejects.csv")}
    parts = [htmlpage.cautions(htmlpage.COMMON_CAUTIONS)]
    parts.append(htmlpage.section("Key figures", htmlpage.table(ev.summary, SUMMARY_FORMATS),
                                  htmlpage.paragraph("Intervals are 95% percentile bootstrap intervals over "
                                                     "resamples of the gold records."),
                                  *[htmlpage.paragraph(note) for note in ev.notes]))
    if ev.choice is not None:
        written["curve"] = write_table(ev.choice.curve, out / "curve.csv")
        written["thresholds"] = write_table(ev.choice.candidates, out / "thresholds.csv")
        written["reliability"] = write_table(ev.reliability, out / "reliability.csv")
        written["automation_figure"] = plots.plot_automation_curve(ev.choice.curve, ev.choice,
                                                                   out / "automation_curve.png")
        right = (ev.records["expert_code"] == ev.records["machine_code"]).to_numpy()
        with_conf = ev.records["confidence"].notna().to_numpy()
        written["reliability_figure"] = plots.plot_reliability(right[with_conf],
                                                               ev.records["confidence"].to_numpy()[with_conf],
                                                               out / "reliability.png", n_bins=ev.n_bins)
        parts.append(htmlpage.section(
            "How much to automate",
            htmlpage.paragraph(ev.choice.describe()),
            htmlpage.figure(written["automation_figure"], "quality against share automated",
                            "Each point is a threshold: records at or above it keep the machine's code, the rest "
                            "go to coders. Data: curve.csv; thresholds tested with their bounds: thresholds.csv."),
            htmlpage.paragraph("Referred records must be coded by people; the threshold only holds while the "
                               "new records resemble the gold sample (see the drift report).")))
        parts.append(htmlpage.section(
            "Does the confidence mean what it says?",
            htmlpage.figure(written["reliability_figure"], "reliability diagram",
                            "Records grouped by confidence; in a well-calibrated model each point lies on the "
                            "diagonal. Data: reliability.csv."),
            htmlpage.table(ev.reliability, {"lower": ".3f", "upper": ".3f", "count": ",",
                                            "mean_predicted": ".3f", "observed_rate": ".3f"})))
    else:
        parts.append(htmlpage.section("How much to automate", htmlpage.paragraph(
            "The coded file has no confidence column, so no threshold can be chosen; code with a confidence "
            "model to get one.")))
    parts.append(htmlpage.section("Results by major group", htmlpage.paragraph(
        "Top group of the expert's code in the classification (without one: a SOC code's first two digits, "
        "else its first character). Data: major_groups.csv."),
        htmlpage.table(ev.major_groups, {"records": ",", "share": ".1%", "accuracy": ".1%",
                                         "manual_accuracy": ".1%"})))
    if ev.agreement is not None:
        written["agreement"] = write_table(ev.agreement, out / "agreement.csv")
        parts.append(htmlpage.section("Do two coders agree?", htmlpage.paragraph(
            "Titles of the double-coded sample, decided by two coders who did not see each other's choice. "
            "Agreement is the share decided alike; Cohen's kappa discounts the agreement expected by chance. "
            "Group: the parent group of the first coder's code. Data: agreement.csv."),
            htmlpage.table(ev.agreement, {"titles": ",", "records": ",", "agreement": ".1%", "kappa": ".3f"})))
    parts.append(htmlpage.section("Most frequent confusions", htmlpage.paragraph(
        "Expert's code (truth) against the machine's top code, where they differ. Data: confusions.csv."),
        htmlpage.table(ev.confusions, {"count": ",", "share_of_truth": ".1%"})))
    if len(ev.rejects):
        parts.append(htmlpage.section("Records set aside", htmlpage.paragraph(
            f"{len(ev.rejects):,} gold records could not be evaluated; rejects.csv names each with the reason."),
            htmlpage.table(ev.rejects.frame(), max_rows=20)))
    parts.append(htmlpage.paragraph(ONET_ATTRIBUTION))
    written["report"] = htmlpage.write_page(htmlpage.page("Coding quality on the gold sample", parts,
                                                          facts=ev.facts), out / "report.html")
    return written
