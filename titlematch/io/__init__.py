"""Reading and writing tables, rejects, checksummed artefacts and lexicons: the edges of the pipeline.

``read``      CSV, Parquet and .xlsx in, as strings with source row numbers (``csvparse`` and
              ``encoding`` do the hostile-CSV work)
``write``     tables out, atomically (``files``: suffixes, checksums, atomic replacement)
``rejects``   rows set aside with file, row, column and reason; ``errors``: ``InputError``
``columns``   the clash policy: columns a step adds never overwrite an input column
``artefact``  checksummed directories of Parquet, .npy and JSON that load without running code
``lexicon``   the CSV tables shipped in ``lexicons/``
"""
from .errors import InputError
from .files import CSV_SUFFIXES, EXCEL_SUFFIXES, PARQUET_SUFFIXES, atomic_path, file_sha256, refuse_overwrite
from .encoding import detect_file_encoding
from .csvparse import MAX_LINE_BYTES
from .read import (MAX_CELL_CHARS, ReadPosition, TableChunk, TableReader, iter_table_chunks, read_column,
                   read_table)
from .rejects import REJECT_COLUMNS, ROW_COLUMN, Rejects, rejects_path_for, require_columns
from .write import write_table

__all__ = ["InputError", "CSV_SUFFIXES", "EXCEL_SUFFIXES", "PARQUET_SUFFIXES", "atomic_path", "file_sha256",
           "refuse_overwrite",
           "detect_file_encoding", "MAX_LINE_BYTES", "MAX_CELL_CHARS", "ReadPosition", "TableChunk",
           "TableReader", "iter_table_chunks", "read_column", "read_table", "REJECT_COLUMNS", "ROW_COLUMN", "Rejects",
           "rejects_path_for", "require_columns", "write_table"]
