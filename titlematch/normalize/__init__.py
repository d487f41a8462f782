"""Normalizers: job titles, establishment names, addresses, phonetic keys, spelling correction.

Import from the modules (``titlematch.normalize.title`` ...) or from here.
"""
from .address import normalize_addresses, normalize_postcode, normalize_postcodes, parse_address
from .name import normalize_name, normalize_names
from .phonetic import phonetic_key, phonetic_keys
from .spelling import SpellingCorrector
from .title import normalize_title, normalize_titles

__all__ = ["normalize_title", "normalize_titles", "SpellingCorrector", "normalize_name", "normalize_names",
           "parse_address", "normalize_addresses", "normalize_postcode", "normalize_postcodes",
           "phonetic_key", "phonetic_keys"]
