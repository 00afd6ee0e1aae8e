"""Runs compared in one figure read their phase on one branch.

Found by a new user: a plan starting at 800 Hz read -100.6° there, the demo plan from 100 Hz
-462.8° at the same frequency (each run unwraps from its own first point), and the comparison
drew the same flame 362° apart without a word. A phase is defined modulo 360° (common practice:
unwrapping picks a branch, it does not measure it), so the second run is moved by whole turns onto
the first's branch, and the legend says so.
"""

from __future__ import annotations

import pytest

from app.storage.report import same_phase_branch


def _rows(freqs, phases):
    return [{"freq_hz": f, "phase_deg": p, "gain": 1.0} for f, p in zip(freqs, phases)]


def test_a_run_one_turn_off_is_moved_onto_the_first_runs_branch():
    first = _rows([100, 400, 800, 850, 900], [-51.7, -228.2, -462.2, -490.2, -520.1])
    later = _rows([800, 850, 900], [-100.6, -129.9, -160.4])
    moved, turns = same_phase_branch(first, later)
    assert turns == -1
    assert [r["phase_deg"] for r in moved] == pytest.approx([-460.6, -489.9, -520.4])
    assert later[0]["phase_deg"] == -100.6            # the run's own rows are not changed


def test_no_overlap_no_move_and_the_same_branch_stays():
    first = _rows([100, 200], [-50.0, -100.0])
    assert same_phase_branch(first, _rows([800, 900], [-100.0, -130.0]))[1] == 0     # nothing to compare with
    assert same_phase_branch(first, _rows([150, 200], [-76.0, -99.0]))[1] == 0       # already on it
    # no common frequency, but inside the first run's range: interpolated
    assert same_phase_branch(first, _rows([150], [-76.0 + 360.0]))[1] == -1
