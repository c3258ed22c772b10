"""Workbooks written for tests: rows on the first sheet, cells as given (openpyxl, a runtime dependency)."""

from __future__ import annotations

import openpyxl


def write_workbook(path, rows: list) -> None:
    """A workbook of these rows (the first the header) on its first sheet."""
    book = openpyxl.Workbook()
    for row in rows:
        book.active.append(row)
    book.save(path)
