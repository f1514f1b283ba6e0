"""The results folder: built whole and swapped in, its tidy tables as CSV, the workbook
and the JSON Schemas of what it writes."""

from .folder import OutputFolder
from .pseudonyms import PseudonymKey, default_key_path, pseudonymise_table
from .tables import TABLE_DESCRIPTIONS, comparison_schema, csv_bytes, results_schema
from .workbook import sheet_names, workbook_bytes

__all__ = [
    "OutputFolder",
    "PseudonymKey",
    "TABLE_DESCRIPTIONS",
    "comparison_schema",
    "csv_bytes",
    "default_key_path",
    "pseudonymise_table",
    "results_schema",
    "sheet_names",
    "workbook_bytes",
]
