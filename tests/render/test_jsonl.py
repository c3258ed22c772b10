"""JSON Lines: the bulk writer says exactly what each record says, in the same bytes every run."""

import io
import json
import subprocess
import sys

from conftest import DATA, ROOT

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.render.jsonl import dumps, jsonl_lines, write_jsonl

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
    # the scenario's forecasts and cleanliness codes are in it: each forecast on the one record it was made from
    records = [json.loads(line) for line in lines]
    assert sum(len(r["forecasts"]) for r in records) == len(graded.forecasts) > 0
    assert all(f["sample_id"] == r["sample_id"] for r in records for f in r["forecasts"])
    assert any(r["iso4406"] for r in records)
    compact = "".join(jsonl_lines(graded, form="compact")).splitlines()
    assert compact == [dumps(result.to_record("compact")) for result in graded.results()]


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
    missing = [[c.get("unless_missing") for c in json.loads(line)["caveats"] if c["caveat"] == "ester-carbonyl"]
               for line in lines]
    assert missing == [[None], [["an"]], [["an"]], []]


def test_both_forms_match_each_record_on_random_samples_of_every_class():
    from random_samples import random_samples
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    graded = grade(random_samples(ruleset, 2000, seed=13), ruleset)
    results = list(graded.results())
    for form in ("full", "compact"):
        out = io.StringIO()
        write_jsonl(graded, out, form)
        lines = out.getvalue().splitlines()
        assert len(lines) == 2000
        for line, result in zip(lines, results):
            assert line == dumps(result.to_record(form))


def _without_texts(record: dict, engine: set) -> dict:
    """A full record with the texts the compact form leaves to the rule set taken out (the engine's
    own caveats keep their message: it is this sample's fact, in no rule set)."""
    record = dict(record, form="compact")
    del record["notice"]
    record["reasons"] = [{k: v for k, v in r.items() if k not in ("message", "source", "next_step")}
                         for r in record["reasons"]]
    record["caveats"] = [{k: v for k, v in c.items()
                          if k not in ("source", "next_step") and (k != "message" or c["caveat"] in engine)}
                         for c in record["caveats"]]
    return record


def test_the_compact_record_keeps_every_fact_and_its_texts_are_the_rule_sets():
    from sumpwise.results.records import next_step_record
    # Facts by value, text by reference: the compact record is the full one without the rule
    # set's texts, and those texts are found again in the rule set by rule and caveat id.
    ruleset = load_ruleset(SITE)
    graded = grade(read_samples(SAMPLES), ruleset)
    full, compact = ("".join(jsonl_lines(graded, form=form)).splitlines() for form in ("full", "compact"))
    caveats = {caveat.id: caveat for caveat in ruleset.caveats}
    reasons = 0
    for whole, short in zip(full, compact):
        whole, short = json.loads(whole), json.loads(short)
        assert short == _without_texts(whole, {caveat.id for caveat in graded.engine_caveats})
        assert whole["notice"] == ruleset.notice
        assert short["ruleset"] == {"id": ruleset.id, "version": ruleset.version, "sha256": ruleset.sha256}
        for reason in whole["reasons"]:
            rule = {rule.id: rule for rule in ruleset.rules_for(whole["class"])}[reason["rule"]]
            assert (reason["message"], reason["source"]) == (rule.message, rule.source)
            assert reason.get("next_step") == (next_step_record(rule.next_step) if rule.next_step else None)
            reasons += 1
        for note in whole["caveats"]:
            if note["caveat"] in caveats:
                caveat = caveats[note["caveat"]]
                assert note["message"] == caveat.message
                assert note.get("next_step") == (next_step_record(caveat.next_step) if caveat.next_step else None)
    assert reasons > 50
    assert sum(map(len, compact)) < sum(map(len, full))


def test_compact_records_are_the_same_bytes_across_processes(tmp_path):
    outputs = []
    for name, seed in (("a.jsonl", "3"), ("b.jsonl", "4")):
        target = tmp_path / name
        subprocess.run([sys.executable, "-m", "sumpwise", "grade", str(SAMPLES), "--rules", str(SITE),
                        "--record", "compact", "--out", str(target)], check=True, capture_output=True,
                       cwd=tmp_path, env={"PYTHONHASHSEED": seed, "PATH": "/usr/bin:/bin"})
        outputs.append(target.read_bytes())
    assert outputs[0] == outputs[1]
    first = json.loads(outputs[0].splitlines()[0])
    assert first["format"] == 4 and first["form"] == "compact" and "notice" not in first


