"""JSON Lines: the bulk writer says exactly what each record says, in the same bytes every run."""

import io
import json
import subprocess
import sys

from conftest import DATA, ROOT

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.render.jsonl import dumps, write_jsonl

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"


def test_bulk_writer_matches_each_record_byte_for_byte():
    graded = grade(read_samples(SAMPLES), load_ruleset(SITE))
    out = io.StringIO()
    write_jsonl(graded, out)
    lines = out.getvalue().splitlines()
    assert len(lines) == len(graded)
    for line, result in zip(lines, graded.results()):
        assert line == dumps(result.to_record())
        assert json.loads(line)["sample_id"] == result.sample_id


def test_awkward_text_is_escaped():
    csv = 'sample_id,unit_id,class,an\n"Q""1","tab\there",steam-turbine,0.3\n'
    graded = grade(read_samples(io.StringIO(csv)), load_ruleset(DATA / "rulesets" / "draft.yaml"))
    out = io.StringIO()
    write_jsonl(graded, out)
    record = json.loads(out.getvalue())
    assert record["sample_id"] == 'Q"1' and record["unit_id"] == "tab\there"


def test_same_input_same_bytes_across_processes(tmp_path):
    outputs = []
    for name, seed in (("a.jsonl", "1"), ("b.jsonl", "2")):
        target = tmp_path / name
        subprocess.run([sys.executable, "-m", "sumpwise", "grade", str(SAMPLES), "--rules", str(SITE),
                        "--out", str(target)], check=True, capture_output=True, cwd=tmp_path,
                       env={"PYTHONHASHSEED": seed, "PATH": "/usr/bin:/bin"})
        outputs.append(target.read_bytes())
    assert outputs[0] == outputs[1]
    assert outputs[0].count(b"\n") == 327


def test_bulk_writer_matches_records_on_random_samples_of_every_class():
    from random_samples import random_samples
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    graded = grade(random_samples(ruleset, 2000, seed=5), ruleset)
    out = io.StringIO()
    write_jsonl(graded, out)
    lines = out.getvalue().splitlines()
    for line, result in zip(lines, graded.results()):
        assert line == dumps(result.to_record())
    assert len(lines) == 2000


def test_the_ledger_form_leaves_out_the_shared_tail_and_nothing_else():
    import pytest

    from sumpwise.render.jsonl import jsonl_lines
    from sumpwise.version import engine_name
    ruleset = load_ruleset(SITE)
    graded = grade(read_samples(SAMPLES), ruleset)
    tail = ", " + dumps({"notice": ruleset.notice, "ruleset": {"id": ruleset.id, "version": ruleset.version,
                                                              "sha256": ruleset.sha256}, "engine": engine_name()})[1:]
    full = "".join(jsonl_lines(graded)).splitlines()
    heads = "".join(jsonl_lines(graded, drop_tail=tail)).splitlines()
    assert len(heads) == len(full) == len(graded)
    assert [head + tail for head in heads] == full
    with pytest.raises(RuntimeError, match="does not end with the tail"):
        next(jsonl_lines(graded, drop_tail=', "engine": "another"}'))


def test_bulk_writer_spells_unchecked_cap_exceptions_like_the_records():
    # Ester rows with and without an acid number, and one without the new-oil value the
    # acid rise needs: each pattern of what the cap's exception lacked is its own shape.
    csv = ("sample_id,class,lubricant,an,new_an,oxidation\n"
           "e1,screw-compressor,COMP-46-PE,0.3,,215\ne2,screw-compressor,COMP-46-PE,,,215\n"
           "e3,screw-compressor,COMP-46-PE,,0.1,215\ne4,screw-compressor,COMP-46-M,,,30\n")
    graded = grade(read_samples(io.StringIO(csv)), load_ruleset(ROOT / "rules" / "screw-compressor.yaml"))
    out = io.StringIO()
    write_jsonl(graded, out)
    lines = out.getvalue().splitlines()
    assert lines == [dumps(r.to_record()) for r in graded.results()]
    missing = [[c.get("unless_missing") for c in json.loads(line)["caveats"]] for line in lines]
    assert missing == [[None], [["an"]], [["an"]], []]
