"""Any classification: codes, titles and the hierarchy they sit in.

A classification file is ``code, title`` with an optional ``parent`` (the code of the group a
code belongs to) or ``level`` (1 for the top groups, growing downwards). Codes are opaque
strings, kept exactly as written: leading zeros (ISCO-08 ``0110``), dots (O*NET-SOC
``29-1141.01``), letters. The hierarchy comes from ``parent`` when given; otherwise a code's
parent is the longest other code it starts with (ISCO-08 ``2166`` -> ``216``, NAICS), or, for
SOC codes, the zero-padded group code it extends (``29-1141`` -> ``29-1140`` -> ``29-1100``
-> ``29-0000``); a code with no such group on the list gets an implicit one by the same rules
(``implicit_parent``). The codes records are coded to are the leaves: codes no other code
names as its parent.

Built-in classifications are chosen by name (``isco08``, ``onet2019``, ``soc2018``); anything
else is read as a file.
"""
from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np
import pandas as pd

from ..io import ROW_COLUMN, InputError, read_table
from ..io.lexicon import load_lexicon

COLUMNS = ["code", "title", "parent", "level", "leaf"]
_SOC = re.compile(r"^(\d{2})-(\d{4})(?:\.(\d{2}))?$")
_SEPARATORS = "-._/ "


def _builtin_isco08() -> pd.DataFrame:
    return load_lexicon("isco08_groups")[["code", "title", "level"]]


def _builtin_onet(level: str) -> pd.DataFrame:
    from .codes import onet_classification
    return onet_classification(level)


# name -> (loader, what it is); the names are ours, the tables and their sources are in lexicons/README.md
BUILTIN = {
    "isco08": (_builtin_isco08, "ISCO-08: 436 unit groups under 130 minor, 43 sub-major and 10 major groups "
                                "(ESCO classification, European Commission)"),
    "onet2019": (lambda: _builtin_onet("onet"), "O*NET-SOC 2019: 1,016 occupations (O*NET Database, USDOL/ETA, "
                                                "CC BY 4.0)"),
    "soc2018": (lambda: _builtin_onet("soc"), "SOC 2018 detailed occupations, titled from O*NET-SOC 2019"),
}


def implicit_parent(code: str) -> str:
    """The group a code belongs to when the classification lists none: SOC codes by the SOC's
    zero-padding (``29-1141.01`` -> ``29-1141`` -> ``29-1140`` -> ``29-1100`` -> ``29-0000``),
    any other code by dropping its last character (``0110`` -> ``011``, NOC ``21232`` -> ``2123``)."""
    code = str(code or "")
    m = _SOC.match(code)
    if m:
        major, rest, onet = m.groups()
        if onet is not None:
            return f"{major}-{rest}"
        digits = rest.rstrip("0")  # detailed: 4 significant digits, broad 3, minor 1-2, major none
        if not digits:
            return ""
        return f"{major}-{rest[:{4: 3, 3: 2}.get(len(digits), 0)].ljust(4, '0')}"
    shorter = code[:-1].rstrip(_SEPARATORS)
    return shorter


def implicit_top(code: str) -> str:
    """The top group of a code the classification does not place: a SOC code's major group (its
    first two digits, as the SOC numbers them), else the first character (ISCO-08, NOC and ANZSCO
    number their major groups by the first digit)."""
    code = str(code or "").strip()
    if not code:
        return ""
    m = _SOC.match(code)
    return m.group(1) if m else code[0]


def _stem(code: str) -> str:
    """A SOC group code without its zero padding (``29-1100`` -> ``29-11``), for same-length parents.
    Only SOC codes pad groups with zeros: in NOC, ISCO-08 or NAICS a trailing zero is a digit like
    any other (NOC ``00010`` Legislators is no group of ``00012``), and O*NET-SOC ``29-1141.00`` is
    an occupation, not a group. Other padded schemes give a ``parent`` column."""
    m = _SOC.match(code)
    return code if not m or m.group(3) is not None else code.rstrip("0").rstrip(_SEPARATORS)