def test_the_record_option_names_a_json_lines_form():
    from conftest import run_cli
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--record", "compact", "--format", "csv")
    assert run.code == 2 and "--record compact is a JSON Lines form" in run.err and run.out == ""
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--record", "short")
    assert run.code == 2 and "invalid choice: 'short'" in run.err


def test_compact_records_equal_the_per_row_peers_on_random_samples_of_every_class(tmp_path):
    # The benchmark's peer builds each compact record on its own from the per-row oracle
    # (tests/support/row_evaluator.py), with no code of sumpwise's writers or records. It writes
    # the benchmark's data, which has no censored readings (their grading is held to the oracle in
    # tests/evaluation/test_evaluator.py), so these samples have none either.
    from random_samples import random_samples
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    random_samples(ruleset, 1500, seed=21, censored=0.0).to_csv(tmp_path / "s.csv", index=False)
    subprocess.run([sys.executable, str(ROOT / "benchmarks" / "peer_per_row.py"), str(tmp_path / "s.csv"),
                    "--rules", str(ROOT / "benchmarks" / "all-classes.yaml"), "--out", str(tmp_path / "peer.jsonl")],
                   check=True, capture_output=True)
    graded = grade(read_samples(tmp_path / "s.csv"), ruleset)
    ours = "".join(jsonl_lines(graded, form="compact"))
    assert ours.count("\n") == 1500
    assert (tmp_path / "peer.jsonl").read_text(encoding="utf-8") == ours


