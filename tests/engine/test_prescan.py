"""The transfer pre-scan on the simulated burner: against the truth, against the tuned result,
the soft start of the whole multi-sine, the ceiling from the drive log, and when it is skipped.

Amplitudes are peak |u'|/u_mean at the reference plane; the true answers come from
drivers.simulated.truth (tests only).
"""

from __future__ import annotations

import math
import threading
from pathlib import Path

import numpy as np
import pytest

from app.engine.events import EventBus, PointSettled, StateChanged, TransferMeasured, TuningStep
from app.engine.sweep import SweepEngine
from app.rig import read_toml
from drivers import drive_log
from drivers.simulated import truth
from drivers.simulated.burner import SimulatedBurner
from drivers.simulated.scenario import scenario_from_dict
from engine_helpers import Recorder, short_plan

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
FREQS = [150.0, 300.0, 450.0, 600.0, 750.0, 900.0, 1200.0, 1500.0]
ON = {"enabled": True}


def _ideal_sensors_scenario():
    """The demo scenario with sensors exactly as the rig file says (no calibration error), so the
    multi-microphone chain has no systematic error and the truth is a fair check of the random one."""
    data = read_toml(CONFIGS / "demo-scenario.toml")
    data["rig"] = str(CONFIGS / "demo-rig.toml")
    data["sensors"] = {"sensitivity_spread": 0.0, "phase_spread": "0 deg"}
    data["light"] = {**data["light"], "dark_offset": "18 mV"}
    return scenario_from_dict(data, "<ideal sensors>")


def _run(rig, plan, sim, **kw):
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated", **kw)
    return engine, rec, engine.run()


def test_prescan_transfer_matches_the_truth_within_its_own_uncertainty(rig):
    sim = SimulatedBurner(rig, scenario=_ideal_sensors_scenario(), seed=3)
    plan = short_plan(FREQS, [0.05], record_s=0.2, prescan=ON)
    engine, rec, reason = _run(rig, plan, sim)
    assert reason == "complete"
    (tm,) = rec.of(TransferMeasured)
    assert not tm.skipped and tm.freqs_hz == tuple(FREQS) and tm.levels >= 2
    for f, g, rel in zip(tm.freqs_hz, tm.ratio_per_volt, tm.rel_sigma):
        true_g = truth.true_amplitude_ratio(sim, f, 1e-3) / 1e-3        # small-signal gain
        assert math.isfinite(g) and rel < 0.1, (f, g, rel)
        # 4 standard uncertainties (8 lines: a 3-sigma excursion is not rare) plus 1 % for the
        # bias of |.| of a noisy phasor and the drift of the rig during the sweep
        assert abs(g / true_g - 1.0) <= 4.0 * rel + 0.01, (f, g, true_g, rel)
    assert all(math.isfinite(p) for p in tm.phase_rad)       # the rig records a drive reference
    assert engine.controller.seeded


def test_prescan_agrees_with_the_tuned_result_and_seeds_the_first_window(rig):
    sim = SimulatedBurner(rig, seed=5)                          # demo scenario, sensors as they really are
    plan = short_plan(FREQS, [0.05], record_s=0.2, prescan=ON)
    engine, rec, reason = _run(rig, plan, sim)
    assert reason == "complete"
    (tm,) = rec.of(TransferMeasured)
    table = dict(zip(tm.freqs_hz, zip(tm.ratio_per_volt, tm.rel_sigma)))
    for ev in rec.of(PointSettled):
        g, rel = table[ev.freq_hz]
        tuned = ev.result.velocity.amplitude_ratio / ev.drive_v
        tuned_rel = ev.result.velocity.sigma_ratio / ev.result.velocity.amplitude_ratio
        # the loudspeaker compresses at the tuned drive (the truth says by how much)
        compression = truth.true_amplitude_ratio(sim, ev.freq_hz, ev.drive_v) / ev.drive_v / (
            truth.true_amplitude_ratio(sim, ev.freq_hz, 1e-3) / 1e-3)
        allowed = 4.0 * math.hypot(rel, tuned_rel) + 0.01
        assert abs(tuned / (g * compression) - 1.0) <= allowed, (ev.freq_hz, tuned, g, compression, allowed)
    first = [ev for ev in rec.of(TuningStep) if ev.step == 1]
    hits = sum(ev.within_tolerance for ev in first)
    assert hits >= 0.7 * len(first), [(ev.point_index, ev.measured_ratio) for ev in first]
    assert np.median(engine.stats.tuning_steps) <= 1


def test_the_whole_multisine_keeps_the_soft_start_and_the_ceiling(rig, tmp_path):
    log_path = tmp_path / "drive.csv"
    sim = SimulatedBurner(rig, seed=5)
    plan = short_plan(FREQS, [0.05], record_s=0.2, prescan=ON, tuning={"ceiling": 1.0})
    totals: list[float] = []

    drive_log.open_log(log_path)
    try:
        bus = EventBus()
        rec = Recorder()
        bus.subscribe(rec)
        engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
        original = engine._set_multisine

        def watched(grid, amps, phases):
            peak = original(grid, amps, phases)
            # the TRUE sum of the lines' |u'|/u_mean at this level (a bound on the total forcing)
            totals.append(sum(truth.true_amplitude_ratio(sim, f, a) for f, a in zip(grid.freqs_hz, amps)))
            return peak

        engine._set_multisine = watched
        assert engine.run() == "complete"
        drive_log.flush()
    finally:
        drive_log.open_log(None)
    assert totals and max(totals) <= 1.5 * 0.05 * 1.05, totals     # 5 %: the estimate's own error
    log = drive_log.read_log(log_path)
    assert np.all(log["peak_v"] <= 1.0 + 1e-12) and np.all(log["peak_v"] <= log["ceiling_v"] + 1e-12)
    assert sim.guard.clip_events == 0
    assert sim.drive_status().amplitude_v == 0.0                    # drive back at zero at the end
    states = [ev.new for ev in rec.of(StateChanged)]
    assert states[:3] == ["preparing", "pre-scan", "preparing"]


