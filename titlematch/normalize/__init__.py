"""Normalizers: job titles, establishment names, addresses, phonetic keys, spelling correction."""
