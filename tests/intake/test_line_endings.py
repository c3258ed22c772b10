"""A file whose lines end in two ways (a lone CR in places, CR LF or LF elsewhere) is refused
with what is wrong; before, the message blamed an unbalanced quoted field it does not have.
One kind of line ending throughout, lone CR included, is read (common practice, no source)."""

import io

import pytest

from sumpwise.intake.samples import read_samples
from sumpwise.vocabulary.problems import InputError


def test_mixed_line_endings_are_named():
    with pytest.raises(InputError, match="lines end in two ways"):
        read_samples(io.BytesIO(b"sample_id,class,kv40\r\nS1,gearbox,320\rS2,gearbox,321\r\nS3,gearbox,322\n"), "<m>")


@pytest.mark.parametrize("ending", [b"\n", b"\r\n", b"\r"])
def test_one_kind_of_line_ending_is_read(ending):
    data = ending.join([b"sample_id,class,kv40", b"S1,gearbox,320", b"S2,gearbox,321"]) + ending
    batch = read_samples(io.BytesIO(data), "<e>")
    assert list(batch.frame["sample_id"]) == ["S1", "S2"] and batch.rows_read == 2
