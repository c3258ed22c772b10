"""Column maps: engine names checked with file:line and a did-you-mean; constants, value maps,
flags, detection limits, FTIR method and file options."""

import io

import pytest

from sumpwise.intake.column_map import load_column_map
from sumpwise.intake.samples import read_samples
from sumpwise.vocabulary.problems import InvalidFile


def _map(tmp_path, text):
    path = tmp_path / "columns.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_a_misspelt_engine_name_is_an_error_at_its_line_with_the_nearest_name(tmp_path):
    path = _map(tmp_path, 'sample_id: "Sample No"\nwatr: "H2O ppm"\n')
    with pytest.raises(InvalidFile) as caught:
        load_column_map(path)
    (problem,) = caught.value.problems
    assert (problem.code, problem.line, problem.column) == ("M004", 2, 1)
    assert "water" in problem.hint


@pytest.mark.parametrize("text, code", [
    ("file: {delimiter: '#'}\n", "M005"),
    ("file: {encodng: cp1252}\n", "M005"),
    ("file: {encoding: no-such-codec}\n", "M005"),
    ("file: {date_format: dmy}\n", "M005"),
    ("file: {delimiter: ',', decimal: ','}\n", "M005"),
    ("water: {column: W, detection_limit: -1}\n", "M006"),
    ("oxidation: {column: Ox, method: sideways}\n", "M006"),
    ("class: {column: C, value: gearbox}\n", "M002"),
    ("kv40: {column: V, true: [Y]}\n", "M006"),
])
def test_entries_that_cannot_be_used_are_refused_with_a_code(tmp_path, text, code):
    with pytest.raises(InvalidFile) as caught:
        load_column_map(_map(tmp_path, text))
    assert [p.code for p in caught.value.problems] == [code]


def test_a_constant_class_and_a_declared_method_fill_every_row(tmp_path):
    columns = load_column_map(_map(tmp_path, "sample_id: Id\nclass: {value: gearbox}\n"
                                             "oxidation: {column: Ox, method: subtraction}\n"))
    batch = read_samples(io.StringIO("Id,Ox\nA,12\nB,3\n"), columns=columns)
    assert batch.frame["class"].tolist() == ["gearbox", "gearbox"]
    assert batch.frame["method"].tolist() == ["subtraction", "subtraction"]


def test_values_are_translated_and_flags_read_as_labs_write_them(tmp_path):
    columns = load_column_map(_map(tmp_path, "sample_id: Id\nclass: {column: Component, map: {Pump Bearing Housing: "
                                             "hydraulic}}\noil_changed: {column: Chg, true: [J], false: [-]}\n"))
    text = "Id,Component,Chg\nA,Pump Bearing Housing,Y\nB,Main Gearbox,J\nC,Pump Bearing Housing,-\nD,x,no\n"
    batch = read_samples(io.StringIO(text), columns=columns)
    assert batch.frame["class"].tolist() == ["hydraulic", "Main Gearbox", "hydraulic", "x"]
    assert batch.frame["oil_changed"].tolist() == ["true", "true", "false", "false"]


def test_unused_lab_columns_are_named_once(tmp_path):
    columns = load_column_map(_map(tmp_path, "sample_id: Id\nclass: Type\n"))
    batch = read_samples(io.StringIO("Id,Type,Fe ppm,Remarks2\nA,gearbox,12,x\n"), columns=columns)
    assert batch.notes == ("lab columns not used: Fe ppm, Remarks2",)


def test_two_ftir_methods_for_one_sample_are_refused(tmp_path):
    from sumpwise.vocabulary.problems import InputError
    columns = load_column_map(_map(tmp_path, "sample_id: Id\nclass: {value: gearbox}\n"
                                             "oxidation: {column: Ox, method: subtraction}\n"
                                             "nitration: {column: Nit, method: direct}\n"))
    with pytest.raises(InputError, match="declares FTIR methods direct and subtraction"):
        read_samples(io.StringIO("Id,Ox,Nit\nA,12,3\n"), columns=columns)


def test_a_declared_measure_takes_a_detection_limit_and_a_declared_field_does_not(tmp_path):
    # Issue 12: "a map can give a detection limit". Iron is a measure once a rule set declares it
    # (the Brackwater site declares iron, ppm); a lab writes ND below its ICP detection limit.
    path = _map(tmp_path, 'iron: {column: Fe, detection_limit: 1}\n')
    found = load_column_map(path, ("iron", "site_area"), measures=("iron",))
    assert found.detection_limits == {"iron": 1.0}
    batch = read_samples(io.StringIO("sample_id,class,Fe\nF1,gearbox,ND\n"), columns=found, numeric=("iron",))
    assert batch.frame["iron:censored"].tolist() == ["<1"]
    with pytest.raises(InvalidFile) as caught:
        load_column_map(_map(tmp_path, 'site_area: {column: Area, detection_limit: 1}\n'), ("iron", "site_area"),
                        measures=("iron",))
    assert [p.code for p in caught.value.problems] == ["M006"]


def test_grade_reads_a_detection_limit_for_a_declared_measure():
    from conftest import ROOT, run_cli
    import tempfile, pathlib
    with tempfile.TemporaryDirectory() as folder:
        folder = pathlib.Path(folder)
        (folder / "map.yaml").write_text("sample_id: Nr\nclass: {value: gearbox}\nlubricant: {value: GEAR-320-PAO}\n"
                                         "iron: {column: Fe, detection_limit: 1}\n", encoding="utf-8")
        (folder / "fe.csv").write_text("Nr,Fe\nF1,ND\nF2,150\n", encoding="utf-8")
        run = run_cli("grade", folder / "fe.csv", "--columns", folder / "map.yaml", "--rules",
                      ROOT / "scenarios" / "brackwater" / "site.yaml", "--format", "csv")
    assert run.code == 0, run.err
    import csv, io
    rows = {row["sample_id"]: row for row in csv.DictReader(io.StringIO(run.out))}
    # the site's gear-drive iron ladder: watch above 100 ppm; ND (below 1 ppm) is known under it
    assert "iron=watch" in rows["F2"]["fired"].split(";") and rows["F1"]["fired"] == ""
    assert not any(gap.startswith("iron(") for gap in rows["F1"]["not_evaluated"].split(";"))


@pytest.mark.parametrize("command", ["compare", "propose-limits"])
def test_compare_and_propose_limits_read_a_map_that_names_a_declared_measure(tmp_path, command):
    from conftest import ROOT, run_cli
    site = ROOT / "scenarios" / "brackwater" / "site.yaml"
    (tmp_path / "map.yaml").write_text("sample_id: Nr\nclass: {value: gearbox}\nlubricant: {value: GEAR-320-PAO}\n"
                                       "iron: {column: Fe, detection_limit: 1}\n", encoding="utf-8")
    (tmp_path / "fe.csv").write_text("Nr,Fe\nF1,ND\nF2,150\n", encoding="utf-8")
    args = ([site, site] if command == "compare" else ["--class", "gearbox", "--measure", "iron", "--rules", site])
    run = run_cli(command, *args, "--samples", tmp_path / "fe.csv", "--columns", tmp_path / "map.yaml")
    assert "M004" not in run.err
    # compare: nothing moves (exit 0); propose-limits: two results are too few, refused (exit 2) with the count
    assert (run.code, command) in ((0, "compare"), (2, "propose-limits")), run.err
