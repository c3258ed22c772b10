"""The hostile rule-set corpus (tests/data/hostile/README.md): the real command line ends each
in exit 2 with the file, the line and a stable code, never a traceback or a hang."""

from __future__ import annotations

import re
import subprocess
import sys

import pytest

from conftest import DATA, run_cli

HOSTILE = DATA / "hostile"

# file -> (codes accepted, line of the problem; None when it belongs to the whole file)
EXPECTED = {
    "alias-bomb.yaml": ({"Y009"}, None),  # the line where the count passes the limit
    "recursive-alias.yaml": ({"Y010"}, 4),
    "deep-nesting.yaml": ({"Y009"}, 3),
    "deep-mapping.yaml": ({"Y009"}, 3),
    "long-line.yaml": ({"Y009"}, 3),
    "nul-byte.yaml": ({"Y008"}, 3),
    "escape-in-text.yaml": ({"Y008"}, 3),
    "lone-surrogate.yaml": ({"Y001", "Y008"}, 3),
    "bad-utf8.yaml": ({"Y011"}, 3),
    "huge-int.yaml": ({"Y007"}, 6),
    "limit-nan.yaml": ({"Y007"}, 10),
    "limit-inf.yaml": ({"Y007"}, 10),
    "limit-overflow.yaml": ({"Y007"}, 10),
    "new-oil-inf.yaml": ({"Y007"}, 9),
    "extends-nul.yaml": ({"Y008"}, 2),
    "extends-too-long.yaml": ({"R003"}, 2),
}

# A gearbox sample with 5,000 ppm of water: under a `.nan` watch limit it once graded normal.
WET_GEARBOX = ("sample_id,unit_id,class,lubricant,sampled_on,kv40,an,water\n"
               "GB1-0501,GB-1,gearbox,GEAR-320-PAO,2026-05-04,321.0,0.80,5000\n")


def test_the_corpus_and_the_table_agree():
    assert sorted(p.name for p in HOSTILE.glob("*.yaml")) == sorted(EXPECTED)


def _problem_lines(err: str, path) -> list[tuple[str, int, str]]:
    found = re.findall(rf"^{re.escape(str(path))}(?::(\d+):\d+)?: error (\w\d{{3}}):", err, flags=re.M)
    return [(str(path), int(line) if line else 0, code) for line, code in found]


@pytest.mark.parametrize("name", sorted(EXPECTED))
@pytest.mark.parametrize("command", ["check", "grade"])
def test_each_hostile_rule_set_is_exit_2_naming_file_line_and_code(name, command):
    path = HOSTILE / name
    argv = ["check", path] if command == "check" else ["grade", "-", "--rules", path]
    run = run_cli(*argv, stdin=WET_GEARBOX)
    codes, line = EXPECTED[name]
    assert run.code == 2, run.err
    assert "Traceback" not in run.err
    assert run.out == "" if command == "grade" else "nothing was fingerprinted" in run.out
    problems = _problem_lines(run.err, path)
    assert len(problems) == 1, run.err
    (_, found_line, code), = problems
    assert code in codes
    if line is not None:
        assert found_line == line
    else:
        assert found_line > 0


def test_the_alias_bomb_ends_in_a_separate_process_too():
    """A hang guard, not a speed test: without the limit this runs until the machine runs out of memory."""
    done = subprocess.run([sys.executable, "-m", "sumpwise", "check", str(HOSTILE / "alias-bomb.yaml")],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 2 and "Y009" in done.stderr
