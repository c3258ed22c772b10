"""A ledger written by an earlier sumpwise is migrated in place and replays clean."""

import shutil
from pathlib import Path

from sumpwise.ledger.audit import replay

OLD_LEDGER = Path(__file__).resolve().parents[1] / "data" / "ledger" / "brackwater-v1.db"


def test_a_ledger_written_before_the_change_replays_clean(tmp_path):
    db = tmp_path / "old.db"
    shutil.copyfile(OLD_LEDGER, db)
    report = replay(db)
    assert report.differences == ()
    assert (report.checked, report.batches, report.rulesets) == (329, 4, 2)
