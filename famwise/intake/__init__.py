"""Data in: read a file or DataFrame, validate it, build the Layout and the Ledger."""

from .reader import (EXCEL_SUFFIXES, PARQUET_SUFFIXES, TEXT_SUFFIXES, Intake, RawTable,
                     file_sha256, find_column, load_table, parse_values, read)

__all__ = ["Intake", "read", "file_sha256", "load_table", "parse_values", "find_column",
           "RawTable", "TEXT_SUFFIXES", "EXCEL_SUFFIXES", "PARQUET_SUFFIXES"]
