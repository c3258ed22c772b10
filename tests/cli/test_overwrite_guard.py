"""A file a command writes is never one it reads, nor another it writes.

Opening a file for writing empties it before anything is read: `grade x.csv --out x.csv` lost
the samples ("the file is empty"), `grade --db l.db --out l.db` replaced a whole ledger with
JSON Lines, and `--out` naming the rule set replaced the rule set, each with no word of it.
Each case below now stops with exit 2 before any file is opened, and the file is unchanged.
"""

import os
import shutil

from conftest import DATA, ROOT, run_cli

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"
SPECTRUM = DATA / "spectra" / "hand_dup10.jdx"


def _copies(tmp_path):
    """The samples and the site's rule set with the shipped files it extends, laid out as in the
    repository: a guard that failed would empty these copies, never the project's files."""
    shutil.copytree(ROOT / "rules", tmp_path / "rules")
    (tmp_path / "scenarios" / "brackwater").mkdir(parents=True)
    samples, rules = tmp_path / "samples.csv", tmp_path / "scenarios" / "brackwater" / "site.yaml"
    shutil.copy(SAMPLES, samples)
    shutil.copy(SITE, rules)
    return samples, rules


def _refused(run, option: str, what: str) -> None:
    assert run.code == 2, run.err
    assert f"{option} " in run.err and f"is the same file as {what}" in run.err, run.err


def test_grade_out_naming_the_samples_leaves_them_whole(tmp_path):
    samples, _ = _copies(tmp_path)
    before = samples.read_bytes()
    _refused(run_cli("grade", samples, "--rules", SITE, "--out", samples), "--out", "the samples file")
    assert samples.read_bytes() == before
    # Another name of the same file (a relative path, a hard link) is the same file.
    os.link(samples, tmp_path / "linked.csv")
    _refused(run_cli("grade", samples, "--rules", SITE, "--out", tmp_path / "linked.csv"), "--out",
             "the samples file")
    assert samples.read_bytes() == before


def test_grade_out_inside_a_samples_folder_that_holds_it(tmp_path):
    """`grade incoming/ --out incoming/results.jsonl` run twice: the second run lists the first's
    results among its inputs; they must not be emptied and then read as an empty samples file."""
    folder = tmp_path / "incoming"
    folder.mkdir()
    shutil.copy(SAMPLES, folder / "samples.csv")
    first = run_cli("grade", folder, "--rules", SITE, "--out", folder / "results.jsonl")
    assert first.code == 0, first.err
    written = (folder / "results.jsonl").read_bytes()
    _refused(run_cli("grade", folder, "--rules", SITE, "--out", folder / "results.jsonl"), "--out",
             "the samples file")
    assert (folder / "results.jsonl").read_bytes() == written


def test_grade_out_naming_the_ledger_leaves_it_whole(tmp_path):
    db = tmp_path / "site.db"
    assert run_cli("grade", SAMPLES, "--rules", SITE, "--db", db, "--out", tmp_path / "r.jsonl").code == 0
    before = db.read_bytes()
    _refused(run_cli("grade", SAMPLES, "--rules", SITE, "--db", db, "--out", db), "--out", "the ledger --db")
    assert db.read_bytes() == before
    assert run_cli("replay", "--db", db).code == 0


def test_grade_out_naming_the_rule_set_or_column_map(tmp_path):
    _, rules = _copies(tmp_path)
    before = rules.read_bytes()
    _refused(run_cli("grade", SAMPLES, "--rules", rules, "--out", rules), "--out", "the rule set")
    _refused(run_cli("grade", SAMPLES, "--rules", rules, "--rejects", rules), "--rejects", "the rule set")
    _refused(run_cli("grade", SAMPLES, "--rules", rules, "--summary", rules), "--summary", "the rule set")
    assert rules.read_bytes() == before
    extended = tmp_path / "rules" / "hydraulic.yaml"  # a file the site's rule set extends
    shipped = extended.read_bytes()
    _refused(run_cli("grade", SAMPLES, "--rules", rules, "--out", extended), "--out", "the rule set")
    assert extended.read_bytes() == shipped
    column_map = tmp_path / "columns.yaml"
    shutil.copy(ROOT / "scenarios" / "brackwater" / "columns.yaml", column_map)
    _refused(run_cli("grade", SAMPLES, "--rules", rules, "--columns", column_map, "--rejects", column_map),
             "--rejects", "--columns")


def test_grade_two_outputs_on_one_file(tmp_path):
    out = tmp_path / "out.jsonl"
    _refused(run_cli("grade", SAMPLES, "--rules", SITE, "--out", out, "--rejects", out), "--rejects", "--out")
    _refused(run_cli("grade", SAMPLES, "--rules", SITE, "--out", out, "--summary", out), "--summary", "--out")
    assert not out.exists()


def test_devices_are_not_files_that_writing_empties(tmp_path):
    """Every output to /dev/null is a way to keep only the exit code: allowed."""
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--out", os.devnull, "--rejects", os.devnull,
                  "--summary", os.devnull)
    assert run.code == 0, run.err
    assert "read 331 row(s): 326 graded, 1 unrated, 4 rejected" in run.err


def test_report_rulesets_and_propose_limits_keep_their_inputs(tmp_path):
    db = tmp_path / "site.db"
    assert run_cli("grade", SAMPLES, "--rules", SITE, "--db", db, "--out", os.devnull).code == 0
    before = db.read_bytes()
    _refused(run_cli("report", "--db", db, "--out", db), "--out", "the ledger --db")
    listed = run_cli("rulesets", "--db", db)
    fingerprint = listed.out.splitlines()[1].split()[0]
    _refused(run_cli("rulesets", fingerprint, "--db", db, "--out", db), "--out", "the ledger --db")
    assert db.read_bytes() == before
    samples, _ = _copies(tmp_path)
    kept = samples.read_bytes()
    _refused(run_cli("propose-limits", "--samples", samples, "--class", "steam-turbine", "--measure", "an",
                     "--out", samples), "--out", "the samples file")
    assert samples.read_bytes() == kept


def test_spectra_out_naming_an_input_spectrum(tmp_path):
    spectrum = tmp_path / "used.jdx"
    shutil.copy(SPECTRUM, spectrum)
    before = spectrum.read_bytes()
    _refused(run_cli("spectra", spectrum, "--out", spectrum), "--out", "the spectrum")
    assert spectrum.read_bytes() == before
