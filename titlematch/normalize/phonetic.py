"""Phonetic keys (Soundex, Metaphone, NYSIIS) for blocking and comparing names.

The encoders are jellyfish's; this module only decides what text they see: the text is
folded to ASCII (unidecode), apostrophes are dropped (``O'Brien`` -> ``OBRIEN``) and it is
cut into runs of letters; digits and punctuation are not encoded. With ``token="first"``
(default) only the first word is encoded, the usual way to block on a surname or on the
leading word of an establishment name; ``token="all"`` encodes every word and joins the
codes with a space.

Example
-------
>>> phonetic_key("Robert"), phonetic_key("Rupert")
('R163', 'R163')
>>> phonetic_key("Blue Heron Cafe", token="all")
'B400 H650 C100'
"""
from __future__ import annotations

import re
from typing import Callable, Iterable

import jellyfish
import pandas as pd
from unidecode import unidecode
from ._missing import is_missing

__all__ = ["METHODS", "phonetic_key", "phonetic_keys"]

METHODS: dict[str, Callable[[str], str]] = {
    "soundex": jellyfish.soundex,
    "metaphone": jellyfish.metaphone,
    "nysiis": jellyfish.nysiis,
}
_TOKEN_MODES = ("first", "all")


def _check(method: str, token: str) -> Callable[[str], str]:
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    if token not in _TOKEN_MODES:
        raise ValueError(f"token must be 'first' or 'all'; got {token!r}")
    return METHODS[method]


def _words(text: str) -> list[str]:
    return re.findall(r"[a-z]+", re.sub(r"['`]", "", unidecode(text).lower()))


def _encode(text: str, encoder: Callable[[str], str], token: str) -> str:
    words = _words(text)
    if not words:
        return ""
    if token == "first":
        return encoder(words[0])
    return " ".join(encoder(w) for w in words)



def phonetic_key(text: str | None, method: str = "soundex", *, token: str = "first") -> str:
    """Phonetic code of ``text``.

    Parameters
    ----------
    text : str or None
        ``None``/NaN or text without letters gives "".
    method : {"soundex", "metaphone", "nysiis"}
    token : {"first", "all"}
        Encode the first word only, or every word (codes joined by a space).

    Returns
    -------
    str

    Raises
    ------
    TypeError
        ``text`` is neither a string nor missing.
    ValueError
        Unknown ``method`` or ``token``.
    """
    encoder = _check(method, token)
    if is_missing(text):
        return ""
    if not isinstance(text, str):
        raise TypeError(f"phonetic_key: text must be a string, got {type(text).__name__}: {text!r}")
    return _encode(text, encoder, token)


def phonetic_keys(values: Iterable[object], method: str = "soundex", *, token: str = "first") -> pd.Series:
    """Vectorized :func:`phonetic_key`: one code per value, index kept, each distinct text
    encoded once; missing values give "", other non-strings are read with ``str``.

    Example
    -------
    >>> phonetic_keys(["Tymczak", None], "soundex").tolist()
    ['T522', '']
    """
    encoder = _check(method, token)
    if isinstance(values, (str, bytes)):
        raise TypeError("phonetic_keys: values must be a sequence, not a single string")
    series = values if isinstance(values, pd.Series) else pd.Series(list(values), dtype=object)
    cache: dict[str, str] = {}
    out = []
    for value in series.to_numpy(dtype=object):
        if is_missing(value):
            out.append("")
            continue
        text = value if isinstance(value, str) else str(value)
        if text not in cache:
            cache[text] = _encode(text, encoder, token)
        out.append(cache[text])
    return pd.Series(out, index=series.index, dtype=object, name=getattr(series, "name", None))
