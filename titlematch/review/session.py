"""One coder's review session: the queue, the journal and the search index, without any web code.

Which title a coder sees is decided from the journal alone, under its lock: the title this
coder holds a live lease on (so a restart resumes it), else the first title in queue order
that still needs a decision, is not leased by another coder and was not set aside by this
coder; titles set aside come back once nothing else is left. A title of the double-coded
sample needs two decisions from two different coders, and the second coder is not shown the
first one's choice.
"""
from __future__ import annotations

import re
import threading
import time

import pandas as pd

from ..coding.dictionary import TitleDictionary
from ..io import InputError
from ..normalize.title import normalize_title
from .decisions import DECIDED, Journal, in_double_sample
from .search import ClassificationSearch, parent_group

LEASE_SECONDS = 20 * 60     # a title held this long without a sign of the coder goes back to the pool
EXAMPLES = 4                # example records shown per title


class DecisionRefused(ValueError):
    """A decision the session will not write (unknown code, title not held); the message says why."""


def find_residual_code(catalogue: pd.DataFrame) -> str:
    """The classification's code for titles that cannot be coded, if it has one: the first code the
    coder's gate offers for non-answers (:func:`titlematch.coding.gate.residual_codes`)."""
    from ..coding.gate import residual_codes
    codes = residual_codes(catalogue)
    return codes[0] if codes else ""


def group_titles() -> dict[str, str]:
    """Parent-group titles from the shipped lexicons (SOC 2018 major groups, ISCO-08 major groups)."""
    from ..io.lexicon import load_lexicon
    titles: dict[str, str] = {}
    for name, level in (("soc_2018_major_groups", None), ("isco08_groups", "1")):
        try:
            table = load_lexicon(name)
        except (FileNotFoundError, KeyError, ValueError):
            continue
        if level is not None and "level" in table.columns:
            table = table[table["level"] == level]
        titles.update(zip(table["code"].astype(str), table["title"].astype(str)))
    return titles


def queue_titles(frame: pd.DataFrame, source: str) -> tuple[pd.DataFrame, dict[str, list[dict]]]:
    """The queue in order and example records per title, from a coded file or a queue file."""
    from .queue import referral_queue, unescape_formula

    frame = frame.copy()
    frame.columns = [unescape_formula(str(c)) for c in frame.columns]
    examples: dict[str, list[dict]] = {}
    if "coder_code" in frame.columns and "queue_id" in frame.columns:
        queue = frame.map(unescape_formula) if hasattr(frame, "map") else frame.applymap(unescape_formula)
        for col in ("title_normalized", "records"):
            if col not in queue.columns:
                raise InputError(f"{source}: the queue has no '{col}' column")
        queue = queue.assign(_order=pd.to_numeric(queue["queue_id"], errors="coerce")).sort_values("_order",
                                                                                                   kind="stable")
    else:
        if "title_normalized" not in frame.columns or "code" not in frame.columns:
            raise InputError(f"{source}: neither a coded file (title_normalized, code) nor a referral queue "
                             f"(queue_id, title_normalized, records, coder_code)")
        queue = referral_queue(frame)
        referred = frame
        if "decision" in frame.columns:
            referred = frame[frame["decision"].astype(str) == "refer"]
        keep = [c for c in ("record_id", "title", "context") if c in referred.columns]
        head = referred.groupby("title_normalized", sort=False).head(EXAMPLES)
        for key, part in head.groupby("title_normalized", sort=False):
            examples[str(key)] = part[keep].fillna("").astype(str).to_dict("records")
    queue = queue[queue["title_normalized"].fillna("").astype(str).str.strip() != ""]
    queue = queue.drop_duplicates("title_normalized", keep="first").reset_index(drop=True)
    return queue, examples


def _number(value) -> float | None:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return None if number != number else number


