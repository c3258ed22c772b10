"""The terminal table as `sumpwise grade --format table` writes it, line by line, for tests."""

from __future__ import annotations

import io

from sumpwise.render.table import WIDTH, write_table


def table_lines(batch, width: int = WIDTH) -> list[str]:
    out = io.StringIO()
    write_table(batch, out, width=width)
    return out.getvalue().splitlines()
