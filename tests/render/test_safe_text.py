"""Untrusted text out: escaped on terminals (table, explain, history, messages), formulas
neutralised in CSV (common practice: a leading apostrophe, OWASP "CSV Injection"), numbers kept."""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd
import pytest

from conftest import ROOT, run_cli
from sumpwise.render.safe_text import (spreadsheet_frame, spreadsheet_text, terminal_column, terminal_lines,
                                       terminal_text)

GEARBOX = ROOT / "rules" / "gearbox.yaml"
CLEAR_SCREEN_AND_RETITLE = "\x1b[2J\x1b]0;owned\x07"
HOSTILE = ("sample_id,unit_id,class,lubricant,sampled_on,kv40,an,water\n"
           f"{CLEAR_SCREEN_AND_RETITLE}GB1-0412,GB-1,gearbox,GEAR-320-PAO,2026-03-02,318.4,0.81,120\n"
           '"=HYPERLINK(""http://example.invalid"")",GB-1,gearbox,GEAR-320-PAO,2026-03-09,326.0,0.95,5200\n'
           "-12,GB-1,gearbox,GEAR-320-PAO,2026-03-16,320.0,0.90,100\n")


@pytest.mark.parametrize("raw, shown", [
    ("\x1b[31mred", "\\x1b[31mred"),
    ("a\x00b", "a\\x00b"),
    ("bell\x07", "bell\\x07"),
    ("line\nbreak\r", "line\\nbreak\\r"),
    ("c1\x9b31m", "c1\\x9b31m"),
    ("del\x7f", "del\\x7f"),
    ("rtl\u202eoverride", "rtl\\u202eoverride"),
    ("sep\u2028", "sep\\u2028"),
    ("lone\ud800", "lone\\ud800"),
    ("Brackwater Pointe, café µm 40 °C", "Brackwater Pointe, café µm 40 °C"),
])
def test_terminal_text_escapes_controls_and_keeps_printable_text(raw, shown):
    assert terminal_text(raw) == shown
    assert terminal_text(shown) == shown  # escaping twice changes nothing
    shown.encode("utf-8")  # a lone surrogate would make the terminal's encoder fail


def test_terminal_column_and_lines_agree_with_terminal_text():
    values = pd.Series(["GB1", "\x1b[2J", None, "ok\x07"], dtype=object)
    assert terminal_column(values).tolist() == ["GB1", "\\x1b[2J", None, "ok\\x07"]
    clean = pd.Series(["GB1", "GB2"]).astype(str)
    assert terminal_column(clean) is clean
    assert terminal_lines(["a\x1b", "b"]) == ["a\\x1b", "b"]


@pytest.mark.parametrize("cell, safe", [
    ("=1+2", "'=1+2"), ("+cmd|' /C calc'!A0", "'+cmd|' /C calc'!A0"), ("-2+3", "'-2+3"), ("@SUM(A1)", "'@SUM(A1)"),
    ("\t=1", "'\t=1"), ("\r=1", "'\r=1"), ("-", "'-"),
    ("-0.5", "-0.5"), ("+3e2", "+3e2"), ("-12", "-12"), ("GB-1", "GB-1"), ("", ""), (-0.5, -0.5), (None, None),
])
def test_spreadsheet_text_neutralises_formulas_but_not_numbers(cell, safe):
    assert spreadsheet_text(cell) == safe


def test_spreadsheet_frame_touches_only_risky_text_cells():
    frame = pd.DataFrame({"sample_id": pd.Series(["=A1", "GB-1", None], dtype=object),
                          "water": np.array([-1.0, 120.0, np.nan]),
                          "fired": pd.Series(["", "", ""]).astype(str)})
    safe = spreadsheet_frame(frame)
    assert safe["sample_id"].tolist() == ["'=A1", "GB-1", None]
    assert safe["water"].tolist()[:2] == [-1.0, 120.0]
    plain = frame[["water", "fired"]]
    assert spreadsheet_frame(plain) is plain  # nothing risky: the frame goes out as it came