class ReviewSession:
    """Everything one coder's page needs, backed by the shared journal.

    Parameters
    ----------
    queue : DataFrame in queue order (``title_normalized, records, example_title, context, code,
        confidence, code_2, confidence_2, code_3, confidence_3``; missing columns are fine).
    dictionary : the TitleDictionary the queue was coded with (catalogue, evidence, search).
    journal : the decisions Journal.
    coder : this coder's name.
    double_code : share of titles (by a stable hash) that two coders decide independently.
    """

    def __init__(self, queue: pd.DataFrame, dictionary: TitleDictionary, journal: Journal, *, coder: str,
                 double_code: float = 0.0, examples: dict | None = None, residual_code: str | None = None,
                 threshold: float | None = None, lease_seconds: float = LEASE_SECONDS):
        self.coder = coder
        self.journal = journal
        self.double_code = float(double_code)
        self.threshold = threshold
        self.lease_seconds = lease_seconds
        self.examples = examples or {}
        self.catalogue = dictionary.code_titles()
        self.code_pattern = re.compile(dictionary.code_pattern or "")  # no pattern: codes are opaque strings
        self.search_index = ClassificationSearch(dictionary, group_titles=group_titles())
        self.residual_code = find_residual_code(dictionary.catalogue) if residual_code is None else residual_code
        if self.residual_code and self.residual_code not in self.catalogue:
            raise InputError(f"residual code {self.residual_code!r} is not in the dictionary's classification")
        self.keys: list[str] = queue["title_normalized"].astype(str).tolist()
        self.rows = {k: row for k, row in zip(self.keys, queue.to_dict("records"))}
        self.position = {k: i + 1 for i, k in enumerate(self.keys)}
        self.needed = {k: 2 if in_double_sample(k, self.double_code) else 1 for k in self.keys}
        self._lock = threading.Lock()  # one request at a time per server; the file lock covers servers

    # ---------------------------------------------------------------- state from the journal
    def _decided(self) -> dict[str, list[dict]]:
        out: dict[str, list[dict]] = {}
        for entry in self.journal.state.effective(DECIDED):
            out.setdefault(entry.get("title"), []).append(entry)
        return out

    def _skipped_by_me(self) -> set[str]:
        return {e.get("title") for e in self.journal.state.effective(("skip",)) if e.get("coder") == self.coder}

    def _held_by_others(self, now: float) -> set[str]:
        return {title for coder, (title, at) in self.journal.state.leases.items()
                if coder != self.coder and now - at < self.lease_seconds}

    def _needs_me(self, key: str, decided: dict) -> bool:
        entries = decided.get(key, ())
        return len(entries) < self.needed.get(key, 1) and all(e.get("coder") != self.coder for e in entries)

    def _choose(self) -> str | None:
        """The title this coder should see now, leasing it in the journal (call under the lock)."""
        state = self.journal.refresh()
        now = time.time()
        decided = self._decided()
        mine = state.leases.get(self.coder)
        if mine and mine[0] in self.rows and self._needs_me(mine[0], decided) \
                and mine[0] not in self._held_by_others(now):
            if now - mine[1] > self.lease_seconds / 2:  # still working on it: renew before it lapses
                self.journal.append({"action": "lease", "coder": self.coder, "title": mine[0]})
            return mine[0]
        others, skipped = self._held_by_others(now), self._skipped_by_me()
        later = None
        for key in self.keys:
            if key in others or not self._needs_me(key, decided):
                continue
            if key in skipped:
                later = later or key
                continue
            break
        else:
            key = later
        if key is not None:
            self.journal.append({"action": "lease", "coder": self.coder, "title": key})
        return key

    def progress(self) -> dict:
        decided = self._decided()
        # over the decided titles only: a next-title request must not walk a 50,000-title queue
        done = sum(1 for k, entries in decided.items() if k in self.needed and len(entries) >= self.needed[k])
        skipped = len({k for k in self._skipped_by_me() if k in self.rows and len(decided.get(k, ())) < self.needed[k]})
        mine = sum(1 for entries in decided.values() for e in entries if e.get("coder") == self.coder)
        return {"done": done, "skipped": skipped, "left": len(self.keys) - done - skipped, "total": len(self.keys),
                "by_me": mine, "damaged_lines": len(self.journal.state.damaged)}

    def _last_mine(self) -> dict | None:
        for entry in reversed(self.journal.state.effective()):
            if entry.get("coder") == self.coder:
                return entry
        return None

    # ---------------------------------------------------------------- what the page shows
    def title_view(self, key: str) -> dict:
        row = self.rows[key]
        decided = self._decided().get(key, [])
        candidates = []
        for suffix, rank in (("", 1), ("_2", 2), ("_3", 3)):
            code = str(row.get("code" + suffix, "") or "").strip()
            if not code or code in {c["code"] for c in candidates}:
                continue
            conf = _number(row.get("confidence" + suffix))
            group = parent_group(code)
            candidates.append({"rank": rank, "code": code, "title": self.catalogue.get(code, ""),
                               "confidence": conf, "group": group,
                               "group_title": self.search_index.group_titles.get(group, ""),
                               "known": code in self.catalogue,
                               "evidence": self.search_index.evidence(key, code)})
        examples = self.examples.get(key) or [{"title": str(row.get("example_title", "") or ""),
                                               "context": str(row.get("context", "") or "")}]
        written = str(row.get("example_title", "") or examples[0].get("title", ""))
        normalized = normalize_title(written)
        contexts = [c for c in str(row.get("context", "") or "").split("; ") if c]
        records = _number(row.get("records"))
        return {"key": key, "written": written, "normalized": key,
                "qualifiers": normalized.qualifiers, "records": int(records) if records else 0,
                "contexts": contexts, "examples": examples, "candidates": candidates,
                "position": self.position[key],
                "round": len(decided) + 1, "double": self.needed.get(key, 1) > 1}

    def state(self) -> dict:
        with self._lock, self.journal.locked():
            key = self._choose()
            last = self._last_mine()
            return {"coder": self.coder, "progress": self.progress(), "residual_code": self.residual_code,
                    "threshold": self.threshold, "current": self.title_view(key) if key else None,
                    "can_undo": last is not None,
                    "last": {"title": last.get("title"), "action": last.get("action"), "code": last.get("code", "")}
                    if last else None}

    def search(self, text: str) -> list[dict]:
        return self.search_index.search(text)

    # ---------------------------------------------------------------- what the coder does
    def decide(self, key: str, action: str, code: str = "", remark: str = "") -> dict:
        """Write one decision for the title this coder holds; ``action`` is code, uncodable or skip."""
        if action not in DECIDED + ("skip",):
            raise DecisionRefused(f"unknown action {action!r}; use code, uncodable or skip")
        code = str(code or "").strip()
        remark = str(remark or "")[:2000]
        if action == "code":
            if not code:
                raise DecisionRefused("choose a code first")
            if not self.code_pattern.match(code) or code not in self.catalogue:
                raise DecisionRefused(f"code {code!r} is not in the classification; nothing was saved")
        elif action == "uncodable":
            code = self.residual_code
        else:
            code = ""
        with self._lock, self.journal.locked():
            self.journal.refresh()
            held = self.journal.state.leases.get(self.coder)
            if key not in self.rows or not held or held[0] != key:
                raise DecisionRefused("this title is not the one you hold any more; the page was reloaded")
            if action != "skip" and not self._needs_me(key, self._decided()):
                raise DecisionRefused("this title has all the decisions it needs")
            row = self.rows[key]
            entry = {"action": action, "coder": self.coder, "title": key}
            if action != "skip":
                decided = self._decided().get(key, [])
                entry.update(code=code, machine_code=str(row.get("code", "") or ""),
                             machine_confidence=_number(row.get("confidence")),
                             records=int(_number(row.get("records")) or 1), context=str(row.get("context", "") or ""),
                             example_title=str(row.get("example_title", "") or ""), remark=remark,
                             round=len(decided) + 1)
            elif remark:
                entry["remark"] = remark
            saved = self.journal.append(entry)
        return {"saved": saved["id"], "state": self.state()}

    def undo(self) -> dict:
        """Take back this coder's last decision or set-aside; its title becomes the current one."""
        with self._lock, self.journal.locked():
            self.journal.refresh()
            last = self._last_mine()
            if last is None:
                raise DecisionRefused("nothing of yours to take back")
            self.journal.append({"action": "undo", "coder": self.coder, "undoes": last["id"],
                                 "title": last.get("title")})
            if last.get("title") in self.rows:
                self.journal.append({"action": "lease", "coder": self.coder, "title": last.get("title")})
        return {"undone": last["id"], "state": self.state()}

    def start(self, source: str) -> None:
        with self.journal.locked():
            self.journal.append({"action": "start", "coder": self.coder, "queue": source,
                                 "double_code": self.double_code, "titles": len(self.keys)})
