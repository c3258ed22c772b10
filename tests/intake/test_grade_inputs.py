"""The grade command's inputs and run summary: several files and folders, --fail-at unrated,
--max-rejects, --summary; graded + unrated + rejected = rows read, per file and in total."""

import json

from conftest import ROOT, run_cli

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
HEADER = "sample_id,unit_id,class,lubricant,kv40,an,water,oxidation\n"


def _files(tmp_path):
    folder = tmp_path / "week"
    folder.mkdir()
    (folder / "a.csv").write_text(HEADER + "T1,ST-1,steam-turbine,TURB-46M,49.0,0.5,50,20\n"
                                  "T2,ST-1,steam-turbine,TURB-46-M,46.0,<0.05,>5000,3\n\n"
                                  "T3,ST-1,steam-turbin,TURB-46-M,46.0,0.1,50,3\n", encoding="utf-8")
    (folder / "b.jsonl").write_text('{"sample_id": "J1", "class": "gearbox", "lubricant": "GEAR-320-PAO", "an": 0.9}\n'
                                    '{"sample_id": "J2", "class": "gearbox", "tags": ["a"]}\n', encoding="utf-8")
    (folder / "notes.md").write_text("not a samples file\n", encoding="utf-8")
    return folder


def test_a_folder_is_graded_file_by_file_and_the_counts_add_up(tmp_path):
    folder = _files(tmp_path)
    summary = tmp_path / "summary.json"
    run = run_cli("grade", folder, "--rules", SITE, "--summary", summary)
    assert run.code == 0
    report = json.loads(summary.read_text(encoding="utf-8"))
    assert [f["file"].rsplit("/", 1)[-1] for f in report["files"]] == ["a.csv", "b.jsonl"]
    for counts in report["files"] + [report["total"]]:
        assert counts["read"] == counts["graded"] + counts["unrated"] + counts["rejected"]
    assert report["total"] == {"read": 5, "graded": 3, "unrated": 1, "rejected": 1}
    assert report["files"][0]["caveats"]["unknown-lubricant"] == 1
    assert any("unknown-lubricant" in w for w in report["warnings"])
    assert len(run.out.splitlines()) == 4  # one record per graded or unrated sample


def test_fail_at_unrated_and_max_rejects_decide_the_exit_code(tmp_path):
    folder = _files(tmp_path)
    assert run_cli("grade", folder, "--rules", SITE, "--fail-at", "unrated").code == 3
    assert run_cli("grade", folder / "b.jsonl", "--rules", SITE, "--fail-at", "unrated").code == 0
    assert run_cli("grade", folder, "--rules", SITE, "--fail-at", "urgent").code == 3  # water >5000
    too_many = run_cli("grade", folder, "--rules", SITE, "--max-rejects", "0")
    assert too_many.code == 2 and "more than --max-rejects 0" in too_many.err
    assert run_cli("grade", folder, "--rules", SITE, "--max-rejects", "1").code == 0
    assert run_cli("grade", folder, "--rules", SITE, "--fail-at", "bad").code == 2


def test_the_unknown_lubricant_is_visible_in_the_table(tmp_path):
    folder = _files(tmp_path)
    run = run_cli("grade", folder / "a.csv", "--rules", SITE, "--format", "table")
    line = next(x for x in run.out.splitlines() if x.startswith("T1"))
    assert "unknown-lubricant" in line


def test_csv_output_of_several_files_has_one_header(tmp_path):
    folder = _files(tmp_path)
    run = run_cli("grade", folder, "--rules", SITE, "--format", "csv")
    assert run.out.count("sample_id") == 1