def test_the_table_escapes_a_sample_id_holding_terminal_escapes():
    run = run_cli("grade", "-", "--rules", GEARBOX, "--format", "table", stdin=HOSTILE)
    assert run.code == 0
    assert "\x1b" not in run.out and "\x07" not in run.out
    assert "\\x1b[2J" in run.out


def test_grade_csv_neutralises_a_formula_and_keeps_a_negative_id(tmp_path):
    out = tmp_path / "results.csv"
    assert run_cli("grade", "-", "--rules", GEARBOX, "--format", "csv", "--out", out, stdin=HOSTILE).code == 0
    rows = list(csv.DictReader(io.StringIO(out.read_text())))
    ids = [r["sample_id"] for r in rows]
    assert "'=HYPERLINK(\"http://example.invalid\")" in ids and "-12" in ids
    assert not any(cell.startswith(("=", "@", "+")) for r in rows for cell in r.values())
    flagged = next(r for r in rows if r["sample_id"].startswith("'="))
    assert flagged["grade"] == "urgent"  # 5,200 ppm water in a gearbox: neutralising the id keeps the verdict


def test_explain_escapes_the_sample_id():
    hostile_id = f"{CLEAR_SCREEN_AND_RETITLE}GB1-0412"
    run = run_cli("explain", hostile_id, "--samples", "-", "--rules", GEARBOX, stdin=HOSTILE)
    assert run.code == 0 and "\x1b" not in run.out and "\\x1b[2J" in run.out.splitlines()[0]


def test_history_and_explain_from_the_ledger_escape_input_text(tmp_path):
    db = tmp_path / "ledger.db"
    assert run_cli("grade", "-", "--rules", GEARBOX, "--db", db, stdin=HOSTILE).code == 0
    history = run_cli("history", "GB-1", "--db", db)
    assert history.code == 0 and "\x1b" not in history.out and "\\x1b[2J" in history.out
    as_csv = run_cli("history", "GB-1", "--db", db, "--format", "csv")
    assert "'=HYPERLINK" in as_csv.out and "\n=HYPERLINK" not in as_csv.out
    story = run_cli("explain", f"{CLEAR_SCREEN_AND_RETITLE}GB1-0412", "--db", db)
    assert story.code == 0 and "\x1b" not in story.out and "\x07" not in story.out


def test_a_rejected_row_is_escaped_on_standard_error_and_neutralised_in_a_rejects_csv(tmp_path):
    bad = HOSTILE + "=1+1\x1b[5m,GB-1,gearbox,GEAR-320-PAO,2026-03-23,oops,0.9,100\n"
    rejects = tmp_path / "rejects.csv"
    on_stderr = run_cli("grade", "-", "--rules", GEARBOX, stdin=bad)
    assert on_stderr.code == 0 and "rejected" in on_stderr.err and "\x1b" not in on_stderr.err
    assert run_cli("grade", "-", "--rules", GEARBOX, "--rejects", rejects, stdin=bad).code == 0
    rows = list(csv.DictReader(io.StringIO(rejects.read_text())))
    assert len(rows) == 1 and rows[0]["sample_id"].startswith("'=1+1")


def test_an_error_message_quoting_input_text_is_escaped():
    run = run_cli("explain", "\x1b[2Jnowhere", "--samples", "-", "--rules", GEARBOX, stdin=HOSTILE)
    assert run.code == 2 and "\x1b" not in run.err and "\\x1b[2Jnowhere" in run.err


def test_compare_escapes_the_ids_of_samples_that_move(tmp_path):
    stricter = tmp_path / "stricter.yaml"
    stricter.write_text(GEARBOX.read_text().replace("above: {watch: 300, alert: 1000, urgent: 2000}",
                                                    "above: {watch: 50, alert: 1000, urgent: 2000}"))
    samples = tmp_path / "lab.csv"
    samples.write_text(HOSTILE)
    run = run_cli("compare", GEARBOX, stricter, "--samples", samples)
    assert run.code == 3 and "\x1b" not in run.out and "\\x1b[2J" in run.out
