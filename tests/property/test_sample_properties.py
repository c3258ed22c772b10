"""Properties of grading any lab export: never a bug, counts add up, each row's verdict its own."""

from __future__ import annotations

import random

from hypothesis import example, given, strategies as st

from property_inputs import assert_no_bug, grade, sample_rows, to_csv


@given(rows=sample_rows())
def test_any_export_is_graded_without_a_bug_and_the_counts_add_up(rows):
    result = grade(to_csv(rows))
    assert_no_bug(result.code, result.err)
    assert result.code == 0
    read, graded, unrated, rejected = result.counts
    assert read == len(rows) and graded + unrated + rejected == read
    assert len(result.verdicts) == graded + unrated
    assert all(grade_ == "unrated" for grade_, level, _ in result.verdicts.values() if level is None)
    # each record names the row its sample was written on (the N-th line after the header)
    assert result.origins == {row["sample_id"]: ("<stdin>", n) for n, row in enumerate(rows, 1)
                              if row["sample_id"] in result.verdicts}


@given(rows=sample_rows(min_rows=2, max_rows=8), seed=st.integers(0, 2**16))
def test_each_verdict_is_independent_of_the_other_rows_and_their_order(rows, seed):
    together = grade(to_csv(rows))
    shuffled = rows[:]
    random.Random(seed).shuffle(shuffled)
    assert grade(to_csv(shuffled)).verdicts == together.verdicts
    for row in random.Random(seed).sample(rows, min(3, len(rows))):  # three alone: enough, and quick
        alone = grade(to_csv([row]))
        if row["sample_id"] in together.verdicts:
            assert alone.verdicts == {row["sample_id"]: together.verdicts[row["sample_id"]]}
        else:
            assert alone.verdicts == {}  # rejected together, rejected alone


@given(rows=sample_rows())
def test_a_file_and_standard_input_give_the_same_results(rows, tmp_path_factory):
    text = to_csv(rows)
    from_stdin = grade(text)
    from_file = grade(text, tmp_path=tmp_path_factory.mktemp("file"))
    assert from_file.verdicts == from_stdin.verdicts and from_file.counts == from_stdin.counts


@given(rows=sample_rows(max_rows=6), cut=st.integers(0, 2000), junk=st.binary(max_size=12))
def test_a_damaged_export_is_never_a_bug(rows, cut, junk):
    """Bytes cut out or spliced in anywhere: a clear refusal or a graded file, never exit 1."""
    raw = to_csv(rows).encode("utf-8")
    cut %= len(raw) + 1
    damaged = (raw[:cut] + junk + raw[cut + len(junk):]).decode("utf-8", errors="replace")
    result = grade(damaged)
    assert_no_bug(result.code, result.err)
    if result.code == 0 and result.counts:
        read, graded, unrated, rejected = result.counts
        assert graded + unrated + rejected == read


@given(rows=sample_rows(min_rows=2, max_rows=6), ragged=st.lists(st.integers(-2, 2), min_size=6, max_size=6))
@example(rows=[{"sample_id": f"GB-{i:04d}", "unit_id": f"GB-U{i}", "class": "gearbox", "lubricant": "GEAR-320-PAO",
                "sampled_on": "2026-03-02", "kv40": "320", "an": "0.8", "water": "100", "oxidation": ""}
               for i in range(3)], ragged=[1, 0, 0, 0, 0, 0])  # the case: one surplus field, first row
def test_rows_too_short_or_too_long_never_misname_a_sample(rows, ragged):
    """Each record names a sample id that was written, and every row is counted once."""
    lines = to_csv(rows).splitlines()
    damaged = [lines[0]]
    for line, extra in zip(lines[1:], ragged):
        cells = line.split(",")
        damaged.append(",".join(cells[:len(cells) + extra] if extra < 0 else cells + ["surplus"] * extra))
    result = grade("\n".join(damaged) + "\n")
    assert_no_bug(result.code, result.err)
    written = {row["sample_id"] for row in rows}
    assert set(result.verdicts) <= written
    assert all(damaged[row].split(",")[0] == sid for sid, (_, row) in result.origins.items())  # its own line
    read, graded, unrated, rejected = result.counts
    assert read == len(rows) and graded + unrated + rejected == read