class _SineOnly:
    """The simulator seen through the sine protocols only (no MultiSineDrive)."""

    def __init__(self, sim):
        self._sim = sim
        self.channels, self.sample_rate_hz = sim.channels, sim.sample_rate_hz

    def set_drive(self, f, a):
        self._sim.set_drive(f, a)

    def drive_status(self):
        return self._sim.drive_status()

    def start(self):
        self._sim.start()

    def read_block(self, timeout_s=2.0):
        return self._sim.read_block(timeout_s)


@pytest.mark.parametrize("case", ["plan-off", "no-capability", "fresh-table", "stale-table"])
def test_prescan_is_skipped_with_a_stated_reason(rig, case):
    sim = SimulatedBurner(rig, seed=5)
    plan = short_plan(FREQS[:2], [0.05], record_s=0.1, prescan={} if case == "plan-off" else ON)
    kw = {}
    drive = _SineOnly(sim) if case == "no-capability" else sim
    if case in ("fresh-table", "stale-table"):
        kw = {"prior": ((150.0, 0.2), (300.0, 0.3)), "prior_age_s": 60.0 if case == "fresh-table" else 1e5}
    engine, rec, reason = _run(rig, plan, drive, **kw)
    assert reason == "complete"
    (tm,) = rec.of(TransferMeasured)
    expected = {"plan-off": "enabled = false", "no-capability": "MultiSineDrive", "fresh-table": "fresh",
                "stale-table": ""}[case]
    if expected:
        assert expected in tm.skipped and not tm.freqs_hz
    else:
        assert tm.skipped == "" and tm.freqs_hz


def test_a_long_pause_repeats_the_prescan(rig):
    sim = SimulatedBurner(rig, seed=5)
    plan = short_plan(FREQS[:3], [0.05], record_s=0.1, prescan={"enabled": True, "repeat_after": 1.0})
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")

    def pause_once(ev):
        if isinstance(ev, PointSettled) and ev.point_index == 0:
            engine.pause()
            threading.Timer(1.3, engine.resume).start()
    rec.hooks.append(pause_once)
    engine.start()
    assert engine.join(60.0)
    assert engine.finish_reason == "complete"
    assert len([t for t in rec.of(TransferMeasured) if not t.skipped]) == 2


def test_the_run_and_the_progress_display_get_duration_level_and_transfer():
    import io
    import json

    from app.engine.progress import ProgressDisplay
    from app.storage.writer import transfer_info

    ev = TransferMeasured((100.0, 150.0), (0.5, math.nan), (0.02, math.inf), (-1.0, math.nan), 2.2, 0.15, 0.07, 3)
    stored = json.loads(transfer_info(ev))
    assert stored["duration_s"] == 2.2 and stored["peak_drive_v"] == 0.15 and stored["levels"] == 3
    assert stored["ratio_per_volt"] == [0.5, None] and stored["freqs_hz"] == [100.0, 150.0]
    out = io.StringIO()
    display = ProgressDisplay(file=out).start()
    display(ev)
    display(TransferMeasured((), (), (), (), 0.0, 0.0, 0.0, 0, skipped="the back-end cannot put out a multi-sine"))
    display.close()
    text = out.getvalue()
    assert "pre-scan: 2 lines 100-150 Hz, 3 levels, 2.2 s, peak drive 0.15 V" in text
    assert "gain per volt (log)" in text and "pre-scan skipped: the back-end cannot" in text


@pytest.mark.parametrize("command", ["halt", "abort"])
def test_halt_or_abort_during_the_prescan_brings_the_multisine_to_zero(rig, tmp_path, command):
    log_path = tmp_path / "drive.csv"
    sim = SimulatedBurner(rig, seed=5)
    plan = short_plan(FREQS, [0.05], record_s=0.2, prescan=ON)
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
    seen = []

    def stop_in_prescan(ev):
        if engine.state == "pre-scan" and sim.guard.multisine is not None and not seen:
            seen.append(True)
            getattr(engine, command)()
    rec.hooks.append(stop_in_prescan)
    drive_log.open_log(log_path)
    try:
        reason = engine.run()
        drive_log.flush()
    finally:
        drive_log.open_log(None)
    assert seen and reason == {"halt": "halted", "abort": "aborted"}[command]
    status = sim.drive_status()
    assert status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0
    log = drive_log.read_log(log_path)
    assert log["end_v"][-1] == 0.0 and np.all(log["peak_v"] <= log["ceiling_v"] + 1e-12)
    assert not rec.of(PointSettled)
