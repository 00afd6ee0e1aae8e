"""A point whose accepted record cannot be read back shows as "record damaged", not "planned".

Found by a new user: with one record file truncated, the window's point list showed that point
as planned, as if it had never been measured, while review said "record damaged". Common
practice: a stored measurement that cannot be read is named, so that it is re-acquired knowingly.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from app.storage.reader import open_run
from app.ui.models import DAMAGED, PLANNED, PointTable

ROOT = Path(__file__).resolve().parents[2]


def test_a_truncated_record_reads_as_damaged_in_the_point_list(tmp_path, tiny_plan):
    run_dir = tmp_path / "run"
    out = subprocess.run([sys.executable, "-m", "app.cli", "sweep", str(tiny_plan), "--rig",
                          str(ROOT / "configs" / "demo-rig.toml"), "--fast", "--out", str(run_dir)],
                         cwd=ROOT, capture_output=True, text=True, timeout=180)
    assert out.returncode == 0, out.stderr
    records = sorted((run_dir / "records").glob("*.h5"))
    assert len(records) >= 2
    records[0].write_bytes(records[0].read_bytes()[:1000])        # cut short
    table = PointTable()
    table.load_run(open_run(run_dir))
    statuses = [r.status for r in table.rows]
    assert statuses[0] == DAMAGED and PLANNED not in statuses[:1], statuses
    assert all(s != DAMAGED for s in statuses[1:]), statuses
