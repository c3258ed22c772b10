"""`sumpwise grade` run unattended each night, through the real command line (`python -m sumpwise`).

The pipeline reads only the records, the exit code and `--summary`: every row read must end up
graded, unrated or rejected with a reason, the counts must add up, and the exit code and summary
must say what happened, including which file failed and which findings were reached. The samples
are Brackwater Point results (invented) at realistic magnitudes; the limits are the scenario's
(scenarios/brackwater/site.yaml, which names its sources: ISO 4406, ASTM D6304, common practice).
"""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys

from conftest import DATA, ROOT

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"
HERE = DATA / "pipeline_found6"


def sumpwise(*argv, stdin: bytes = b"", cwd=None) -> subprocess.CompletedProcess:
    """The real command, as a nightly script runs it."""
    return subprocess.run([sys.executable, "-m", "sumpwise", *map(str, argv)], input=stdin, capture_output=True,
                          timeout=300, cwd=cwd)


def test_the_table_puts_the_trend_caveats_that_may_hide_a_finding_first():
    """FIRST_CAVEATS are the caveats under which a grade may be too mild: the table lists them
    first so that a line cut at 100 columns still shows them, and the run warns of them. An
    oil-hours slip leaves the rates to and from that sample untaken (as oil-hours-not-from-fill
    leaves its rates); an untold oil change restarts the trend where it may only have been a
    meter reset (as class-changed restarts it). Both were listed after trend-break and
    oil-changed, and cut off the line, and the run said nothing of them."""
    done = sumpwise("grade", HERE / "hpu-week.csv", "--rules", SITE, "--format", "table")
    assert done.returncode == 0, done.stderr.decode()
    lines = {line.split()[0]: line for line in done.stdout.decode().splitlines() if line.startswith("BP-7")}
    assert lines["BP-7104"].endswith("caveat: oil-hours-slip, trend-break")
    assert "caveat: oil-change-untold, few-rule~" in lines["BP-7203"]  # cut at 100 columns, the untold one shown
    err = done.stderr.decode()
    assert "warning: " + str(HERE / "hpu-week.csv") + ": 2 sample(s) with caveat oil-hours-slip" in err
    assert "1 sample(s) with caveat oil-change-untold" in err
    assert "unit-id-spelling" in lines["BP-7102"]  # hpu-7 beside HPU-7: one unit, graded on all it has,
    assert "caveat unit-id-spelling" not in err    # so not a caveat that may hide a finding


def _night_folder(tmp_path):
    """A night's landing folder: every kind of file a lab transfer leaves there."""
    night = tmp_path / "incoming"
    night.mkdir()
    (night / "a-monday.csv").write_bytes((HERE / "monday.csv").read_bytes())
    (night / "b-tuesday.csv").write_bytes((HERE / "tuesday-report.csv").read_bytes())  # a PDF saved as .csv
    (night / "c-empty.csv").write_bytes(b"")  # a transfer that wrote nothing
    (night / "d-header-only.csv").write_text(SAMPLES.read_text().splitlines()[0] + "\n")  # a day with no samples
    (night / "e-wednesday.csv").write_bytes(b"\xef\xbb\xbf" + (HERE / "wednesday.csv").read_bytes())  # a BOM
    openpyxl = __import__("openpyxl")
    book = openpyxl.Workbook()
    for row in csv.reader(io.StringIO((HERE / "hpu-week.csv").read_text())):
        book.active.append([float(c) if c.replace(".", "").isdigit() and "-" not in c else c for c in row])
    book.save(night / "f-friday.xlsx")
    (night / "g-saturday.csv").symlink_to(tmp_path / "share" / "saturday.csv")  # a share not mounted
    return night