def _prefix_parents(codes: list[str]) -> dict[str, str]:
    """Parent of each code among the listed codes, from prefixes (see the module docstring)."""
    listed = set(codes)
    by_length: dict[int, list[str]] = {}
    for c in codes:
        by_length.setdefault(len(c), []).append(c)
    stems = {}
    for c in codes:  # padded group codes of the same length, by their stem
        s = _stem(c)
        if s and s != c:
            stems.setdefault((len(c), s), c)
    parents = {}
    for code in codes:
        parent = ""
        for k in range(len(code) - 1, 0, -1):  # the longest shorter code it starts with
            if code[:k] in listed:
                parent = code[:k]
                break
        own = _stem(code)
        for k in range(len(own) - 1, 0, -1):  # a longer match: a padded code of the same length
            hit = stems.get((len(code), own[:k]))
            if hit and hit != code and (not parent or len(_stem(hit)) > len(parent)):
                parent = hit
                break
        parents[code] = parent
    return parents


class Classification:
    """Codes, titles and hierarchy; ``leaf`` marks the codes records are coded to.

    Examples
    --------
    >>> import pandas as pd
    >>> c = Classification.from_frame(pd.DataFrame({"code": ["2", "21", "2166", "0110"],
    ...                                              "title": ["Professionals", "Science", "Designers", "Officers"]}))
    >>> c.leaves()["code"].tolist(), c.parent_of(["2166", "0110"]).tolist(), c.top_of(["2166", "0110"]).tolist()
    (['2166', '0110'], ['21', '011'], ['2', '0'])
    """

    def __init__(self, table: pd.DataFrame, name: str = ""):
        self.table = table[COLUMNS].reset_index(drop=True)
        self.name = name
        self._parent = dict(zip(self.table["code"], self.table["parent"]))
        self._top_cache: dict[str, str] = {}
        self._flat = not self.table["parent"].ne("").any()  # no group listed: the codes' own shape groups them
        self._groups = set(self.table.loc[~self.table["leaf"].astype(bool), "code"])

    # ---------------------------------------------------------------- building
    @classmethod
    def from_frame(cls, frame: pd.DataFrame, *, source: str = "classification", code_pattern: str | None = None,
                   name: str = "") -> "Classification":
        """A classification from ``code, title`` [, ``parent`` | ``level``]; bad rows raise ``InputError``
        naming the file (``source``), the row and the column."""
        missing = [c for c in ("code", "title") if c not in frame.columns]
        if missing:
            raise InputError(f"{source}: missing column(s) {', '.join(missing)}; a classification has code, title "
                             f"[, parent | level]; columns found: {', '.join(map(str, frame.columns))}")
        rows = (frame[ROW_COLUMN].to_numpy() if ROW_COLUMN in frame.columns else np.arange(2, len(frame) + 2))
        codes = frame["code"].fillna("").astype(str).str.strip()
        titles = frame["title"].fillna("").astype(str)
        for col, values, reason in (("code", codes, "empty code"),):
            bad = np.flatnonzero(values.to_numpy() == "")
            if len(bad):
                raise InputError(f"{source}, row {rows[bad[0]]}, column {col}: {reason}")
        dup = codes.duplicated()
        if dup.any():
            i = int(np.flatnonzero(dup.to_numpy())[0])
            raise InputError(f"{source}, row {rows[i]}, column code: code {codes.iloc[i]!r} is listed twice")
        code_list = codes.tolist()
        if "parent" in frame.columns:
            parents = frame["parent"].fillna("").astype(str).str.strip()
            unknown = parents.ne("") & ~parents.isin(set(code_list))
            if unknown.any():
                i = int(np.flatnonzero(unknown.to_numpy())[0])
                raise InputError(f"{source}, row {rows[i]}, column parent: parent {parents.iloc[i]!r} is not a code "
                                 f"of the classification")
            parent = dict(zip(code_list, parents))
            _check_cycles(parent, source)
        elif "level" in frame.columns:
            parent = _level_parents(code_list, frame["level"], rows, source)
        else:
            parent = _prefix_parents(code_list)
        used = {p for p in parent.values() if p}
        table = pd.DataFrame({"code": code_list, "title": titles.to_numpy(),
                              "parent": [parent[c] for c in code_list]})
        table["level"] = _depths(table["code"].tolist(), parent)
        table["leaf"] = ~table["code"].isin(used)
        if code_pattern:
            pattern = re.compile(code_pattern)
            bad = [i for i, (c, leaf) in enumerate(zip(code_list, table["leaf"])) if leaf and not pattern.match(c)]
            if bad:
                raise InputError(f"{source}, row {rows[bad[0]]}, column code: {len(bad)} code(s) do not match "
                                 f"{code_pattern!r}, e.g. {code_list[bad[0]]!r}")
        return cls(table, name=name or source)

    @classmethod
    def builtin(cls, name: str, code_pattern: str | None = None) -> "Classification":
        if name not in BUILTIN:
            raise InputError(f"unknown classification {name!r}; built-in: {', '.join(BUILTIN)}")
        return cls.from_frame(BUILTIN[name][0](), source=f"built-in classification {name}",
                              code_pattern=code_pattern, name=name)

    @classmethod
    def resolve(cls, name_or_path: str | os.PathLike, code_pattern: str | None = None) -> "Classification":
        """A built-in classification by name, else a classification file (CSV, Parquet or .xlsx)."""
        text = str(name_or_path)
        if text in BUILTIN and not Path(text).exists():
            return cls.builtin(text, code_pattern)
        if not Path(text).exists():
            raise InputError(f"classification {text!r}: no such file, and not a built-in name "
                             f"({', '.join(BUILTIN)})")
        return cls.from_frame(read_table(text, required=("code", "title")), source=text, code_pattern=code_pattern)

    @classmethod
    def implicit(cls, codes) -> "Classification":
        """A flat classification of the given codes (no titles), grouped by ``implicit_parent``."""
        codes = sorted({str(c) for c in codes if str(c)})
        table = pd.DataFrame({"code": codes, "title": "", "parent": "", "level": 1, "leaf": True})
        return cls(table, name="implicit")

    # ---------------------------------------------------------------- reading
    def leaves(self) -> pd.DataFrame:
        """The codes records are coded to, with their titles, in the file's order."""
        return self.table.loc[self.table["leaf"], ["code", "title"]].reset_index(drop=True)

    def titles(self) -> dict[str, str]:
        return dict(zip(self.table["code"], self.table["title"]))

    def is_group(self, code: str) -> bool:
        """A listed code other codes belong to (records are coded to leaves, not to groups)."""
        return code in self._groups

    def parent(self, code: str) -> str:
        """The group ``code`` belongs to: as listed, else implicit (flat lists, unlisted codes); ``""`` at the top."""
        if self._flat or not self._parent.get(code, "") and code not in self._groups:
            return implicit_parent(code)  # flat lists, unlisted codes and codes listed without any group
        return self._parent[code]

    def top(self, code: str) -> str:
        """The top group of ``code``: the root of its listed groups, else ``implicit_top``."""
        code = str(code)
        if code not in self._top_cache:
            if self._flat or not self._parent.get(code, "") and code not in self._groups:
                self._top_cache[code] = implicit_top(code)
            else:
                node = code
                while self._parent.get(node):
                    node = self._parent[node]
                self._top_cache[code] = node
        return self._top_cache[code]

    def parent_of(self, codes) -> np.ndarray:
        return np.array([self.parent(str(c)) if str(c) else "" for c in codes], dtype=object)

    def top_of(self, codes) -> np.ndarray:
        return np.array([self.top(str(c)) if str(c) else "" for c in codes], dtype=object)


