"""Self-contained HTML pages for reports: escaped tables, embedded PNG figures, cautions.

A page needs nothing but itself: styles are inline, figures are ``data:image/png;base64``
URIs, there is no script and no link to anything outside the file, so it opens the same on
a machine without network access. Every value from the data passes through ``html.escape``.
"""
from __future__ import annotations

import base64
import html
import math
import os
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterable, Mapping

import pandas as pd

from .. import __version__
from ..io import atomic_path

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"

STYLE = """
body { font-family: sans-serif; margin: 2em auto; max-width: 60em; line-height: 1.4; color: #222; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 1.6em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5em 0 1em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.6em; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
th { background: #eee; }
.cautions { border: 1px solid #999; padding: 0.5em 1em; background: #f7f7f7; }
figure { margin: 1em 0; } figcaption { font-size: 0.9em; color: #555; }
"""

COMMON_CAUTIONS = (
    "Keep people in the loop: coders review every referred record and a random sample of the accepted ones, "
    "and their corrections go back into the gold sample and the title dictionary.",
    "The figures describe this sample; a new survey wave, a new questionnaire or a new classification "
    "version can change them. Re-check before relying on a threshold.",
    "Microdata stay on the office's own machines: titlematch makes no network calls, and this page loads "
    "nothing from outside itself.",
    "The agency's own coding rules and classification notes prevail over any code suggested by the tool.",
)


def esc(value) -> str:
    """Escaped text of any value (quotes included)."""
    return html.escape("" if value is None else str(value), quote=True)


def _cell(value, fmt: str | None) -> tuple[str, bool]:
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        if isinstance(value, float) and math.isnan(value):
            return "", True
        if fmt:
            return format(value, fmt), True
        if isinstance(value, int) or float(value).is_integer() and abs(value) >= 1:
            return f"{int(value):,}", True
        return f"{value:.4f}", True
    return ("" if value is None else str(value)), False


def table(frame: pd.DataFrame, formats: Mapping[str, str] | None = None, max_rows: int | None = None) -> str:
    """An HTML table of ``frame`` (index dropped); ``formats`` maps a column to a format spec like ``".1%"``."""
    formats = formats or {}
    shown = frame if max_rows is None else frame.head(max_rows)
    head = "".join(f"<th>{esc(c)}</th>" for c in shown.columns)
    rows = []
    for record in shown.itertuples(index=False):
        cells = []
        for column, value in zip(shown.columns, record):
            value = value.item() if hasattr(value, "item") else value
            text, numeric = _cell(value, formats.get(column))
            cells.append(f'<td class="num">{esc(text)}</td>' if numeric else f"<td>{esc(text)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    note = ""
    if max_rows is not None and len(frame) > max_rows:
        note = f"<p>First {max_rows:,} of {len(frame):,} rows; the CSV beside this page has them all.</p>"
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>{note}"


def figure(png: str | os.PathLike | bytes, alt: str, caption: str = "") -> str:
    """An ``<img>`` with the PNG embedded as base64, inside a ``<figure>`` with a caption."""
    data = png if isinstance(png, bytes) else Path(png).read_bytes()
    if not data.startswith(PNG_SIGNATURE):
        raise ValueError(f"{png if not isinstance(png, bytes) else 'figure'}: not a PNG image")
    encoded = base64.b64encode(data).decode("ascii")
    cap = f"<figcaption>{esc(caption)}</figcaption>" if caption else ""
    return f'<figure><img src="data:image/png;base64,{encoded}" alt="{esc(alt)}">{cap}</figure>'


def paragraph(text: str) -> str:
    return f"<p>{esc(text)}</p>"


def section(heading: str, *parts: str) -> str:
    """A titled section; ``parts`` are HTML fragments already escaped by the helpers above."""
    return f"<section><h2>{esc(heading)}</h2>{''.join(parts)}</section>"


def cautions(items: Iterable[str]) -> str:
    return '<div class="cautions"><h2>Before you rely on these figures</h2><ul>' + "".join(
        f"<li>{esc(item)}</li>" for item in items) + "</ul></div>"


def page(title: str, parts: Iterable[str], *, facts: Mapping[str, object] | None = None) -> str:
    """A complete HTML document: title, a short facts list (inputs, date, version), then the parts."""
    made = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    facts = dict(facts or {})
    facts.setdefault("made", made)
    facts.setdefault("titlematch version", __version__)
    fact_list = "".join(f"<li>{esc(k)}: {esc(v)}</li>" for k, v in facts.items())
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{esc(title)}</title><style>{STYLE}</style></head><body>"
            f"<h1>{esc(title)}</h1><ul>{fact_list}</ul>{''.join(parts)}</body></html>\n")


def write_page(text: str, path: str | os.PathLike) -> Path:
    """Write an HTML page atomically as UTF-8."""
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return path