def test_forecasts_in_compact_records_equal_the_per_row_peers_on_dated_units(tmp_path):
    # Units sampled weekly with oil hours climbing, a few rising acid numbers and viscosities among noisy
    # readings, some oil hours missing: the engine forecasts some of them, and the peer, fitting each unit's
    # charge the long way in plain Python, must write the very same forecasts on the very same records
    # (invented data; the forecast method itself is checked against scipy in tests/derive/test_forecast.py).
    import numpy as np
    import pandas as pd
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    rng = np.random.default_rng(5)
    n, units = 2400, 120
    k = np.arange(n)
    classes = np.array(sorted(ruleset.classes))[(k % units) % len(ruleset.classes)]
    lubricants = {name: next(iter(sorted(ruleset.lubricants))) for name in ruleset.classes}
    frame = pd.DataFrame({
        "sample_id": np.char.add("S", k.astype(str)), "unit_id": np.char.add("U", (k % units).astype(str)),
        "class": classes, "lubricant": [lubricants[c] for c in classes],
        "sampled_on": (pd.Timestamp("2026-01-01") + pd.to_timedelta(k // units * 7, unit="D")).strftime("%Y-%m-%d"),
        "oil_hours": (k // units * 150 + (k % units) * 10).astype(float),
        "kv40": (46.0 * rng.normal(1.0, 0.01, n) * (1 + (k // units) * 0.004 * (k % 4 == 0))).round(2),
        "an": (0.1 + np.abs(rng.normal(0, 0.03, n)) + (k // units) * 0.01 * (k % 3 == 0)).round(2),
        "water": np.abs(rng.normal(150, 40, n)).round(0),
    })
    frame.loc[k % 37 == 0, "oil_hours"] = np.nan
    frame.to_csv(tmp_path / "s.csv", index=False)
    subprocess.run([sys.executable, str(ROOT / "benchmarks" / "peer_per_row.py"), str(tmp_path / "s.csv"),
                    "--rules", str(ROOT / "benchmarks" / "all-classes.yaml"), "--out", str(tmp_path / "peer.jsonl")],
                   check=True, capture_output=True)
    graded = grade(read_samples(tmp_path / "s.csv"), ruleset)
    assert len(graded.forecasts) >= 10 and all(f.on for f in graded.forecasts)
    ours = "".join(jsonl_lines(graded, form="compact"))
    assert (tmp_path / "peer.jsonl").read_text(encoding="utf-8") == ours


def test_compact_records_equal_the_per_row_peers_on_the_benchmarks_own_samples(tmp_path):
    # 20,000 of bench_grade.py's samples (5,000 units, four samples each: trends and 615 forecasts),
    # the data on which the benchmark compares the two: a forecast rule changed in the engine and not
    # in the peer (an `outside` step crossed on the other side) parted them there, not on the data above.
    sys.path.insert(0, str(ROOT / "benchmarks"))
    from bench_grade import RULES, write_csv
    ruleset = load_ruleset(RULES)
    write_csv(ruleset, 20_000, tmp_path / "s.csv", seed=11)
    subprocess.run([sys.executable, str(ROOT / "benchmarks" / "peer_per_row.py"), str(tmp_path / "s.csv"),
                    "--rules", str(RULES), "--out", str(tmp_path / "peer.jsonl")], check=True, capture_output=True)
    graded = grade(read_samples(tmp_path / "s.csv"), ruleset)
    assert len(graded.forecasts) > 100
    ours = "".join(jsonl_lines(graded, form="compact"))
    assert (tmp_path / "peer.jsonl").read_text(encoding="utf-8") == ours


def test_blocks_where_a_column_holds_one_value_write_what_each_record_says():
    # The writer puts a literal that every row of a piece shares into the piece's form once. Blocks of
    # 40 rows over random samples of every class, each block with its own pattern: a reading missing
    # throughout, one value throughout, one value but a censored reading, one method, every oil
    # changed, a unit id with '%' and non-ASCII text, an escaped quote. Each line must be the
    # per-record API's record, byte for byte, in both forms.
    import numpy as np
    from random_samples import random_samples
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    frame = random_samples(ruleset, 240, seed=13)
    frame["oil_changed"] = "no"
    frame.loc[0:39, "kv100"] = np.nan
    frame.loc[40:79, "water"] = 250.0
    frame.loc[80:119, "an"] = 0.4
    frame.loc[95, "an"] = "<0.05"
    frame.loc[120:159, "method"] = "direct"
    frame.loc[160:199, "oil_changed"] = "yes"
    frame.loc[200:239, "unit_id"] = "Pump 7 % \u00e9tage \"B\""
    graded = grade(frame, ruleset)
    assert len(graded) == 240
    for form in ("full", "compact"):
        lines = "".join(jsonl_lines(graded, block=40, form=form)).splitlines()
        assert lines == [dumps(result.to_record(form)) for result in graded.results()]
    records = [json.loads(line) for line in lines]
    assert {r["values"].get("an") for r in records[80:120]} == {0.4, "<0.05"}
    assert all(r["oil_changed"] for r in records[160:200]) and not any(r["oil_changed"] for r in records[:160])
    assert records[200]["unit_id"] == 'Pump 7 % \u00e9tage "B"'


def test_grade_out_file_holds_the_writers_bytes(tmp_path):
    # `grade --out` writes the records as UTF-8 bytes straight to the file; they must be the text
    # the writer gives, with a non-ASCII unit id in it.
    from sumpwise.cli.main import main
    csv = tmp_path / "s.csv"
    csv.write_text("sample_id,unit_id,class,lubricant,an,kv40\nS1,Kompressor \u00d6l,steam-turbine,ISO46,0.9,47\n"
                   "S2,U2,steam-turbine,ISO46,0.1,46\n", encoding="utf-8")
    rules = DATA / "rulesets" / "draft.yaml"
    code = main(["grade", str(csv), "--rules", str(rules), "--record", "compact", "--out", str(tmp_path / "o.jsonl")],
                stdout=io.StringIO(), stderr=io.StringIO())
    assert code in (0, 3)
    graded = grade(read_samples(csv), load_ruleset(rules))
    expected = "".join(jsonl_lines(graded, form="compact"))
    written = (tmp_path / "o.jsonl").read_bytes().decode("utf-8")
    assert written.count("\n") == 2 and "Kompressor \u00d6l" in written
    assert [json.loads(line)["sample_id"] for line in written.splitlines()] == ["S1", "S2"]
    assert written == expected


def test_grade_to_standard_output_writes_the_same_bytes_as_to_a_file(tmp_path):
    # Standard output in UTF-8 takes the records' bytes on its binary stream, after what its text
    # layer holds; in another encoding it takes text. Either way the records are the --out file's.
    csv = tmp_path / "s.csv"
    csv.write_text("sample_id,unit_id,class,lubricant,an,kv40\nS1,Kompressor \u00d6l,steam-turbine,ISO46,0.9,47\n"
                   "S2,U2,steam-turbine,ISO46,0.1,46\n", encoding="utf-8")
    command = [sys.executable, "-m", "sumpwise", "grade", str(csv), "--rules", str(DATA / "rulesets" / "draft.yaml")]
    subprocess.run(command + ["--out", str(tmp_path / "o.jsonl")], capture_output=True, cwd=tmp_path)
    wanted = (tmp_path / "o.jsonl").read_bytes()
    assert wanted.count(b"\n") == 2 and "Kompressor \u00d6l".encode() in wanted
    for encoding in ("utf-8", "latin-1"):
        shown = subprocess.run(command, capture_output=True, cwd=tmp_path,
                               env={"PATH": "/usr/bin:/bin", "PYTHONIOENCODING": encoding}).stdout
        assert shown.decode(encoding) == wanted.decode("utf-8")
