"""Data tables shipped with titlematch; read them through ``titlematch.lexicon``."""
