"""Problem records: every code is registered, documented in the README, and checked on use."""

from __future__ import annotations

import re

import pytest
from conftest import ROOT

from sumpwise.vocabulary.problems import PROBLEM_CODES, Problem


def test_a_problem_without_a_registered_code_cannot_be_made():
    with pytest.raises(ValueError, match="not in PROBLEM_CODES"):
        Problem("rules.yaml", 3, 5, "something", code="Q999")


def test_every_code_is_listed_in_the_readme_and_the_readme_lists_no_other():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("### Problem codes"):readme.index("## The result record")]
    listed = re.findall(r"^\| `([A-Z]\d{3})` \| (.+) \|$", section, flags=re.M)
    assert dict(listed) == PROBLEM_CODES


def test_every_code_used_in_the_package_is_registered():
    used = set()
    for path in (ROOT / "engine").rglob("*.py"):
        used |= set(re.findall(r'"([YSRCWMDFE]\d{3})"', path.read_text(encoding="utf-8")))
    assert used - set(PROBLEM_CODES) == set()