def test_a_night_folder_counts_every_row_once_and_names_every_file_that_failed(tmp_path):
    night = _night_folder(tmp_path)
    out, rejects, summary = tmp_path / "results.jsonl", tmp_path / "rejects.csv", tmp_path / "summary.json"
    done = sumpwise("grade", night, "--rules", SITE, "--record", "compact", "--fail-at", "urgent", "--out", out,
                    "--rejects", rejects, "--summary", summary)
    assert done.returncode == 2, done.stderr.decode()
    report = json.loads(summary.read_text())
    name = {f"{night / n}": n for n in ("a-monday.csv", "b-tuesday.csv", "c-empty.csv", "d-header-only.csv",
                                        "e-wednesday.csv", "f-friday.xlsx", "g-saturday.csv")}
    counts = {name[f["file"]]: (f["read"], f["graded"], f["unrated"], f["rejected"], f["error"] is None)
              for f in report["files"]}
    assert counts == {"a-monday.csv": (82, 80, 1, 1, True), "b-tuesday.csv": (0, 0, 0, 0, False),
                      "c-empty.csv": (0, 0, 0, 0, False), "d-header-only.csv": (0, 0, 0, 0, True),
                      "e-wednesday.csv": (31, 31, 0, 0, True), "f-friday.xlsx": (8, 8, 0, 0, True),
                      "g-saturday.csv": (0, 0, 0, 0, False)}  # the broken link was left out without a word
    for key in ("read", "graded", "unrated", "rejected"):
        assert report["total"][key] == sum(f[key] for f in report["files"])
    assert report["total"]["read"] == sum(report["total"][k] for k in ("graded", "unrated", "rejected"))
    records = [json.loads(line) for line in out.read_text().splitlines()]
    for f in report["files"]:  # each file's graded and unrated rows are its records, once
        assert sum(r["origin"]["file"] == f["file"] for r in records) == f["graded"] + f["unrated"]
    with open(rejects, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == report["total"]["rejected"] == 1
    assert (rows[0]["file"], rows[0]["row"], rows[0]["field"], rows[0]["code"]) == (
        str(night / "a-monday.csv"), "42", "sample_id", "D002")
    assert [name[f] for f in report["failed_files"]] == ["b-tuesday.csv", "c-empty.csv", "g-saturday.csv"]
    assert report["findings"]["fail_at"] == ["urgent"]  # Monday's urgent samples, under the exit 2
    assert report["exit"] == 2
    err = done.stderr.decode()
    assert "g-saturday.csv: a link to" in err and "which does not exist" in err
    assert "--fail-at urgent: 5 sample(s) at urgent or higher" in err  # 2 on Monday, 3 on Wednesday


# Monday: 2 urgent, 1 unrated (an unknown class), 1 row rejected; the report saved as .csv fails after it.
# The documented codes (README, Exit codes): 3 a finding, 2 an input failure or --max-rejects exceeded,
# 2 outranking 3, and --summary keeping the findings either way.
EXIT_CASES = [
    ([], False, 0, []),
    (["--fail-at", "urgent"], False, 3, ["urgent"]),
    (["--fail-at", "urgent"], True, 2, ["urgent"]),
    (["--fail-at", "alert", "--fail-at", "unrated"], False, 3, ["alert", "unrated"]),
    (["--fail-on-caveat", "unknown-class"], True, 2, []),
    (["--fail-on-caveat", "unknown-lubricant"], False, 0, []),
    (["--max-rejects", "1", "--fail-at", "urgent"], False, 3, ["urgent"]),
    (["--max-rejects", "0", "--fail-at", "urgent"], False, 2, ["urgent"]),
    (["--max-rejects", "0"], True, 2, []),
]


def test_exit_codes_in_every_combination_and_the_summary_keeps_the_findings(tmp_path):
    for options, later_fails, code, reached in EXIT_CASES:
        files = [HERE / "monday.csv"] + ([HERE / "tuesday-report.csv"] if later_fails else [])
        summary = tmp_path / "summary.json"
        done = sumpwise("grade", *files, "--rules", SITE, "--out", tmp_path / "out.jsonl", "--summary", summary,
                        *options)
        report = json.loads(summary.read_text())
        assert (done.returncode, report["exit"]) == (code, code), (options, later_fails, done.stderr.decode())
        assert report["findings"]["fail_at"] == reached, options
        caveats = report["findings"]["fail_on_caveat"]
        assert caveats == (["unknown-class"] if "unknown-class" in options else []), options
        assert report["failed_files"] == ([str(HERE / "tuesday-report.csv")] if later_fails else [])
        assert report["max_rejects_exceeded"] is ("0" in options)
        if code == 2 and (reached or caveats):
            assert "exit 2 (input) outranks exit 3 (findings)" in done.stderr.decode()


def _file_size_limit(limit: int):
    """A disk that fills up, for one process: writes past `limit` bytes fail with EFBIG (Python
    ignores SIGXFSZ, so the write raises OSError as ENOSPC would)."""
    import resource

    def apply():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return apply


def test_a_full_disk_stops_the_run_with_whole_records_and_a_summary_that_says_so(tmp_path):
    reports = {}
    for jobs in ("1", "2"):
        out, summary = tmp_path / f"results-{jobs}.jsonl", tmp_path / f"summary-{jobs}.json"
        done = subprocess.run([sys.executable, "-m", "sumpwise", "grade", str(SAMPLES), str(HERE / "monday.csv"),
                               "--rules", str(SITE), "--chunk-rows", "100", "--jobs", jobs, "--out", str(out),
                               "--summary", str(summary)],
                              capture_output=True, timeout=300, preexec_fn=_file_size_limit(400_000))
        err = done.stderr.decode()
        assert done.returncode == 2, err
        assert f"cannot write --out {out}: File too large" in err and "Traceback" not in err
        written = out.read_bytes()
        assert 0 < len(written) <= 400_000 and written.endswith(b"\n")  # no record cut short
        records = [json.loads(line) for line in written.splitlines()]  # each line a whole record
        assert [r["origin"]["row"] for r in records] == sorted(r["origin"]["row"] for r in records)
        report = json.loads(summary.read_text())  # the summary is small: written after the output failed
        assert report["exit"] == 2 and report["stopped"].startswith(f"cannot write --out {out}")
        assert report["not_read"] == [str(HERE / "monday.csv")]
        assert report["failed_files"] == [str(SAMPLES)]
        read = report["files"][0]["read"]  # chunks of 100 rows written whole; the one cut short not counted
        assert read % 100 == 0 and read <= records[-1]["origin"]["row"] < read + 100
        reports[jobs] = [dict(f, error=None) for f in report["files"]]
        assert read >= 200  # at least two chunks written whole before the disk filled
    assert reports["2"] == reports["1"]  # two processes count what one does (a handed chunk was counted before)


def test_dev_full_as_the_output_is_exit_2_naming_the_output(tmp_path):
    done = sumpwise("grade", HERE / "monday.csv", "--rules", SITE, "--format", "csv", "--out", "/dev/full",
                    "--summary", tmp_path / "summary.json")
    assert done.returncode == 2
    assert "cannot write --out /dev/full: No space left on device" in done.stderr.decode()
    assert json.loads((tmp_path / "summary.json").read_text())["stopped"] is not None
    done = sumpwise("grade", HERE / "monday.csv", "--rules", SITE, "--out", tmp_path / "out.jsonl",
                    "--rejects", "/dev/full")  # Monday's one rejected row cannot be written
    assert done.returncode == 2 and "cannot write --rejects /dev/full: No space left on device" in done.stderr.decode()


def test_jobs_and_chunk_sizes_give_the_same_output_with_rejects_censored_readings_and_caveats(tmp_path):
    """censored-week.csv: the Brackwater scenario (4 rejected rows, ester caveats, an unknown class)
    with lab-censored cells: water `<50`, `<500` (undecided against the 100 ppm watch limit, so
    grade-may-be-higher) and `>1000`, acid number `<0.05`. JSON Lines of --jobs 1 and 2 are the same
    bytes at each chunk size; across chunk sizes the records differ only in `forecasts` (null in a
    file read in more than one chunk: README, Large files); CSV and the rejects are the same bytes."""
    week = HERE / "censored-week.csv"
    runs = {}
    for chunk in ("40", "1000"):
        for jobs in ("1", "2"):
            for fmt in ("jsonl", "csv"):
                out, rejects = tmp_path / f"{chunk}-{jobs}.{fmt}", tmp_path / f"{chunk}-{jobs}-{fmt}-rejects.jsonl"
                done = sumpwise("grade", week, "--rules", SITE, "--format", fmt, "--chunk-rows", chunk, "--jobs", jobs,
                                "--out", out, "--rejects", rejects)
                assert done.returncode == 0, done.stderr.decode()
                runs[chunk, jobs, fmt] = (out.read_bytes(), rejects.read_bytes())
    for chunk in ("40", "1000"):
        assert runs[chunk, "2", "jsonl"] == runs[chunk, "1", "jsonl"]
    assert len({runs[key] for key in runs if key[2] == "csv"}) == 1
    assert len({runs[key][1] for key in runs}) == 1 and runs["40", "1", "csv"][1].count(b"\n") == 4
    small = [json.loads(line) for line in runs["40", "1", "jsonl"][0].splitlines()]
    whole = [json.loads(line) for line in runs["1000", "1", "jsonl"][0].splitlines()]
    assert {r["forecasts"] is None for r in small} == {True} and any(r["forecasts"] for r in whole)
    assert [dict(r, forecasts=None) for r in whole] == small
    assert sum("grade-may-be-higher" in [c["caveat"] for c in r["caveats"]] for r in whole) == 33
    assert sum(r["values"]["water"] == ">1000" for r in whole) > 10 and len(whole) == 327


def test_csv_output_carries_what_the_records_carry_and_survives_a_round_trip_through_the_csv_module(tmp_path):
    """A sample id with a comma and quotes (a lab's `BP-0013, "retest"`), one with a line break (a
    cell pasted from a two-line label) and one a spreadsheet would run as a formula: Python's csv
    module reads each back as written (the formula with the leading apostrophe of README, Hostile
    input), and each row carries the record's grade, rules fired, caveats, gaps and rule set."""
    rows = list(csv.reader(io.StringIO(SAMPLES.read_text())))
    odd = {1: 'BP-0013, "retest"', 2: "BP-0014\nlabel line 2", 3: "=BP-0015+1"}
    for k, sample_id in odd.items():
        rows[k][0] = sample_id
    week = tmp_path / "week.csv"
    with open(week, "w", newline="", encoding="utf-8") as handle:
        csv.writer(handle).writerows(rows)
    as_csv, as_jsonl = tmp_path / "out.csv", tmp_path / "out.jsonl"
    for fmt, out in (("csv", as_csv), ("jsonl", as_jsonl)):
        assert sumpwise("grade", week, "--rules", SITE, "--format", fmt, "--out", out).returncode == 0
    with open(as_csv, newline="", encoding="utf-8") as handle:
        table = list(csv.DictReader(handle))
    records = [json.loads(line) for line in as_jsonl.read_text().splitlines()]
    assert len(table) == len(records) == 327
    assert [r["sample_id"] for r in table[:3]] == ['BP-0013, "retest"', "BP-0014\nlabel line 2", "'=BP-0015+1"]
    for row, record in zip(table, records):
        assert row["sample_id"] in (record["sample_id"], "'" + record["sample_id"])
        assert (row["file"], row["row"]) == (record["origin"]["file"], str(record["origin"]["row"]))
        assert row["grade"] == record["grade"]
        assert [f.split("=")[0] for f in row["fired"].split(";") if f] == [r["rule"] for r in record["reasons"]]
        assert sorted(filter(None, row["caveats"].split(";"))) == sorted(c["caveat"] for c in record["caveats"])
        assert [g.split("(")[0] for g in row["not_evaluated"].split(";") if g] == [
            g["rule"] for g in record["not_evaluated"]]
        assert (row["ruleset"], row["ruleset_version"], row["ruleset_sha256"]) == (
            record["ruleset"]["id"], str(record["ruleset"]["version"]), record["ruleset"]["sha256"])
        assert row["engine"] == record["engine"]
        assert row["notice"] == record["notice"]  # the cautions, as a full record carries them
    for words in ("not a substitute for a qualified", "take precedence", "resampling before acting on critical"):
        assert words in table[0]["notice"]  # the cautions (engine/vocabulary/cautions.py), in the site's words


def test_a_summary_that_cannot_be_written_is_refused_before_anything_is_graded(tmp_path):
    """--summary into a folder that does not exist (a typo in the nightly script) was found only at
    the end: the results and a ledger's batch were written, then exit 2. Now it is refused as
    --out is, while the command line is read."""
    out, db = tmp_path / "results.jsonl", tmp_path / "site.db"
    for summary in (tmp_path / "reports" / "summary.json", tmp_path):
        done = sumpwise("grade", HERE / "monday.csv", "--rules", SITE, "--out", out, "--db", db, "--summary", summary)
        assert done.returncode == 2 and "--summary" in done.stderr.decode()
        assert not out.exists() and not db.exists()


def test_the_table_says_which_rules_went_unevaluated_and_gives_the_whole_fingerprint(tmp_path):
    """The table carried the grade, the rules fired and the caveats, but not the rules a sample
    could not be evaluated on (the records' `not_evaluated`: a grade given on less than the rule
    set asks), and the rule set's sha256 cut to 16 characters, which cannot be checked against
    `sumpwise check`. Its footer now lists each such rule with how many samples lacked what,
    the same counts as the records, and the whole fingerprint."""
    week = HERE / "censored-week.csv"
    table = sumpwise("grade", week, "--rules", SITE, "--format", "table").stdout.decode()
    records = [json.loads(line) for line in sumpwise("grade", week, "--rules", SITE).stdout.decode().splitlines()]
    expected: dict = {}
    for record in records:
        for gap in record["not_evaluated"]:
            count, names = expected.get(gap["rule"], (0, set()))
            expected[gap["rule"]] = (count + 1, names | set(gap["missing"]))
    footer = table.split("Not evaluated (")[1].split("\n-----")[0].replace("\n  ", " ").splitlines()[1:]
    shown = {}
    for line in footer:
        rule, rest = line[2:].split(": ", 1)
        count, names = rest.split(" sample(s), lacking ")
        shown[rule] = (int(count), set(names.split(", ")))
    assert shown == expected and shown["water"][1] == {"water"}  # `<500` against the 100 ppm watch limit
    assert records[0]["ruleset"]["sha256"] in table
    for caution in ("Screening aid only", "take precedence", "resampling before acting"):
        assert caution in table.replace("\n", " ")


def test_a_refused_rule_set_stops_the_run_and_the_summary_says_so(tmp_path):
    """A rule set whose own examples fail, or that the ledger refuses (changed limits under the same
    version), stops the run, as every file would meet it; --summary was not written then, so the
    pipeline read the previous night's. Now it is, with the refusal under `stopped` and the files
    not read."""
    db, summary = tmp_path / "site.db", tmp_path / "summary.json"
    assert sumpwise("grade", HERE / "monday.csv", "--rules", SITE, "--db", db, "--out", tmp_path / "a.jsonl",
                    "--summary", summary).returncode == 0
    text = SITE.read_text(encoding="utf-8").replace("../../rules/", f"{ROOT / 'rules'}/")
    changed = tmp_path / "site.yaml"  # the same id and version, the water watch limit edited: refused
    changed.write_text(text.replace("{watch: 100, alert: 300, urgent: 1000}", "{watch: 150, alert: 300, urgent: 1000}",
                                    1), encoding="utf-8")
    assert "watch: 150, alert: 300" in changed.read_text(encoding="utf-8")
    night = ("grade", HERE / "wednesday.csv", HERE / "hpu-week.csv", "--rules", changed, "--db", db,
             "--out", tmp_path / "b.jsonl", "--summary", summary)
    done = sumpwise(*night)  # the edit breaks the rule set's own example of a 150 ppm watch: refused first
    assert done.returncode == 2
    report = json.loads(summary.read_text())
    assert report["exit"] == 2 and "its own examples do not hold" in report["stopped"]
    assert report["not_read"] == [str(HERE / "wednesday.csv"), str(HERE / "hpu-week.csv")]
    done = sumpwise(*night, "--allow-failing-examples")
    assert done.returncode == 2
    report = json.loads(summary.read_text())
    assert report["exit"] == 2 and "already recorded with other content" in report["stopped"]
    assert report["not_read"] == [str(HERE / "hpu-week.csv")]


def test_a_folder_s_companion_files_are_skipped_with_a_note_not_failed(tmp_path):
    """A shared landing folder holds, beside the lab's files, `._monday.csv` (a resource-fork
    companion some file-sharing clients write) and `~$friday.xlsx` (an office program's owner file
    while the workbook is open): each was read as samples and failed, so the night ended in exit 2
    every time. They are now left out with a note and listed in --summary's `skipped`; a file
    named on the command line is still read whatever its name."""
    night = tmp_path / "incoming"
    night.mkdir()
    (night / "monday.csv").write_bytes((HERE / "monday.csv").read_bytes())
    (night / "._monday.csv").write_bytes(b"\x00\x05\x16\x07\x00\x02\x00\x00" + b"\x00" * 74)  # the format's magic
    (night / "~$friday.xlsx").write_bytes(b"\x0bsite-lead".ljust(54, b" ") + b"\x00" * 108)
    summary = tmp_path / "summary.json"
    done = sumpwise("grade", night, "--rules", SITE, "--out", tmp_path / "out.jsonl", "--summary", summary)
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads(summary.read_text())
    assert [f["file"] for f in report["files"]] == [str(night / "monday.csv")]
    assert [s["file"] for s in report["skipped"]] == [str(night / "._monday.csv"), str(night / "~$friday.xlsx")]
    assert done.stderr.decode().count("note: skipped, not a samples file") == 2
    named = sumpwise("grade", night / "._monday.csv", "--rules", SITE, "--out", tmp_path / "named.jsonl")
    assert named.returncode == 2  # named on purpose: read, and refused as the samples file it is not


def test_outputs_onto_an_input_or_into_a_missing_folder_are_refused_before_anything_is_written(tmp_path):
    night = tmp_path / "incoming"
    night.mkdir()
    monday = night / "monday.csv"
    monday.write_bytes((HERE / "monday.csv").read_bytes())
    before = monday.read_bytes()
    for options in (["--out", monday], ["--rejects", tmp_path / "incoming" / "." / "monday.csv"],
                    ["--summary", monday], ["--out", tmp_path / "results" / "night.jsonl"]):
        done = sumpwise("grade", night, "--rules", SITE, *options)
        assert done.returncode == 2 and "Traceback" not in done.stderr.decode(), options
        assert monday.read_bytes() == before and not (tmp_path / "results").exists()
    first = sumpwise("grade", night, "--rules", SITE, "--out", night / "results.jsonl")
    assert first.returncode == 0
    again = sumpwise("grade", night, "--rules", SITE, "--out", night / "results.jsonl")  # the next night, unchanged
    assert again.returncode == 2 and "is the same file as the samples file" in again.stderr.decode()


def test_a_lab_folder_that_is_empty_tonight_fails_alone_and_the_other_labs_are_graded(tmp_path):
    """`grade lab-east/ lab-west/`: one lab sent nothing tonight. The empty folder stopped the whole
    run before anything was read (exit 2, no summary), so the other lab's urgent samples never came
    out. Now the folder is the run's failed input, and the rest is graded."""
    east, west = tmp_path / "lab-east", tmp_path / "lab-west"
    east.mkdir()
    west.mkdir()
    (west / "monday.csv").write_bytes((HERE / "monday.csv").read_bytes())
    summary = tmp_path / "summary.json"
    done = sumpwise("grade", east, west, "--rules", SITE, "--fail-at", "urgent", "--out", tmp_path / "out.jsonl",
                    "--summary", summary)
    assert done.returncode == 2
    report = json.loads(summary.read_text())
    assert report["failed_files"] == [str(east)] and report["total"]["graded"] == 80
    assert report["findings"]["fail_at"] == ["urgent"]
    assert "holds no samples file" in report["files"][0]["error"]


def test_an_internal_fault_part_way_leaves_a_summary_that_says_the_run_did_not_finish(tmp_path, monkeypatch):
    """A bug while grading the second file ends the run with exit 1 (README, Exit codes); the summary
    was not written, so the previous night's stayed. In process: a fault cannot be put into a child."""
    import importlib

    from conftest import run_cli
    pipeline = importlib.import_module("sumpwise.results.pipeline")
    evaluate = pipeline.evaluate

    def fails_on_wednesday(ruleset, measured):
        if "BP-0231" in set(measured["sample_id"]):  # Wednesday's first sample
            raise RuntimeError("a grading fault")
        return evaluate(ruleset, measured)
    monkeypatch.setattr(pipeline, "evaluate", fails_on_wednesday)
    summary = tmp_path / "summary.json"
    summary.write_text('{"exit": 0}')  # last night's
    run = run_cli("grade", HERE / "monday.csv", HERE / "wednesday.csv", "--rules", SITE, "--out",
                  tmp_path / "out.jsonl", "--summary", summary)
    assert run.code == 1 and "internal error" in run.err
    report = json.loads(summary.read_text())
    assert report["exit"] == 1 and report["stopped"].startswith("internal error")
    assert [f["file"] for f in report["files"]] == [str(HERE / "monday.csv")]
    assert report["not_read"] == [str(HERE / "wednesday.csv")]


def test_a_run_refused_before_grading_still_replaces_last_night_s_summary(tmp_path):
    """A rule set that is not valid YAML, a column map that cannot be read, or an option the rule
    set does not know (`--fail-at` a grade it lacks) stopped the run before --summary was written,
    so the nightly job read the previous night's summary (exit 0, counts, findings) as tonight's.
    Now the summary says the run stopped, why, and that no file was read; it is never written
    over a file the run names (here the samples file itself, which stays as it was)."""
    broken = tmp_path / "site.yaml"
    broken.write_text(SITE.read_text(encoding="utf-8").replace("classes:", "classes: [", 1), encoding="utf-8")
    bad_map = tmp_path / "columns.yaml"
    bad_map.write_text("columns:\n  Water ppm: {measure: wter}\n", encoding="utf-8")
    summary = tmp_path / "summary.json"
    for extra, said in (((), "Y001"), (("--columns", bad_map), str(bad_map)), (("--fail-at", "severe"), "severe")):
        rules = broken if not extra else SITE
        assert sumpwise("grade", HERE / "monday.csv", "--rules", SITE, "--out", tmp_path / "a.jsonl",
                        "--summary", summary).returncode == 0  # last night's run: a whole summary
        assert json.loads(summary.read_text())["exit"] == 0
        done = sumpwise("grade", HERE / "monday.csv", "--rules", rules, *extra, "--out", tmp_path / "b.jsonl",
                        "--summary", summary)
        assert done.returncode == 2, done.stderr.decode()
        report = json.loads(summary.read_text())
        assert report["exit"] == 2 and said in report["stopped"], (extra, report["stopped"])
        assert report["not_read"] == [str(HERE / "monday.csv")] and report["total"]["read"] == 0
    copy = tmp_path / "monday.csv"
    copy.write_bytes((HERE / "monday.csv").read_bytes())
    done = sumpwise("grade", copy, "--rules", broken, "--summary", copy)
    assert done.returncode == 2 and copy.read_bytes() == (HERE / "monday.csv").read_bytes()
