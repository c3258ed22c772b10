"""The terminal table: aligned, at most 100 columns, counts and cautions at the foot.

Also: long names are cut to fit, rows agree with the records, progress only on a terminal.
"""

import io
import os
import pty

import pytest
from conftest import ROOT
from table_text import table_lines

from sumpwise import grade, grade_batch, load_ruleset, read_samples
from sumpwise.vocabulary.cautions import CAUTIONS
from sumpwise.cli.main import main
from sumpwise.render.narrative import step_phrase
from sumpwise.render.table import WIDTH, _why, grade_marker, wants_progress, write_table


SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"
SCENARIO = ROOT / "scenarios" / "brackwater"
DATA = ROOT / "tests" / "data" / "report"


def test_table_fits_100_columns_and_lists_every_sample():
    graded = grade(read_samples(SAMPLES), load_ruleset(SITE))
    lines = table_lines(graded)
    assert max(len(line) for line in lines) <= 100
    body = "\n".join(lines)
    for result in graded.results():
        assert result.sample_id in body
    assert "Screening aid only" in body
    assert "rejected 4" in body


def _graded(samples, rules):
    ruleset = load_ruleset(rules)
    return grade_batch(read_samples(samples, None, None, None, ruleset.measures), ruleset)


@pytest.fixture(scope="module")
def demo():
    return _graded(SCENARIO / "samples.csv", SCENARIO / "site.yaml")


def test_demo_table_fits_100_columns_and_carries_the_cautions(demo):
    lines = table_lines(demo)
    assert max(len(line) for line in lines) <= WIDTH
    text = " ".join(" ".join(lines).split())
    for caution in CAUTIONS:
        assert caution in text
    assert demo.ruleset.id in text and "sumpwise" in text


def test_long_names_are_cut_to_fit_100_columns():
    batch = _graded(DATA / "long-names.csv", DATA / "long-names.yaml")
    lines = table_lines(batch)
    assert max(len(line) for line in lines) <= WIDTH
    rows = lines[2:2 + len(batch)]
    assert all("~" in row for row in rows)  # every sample id is longer than its column
    column = lines[0].index("grade")
    assert all(row[column - 2:column] == "  " for row in rows)  # the grade column lines up


def test_rows_say_what_the_records_say(demo):
    """Built column-wise from one record per shape; must match record-by-record rendering."""
    lines = table_lines(demo)
    head = lines[0]
    why_at = head.index("why")
    for line, result in zip(lines[2:], demo.results()):
        assert line.startswith(result.sample_id)
        assert f"{result.grade} {grade_marker(result.level)}" in line
        expected = _why(result)
        shown = line[why_at:]
        assert shown == expected or (shown.endswith("~") and expected.startswith(shown[:-1]))


def test_progress_goes_to_a_terminal_only(demo):
    master, slave = pty.openpty()
    try:
        with os.fdopen(slave, "w", closefd=True) as tty:
            assert tty.isatty()
            out = io.StringIO()
            write_table(demo, out, progress=tty, min_rows=100)
            tty.flush()
            shown = os.read(master, 65536).decode()
        assert f"{len(demo):,} of {len(demo):,} rows (100%)" in shown
        assert shown not in out.getvalue()
    finally:
        os.close(master)
    quiet = io.StringIO()
    write_table(demo, io.StringIO(), progress=quiet, min_rows=100)
    assert quiet.getvalue() == ""  # not a terminal: nothing


def test_short_runs_show_no_progress_even_on_a_terminal(demo):
    class Terminal(io.StringIO):
        def isatty(self):
            return True
    assert wants_progress(Terminal(), 50_001) and not wants_progress(Terminal(), 50_000)
    assert not wants_progress(io.StringIO(), 10**6)
    screen = Terminal()
    write_table(demo, io.StringIO(), progress=screen)  # 327 rows: below the default threshold
    assert screen.getvalue() == ""


def test_cli_table_keeps_stderr_to_the_summary_when_not_a_terminal():
    out, err = io.StringIO(), io.StringIO()
    code = main(["grade", str(SCENARIO / "samples.csv"), "--rules", str(SCENARIO / "site.yaml"),
                 "--format", "table", "--rejects", os.devnull], io.StringIO(""), out, err)
    assert code == 0
    assert "rows (" not in err.getvalue() and err.getvalue().startswith("sumpwise: ")
    assert max(len(line) for line in out.getvalue().splitlines()) <= WIDTH


def test_each_next_step_is_in_the_table_in_full_with_its_samples():
    # The site's water rule on the steam turbines asks (scenarios/brackwater/site.yaml, invented):
    # "Resample, and pressure-test the seawater-cooled lube oil cooler for a tube leak", within 7
    # days. The why column cuts it at 100 columns, so the foot lists each step once, whole, with
    # the samples that ask it; ST-2's wet samples BP-0154 and BP-0157 among them.
    graded = grade(read_samples(SAMPLES, None, None, None, load_ruleset(SITE).measures), load_ruleset(SITE))
    lines = table_lines(graded)
    assert max(len(line) for line in lines) <= 100
    foot = "\n".join(lines[lines.index("What to do (the rule set's next steps, each with the samples that ask it):"):])
    joined = " ".join(foot.split())
    assert ("Resample, and pressure-test the seawater-cooled lube oil cooler for a tube leak (within 7 days of "
            "sampling): BP-0154, BP-0157") in joined
    asked = {step_phrase(x.next_step.task, x.next_step.within_days) for r in graded.results()
             for x in r.reasons + r.caveats if x.next_step is not None}
    assert len(asked) >= 3 and all(" ".join(step.split()) + ":" in joined for step in asked)


def test_a_censored_reading_that_leaves_a_rule_undecided_is_named_on_its_line():
    # Water `<500` ppm against the site's steam-turbine ladder (watch 100): the reading may be
    # above the watch limit or below it, so "no limit crossed" alone would read as a clean sample.
    # The row with no water value comes first, so a shared line would lose the note.
    text = ("sample_id,unit_id,class,lubricant,sampled_on,water,kv40,an,oxidation\n"
            "C-2,ST-8,steam-turbine,TURB-46-M,2026-03-02,,46,0.1,2\n"
            "C-1,ST-9,steam-turbine,TURB-46-M,2026-03-02,<500,46,0.1,2\n")
    lines = table_lines(grade(read_samples(io.StringIO(text), "cens.csv"), load_ruleset(SITE)))
    by_id = {line.split()[0]: line for line in lines if line.startswith("C-")}
    assert "no limit crossed | undecided: water" in by_id["C-1"]
    assert "undecided" not in by_id["C-2"]
