"""The cautions every human-facing output carries (the project's safety rule): screening
aid, the manufacturer's, supplier's, local codes' and site procedures' precedence, and
resampling before acting on critical equipment."""

from sumpwise.vocabulary.cautions import CAUTIONS, caution_text


def test_the_cautions_say_all_three_things():
    text = " ".join(CAUTIONS)
    assert "not a substitute for a qualified" in text
    for authority in ("manufacturer", "supplier", "local codes", "site procedures"):
        assert authority in text, authority
    assert "resampling before acting on critical equipment" in text


def test_caution_text_prefixes_every_line():
    lines = caution_text("# ").splitlines()
    assert len(lines) == len(CAUTIONS) and all(line.startswith("# ") for line in lines)