def _check_cycles(parent: dict[str, str], source: str) -> None:
    for start in parent:
        seen, node = {start}, parent[start]
        while node:
            if node in seen:
                raise InputError(f"{source}: the parent column loops back to {node!r}")
            seen.add(node)
            node = parent.get(node, "")


def _level_parents(codes: list[str], levels: pd.Series, rows, source: str) -> dict[str, str]:
    """Parents from a ``level`` column: the prefix group of a lower level, else the nearest row above
    of a lower level (classifications are published top-down)."""
    numeric = pd.to_numeric(levels.astype(str).str.strip(), errors="coerce")
    bad = numeric.isna() | (numeric % 1 != 0)
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(f"{source}, row {rows[i]}, column level: level must be a whole number, "
                         f"got {levels.iloc[i]!r}")
    level = dict(zip(codes, numeric.astype(int)))
    by_prefix = _prefix_parents(codes)
    parents, stack = {}, []
    for code in codes:
        while stack and level[stack[-1]] >= level[code]:
            stack.pop()
        candidate = by_prefix[code]
        if candidate and level[candidate] < level[code]:
            parents[code] = candidate
        else:
            parents[code] = stack[-1] if stack else ""
        stack.append(code)
    return parents


def _depths(codes: list[str], parent: dict[str, str]) -> list[int]:
    depth = {}
    for code in codes:
        d, node = 1, parent.get(code, "")
        while node and d <= len(codes):
            d, node = d + 1, parent.get(node, "")
        depth[code] = d
    return [depth[c] for c in codes]
