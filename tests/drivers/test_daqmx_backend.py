"""The DAQ-card back-end against the strict nidaqmx stand-in: synchronised tasks, read-back
rate, glitch-free amplitude changes, loopback delay, warnings, halt, named errors, config.

Phases (where checked) use x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

import math
import threading
from pathlib import Path

import numpy as np
import pytest

from app.errors import ConfigError
from app.rig import read_toml, rig_from_dict
from drivers import protocols
from drivers.daqmx import RUNTIME_MISSING, DaqmxCard, loopback_delay_samples
from drivers.errors import BackendTimeout, CeilingExceeded, DriverError
from test_daqmx_standin import DEVICE, StandInCard

DEMO = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"
CHANNELS = {"p1": "Dev1/ai0", "p2": "Dev1/ai1", "p3": "Dev1/ai2", "p4": "Dev1/ai3", "pmt": "Dev1/ai4",
            "drv_ref": "Dev1/ai5", "spk": "Dev1/ao0"}
LOOP_DELAY = 11     # samples between the drive output and its loopback input in the stand-in


def make_rig(sample_rate: str = "25.6 kHz", **table):
    data = read_toml(DEMO)
    data["acquisition"]["sample_rate"] = sample_rate
    data["hardware"] = {"daqmx": {"channels": dict(CHANNELS), "terminal_config": "diff",
                                  "input_ranges": {"pmt": "10 V", "drv_ref": "5 V"}, "output_range": "5 V",
                                  **table}}
    return rig_from_dict(data, str(DEMO))


@pytest.fixture
def card(monkeypatch):
    wiring = {f"Dev1/ai{i}": (0.05, 3, 0.0) for i in range(4)}
    wiring["Dev1/ai4"] = (0.0, 0, 1.2)
    wiring["Dev1/ai5"] = (1.0, LOOP_DELAY, 0.0)
    sc = StandInCard(wiring)
    sc.install(monkeypatch)
    return sc


@pytest.fixture
def daq(card):
    dev = DaqmxCard(make_rig())
    yield dev
    dev.stop()


def read_until_settled(dev, limit=60):
    blocks = []
    for _ in range(limit):
        blocks.append(dev.read_block(timeout_s=10.0))
        if not dev.drive_status().ramping:
            return blocks
    raise AssertionError("drive did not settle")


def test_protocols_and_synchronised_start(card, daq):
    for proto in (protocols.SineDrive, protocols.Acquirer, protocols.Identified, protocols.Stoppable,
                  protocols.EmergencyHalt):
        assert isinstance(daq, proto)
    daq.start()
    blocks = [daq.read_block(timeout_s=10.0) for _ in range(4)]
    daq.stop()
    # the triggered output task starts before the input task (common practice for start-trigger sync)
    assert card.index("flamebode-drive", "start") < card.index("flamebode-input", "start")
    assert card.index("flamebode-input", "timing") < card.index("flamebode-input", "start")
    ao = next(t for t in card.tasks if t.name == "flamebode-drive")
    ai = next(t for t in card.tasks if t.name == "flamebode-input")
    assert ao.trigger == f"/{DEVICE}/ai/StartTrigger"
    assert [ch["physical_channel"] for ch in ai.ai] == [CHANNELS[c] for c in daq.channels]
    assert [ch["name_to_assign_to_channel"] for ch in ai.ai] == list(daq.rig.input_channels)
    assert all(ch["terminal_config"].name == "DIFF" for ch in ai.ai)
    assert ai.ai[4]["max_val"] == 10.0 and ai.ai[5]["max_val"] == 5.0 and ai.ai[0]["max_val"] == 10.0
    assert ai.task.in_stream.input_buf_size >= 2 * 25600       # several seconds of input buffer
    for i, b in enumerate(blocks):
        assert b.data.shape == (6, 2560) and b.data.dtype == np.float64 and b.data.flags.c_contiguous
        assert b.start_index == i * 2560 and b.overflows == 0
        assert b.data[4] == pytest.approx(1.2, abs=0.01)
    card.assert_clean()
    assert card.held_v == {"Dev1/ao0": 0.0}


def test_actual_rate_is_read_back_and_used(card):
    dev = DaqmxCard(make_rig(sample_rate="25 kHz"))   # the stand-in only offers 51.2 kHz / k
    try:
        assert dev.sample_rate_hz == 25600.0
        assert dev.guard.sample_rate_hz == 25600.0
        assert dev.identity()["sample_rate_hz"] == "25600.0"
        dev.start()
        b = dev.read_block(timeout_s=10.0)
        assert b.sample_rate_hz == 25600.0 and b.n_samples == 2560
    finally:
        dev.stop()
    card.assert_clean()


def test_amplitude_change_is_ramped_and_phase_continuous(card, daq):
    daq.start()
    daq.set_drive(200.0, 1.0)
    assert daq.drive_status().amplitude_v == 0.0 and daq.drive_status().ramping   # nothing played yet
    read_until_settled(daq)
    assert daq.drive_status().amplitude_v == 1.0
    n_before = card.out.size
    daq.set_drive(200.0, 0.5)
    read_until_settled(daq)
    for _ in range(3):
        daq.read_block(timeout_s=10.0)
    with pytest.raises(CeilingExceeded):
        daq.set_drive(200.0, 2.5)
    daq.stop()
    out, fs = card.out, daq.sample_rate_hz
    assert np.max(np.abs(out)) <= 1.0 + 1e-12
    # one sine of unchanging phase through the whole written stream: x[n] = Re{A(n) e^{+iωn/fs}} with A(n)
    # real and positive up to a common phase (least squares on cos/sin, Kay 1993, ch. 3)
    n = np.arange(out.size)
    w = 2 * np.pi * 200.0 / fs
    steady = slice(n_before - 4000, n_before)             # at 1.0 V, across several written blocks
    basis = np.column_stack([np.cos(w * n[steady]), -np.sin(w * n[steady])])
    coef, res, *_ = np.linalg.lstsq(basis, out[steady], rcond=None)
    assert abs(complex(*coef)) == pytest.approx(1.0, abs=1e-9) and res[0] < 1e-16
    phase = np.angle(complex(*coef))
    carrier = np.cos(w * n + phase)                        # Re{e^{+i(ωn + φ)}}
    envelope = out / carrier
    ok = np.abs(carrier) > 0.5
    env = envelope[ok & (n >= n_before - 4000)]
    # the envelope falls from 1.0 to 0.5 V no faster than ceiling / ramp_time per sample (the guard's rate)
    step = np.diff(env) / np.diff(n[ok & (n >= n_before - 4000)])
    assert np.min(step) >= -daq.rig.drive.ceiling / daq.rig.drive.ramp_time / fs * (1 + 1e-6)
    assert np.any(np.abs(env - 0.5) < 1e-9) and np.all(env <= 1.0 + 1e-9)
    card.assert_clean()


def test_loopback_delay_is_measured_on_every_block(card, daq):
    daq.start()
    daq.set_drive(300.0, 0.8)
    ramping = read_until_settled(daq)
    assert all(math.isnan(b.loopback_delay_s) for b in ramping)    # no estimate while the envelope moves
    daq.read_block(timeout_s=10.0)                                 # its look-back still holds the ramp's end
    blocks = [daq.read_block(timeout_s=10.0) for _ in range(3)]
    daq.stop()
    for b in blocks:
        assert b.loopback_delay_s * daq.sample_rate_hz == pytest.approx(LOOP_DELAY, abs=0.05)
    assert float(daq.identity()["loopback_delay_s"]) * daq.sample_rate_hz == pytest.approx(LOOP_DELAY, abs=0.05)
    card.assert_clean()


def test_loopback_delay_estimator_on_known_delays():
    """Known delays built outside the estimator: white noise shifted by whole samples, and a
    low-frequency sine shifted by a fraction (x(t) = Re{e^{+iω(t - τ)}})."""
    rng = np.random.default_rng(1)
    drive = rng.standard_normal(4000 + 40)
    ref = drive[40 - 9:40 - 9 + 4000]                     # 9 samples late
    assert loopback_delay_samples(ref, drive, 40) == pytest.approx(9.0, abs=0.01)
    n = np.arange(-40, 4000)
    w = 2 * np.pi * 0.004
    assert loopback_delay_samples(np.cos(w * (n[40:] - 7.3)), np.cos(w * n), 40) == pytest.approx(7.3, abs=0.02)
    assert math.isnan(loopback_delay_samples(np.zeros(4000), drive, 40))                 # silent reference
    assert math.isnan(loopback_delay_samples(rng.standard_normal(4000), drive, 40))      # not the drive


def test_daqmx_warnings_are_named_on_blocks_and_identity(card, daq):
    daq.start()
    daq.read_block(timeout_s=10.0)
    card.warn_on_read = 200015
    found = []
    for _ in range(4):
        found += daq.read_block(timeout_s=10.0).warnings
    daq.stop()
    assert len(found) == 1 and "200015" in found[0] and "mixed" in found[0]
    assert "200015" in daq.identity()["warnings"]


def test_halt_zeroes_the_output_at_once_from_another_thread(card, daq):
    daq.start()
    daq.set_drive(250.0, 1.5)
    read_until_settled(daq)
    t = threading.Thread(target=daq.halt)
    t.start()
    t.join()
    for _ in range(4):
        last = daq.read_block(timeout_s=10.0)
    assert daq.drive_status().amplitude_v == 0.0
    assert np.max(np.abs(last.channel("drv_ref"))) < 0.01          # loopback shows 0 V (stand-in noise 1 mV)
    assert card.held_v == {"Dev1/ao0": 0.0}
    with pytest.raises(DriverError, match="halted"):
        daq.set_drive(250.0, 0.5)
    daq.stop()
    card.assert_clean()


@pytest.mark.parametrize("code, kind, words", [(-200279, DriverError, "read too slowly"),
                                                (-200284, BackendTimeout, "-200284")])
def test_daqmx_errors_become_named_faults(card, daq, code, kind, words):
    daq.start()
    daq.read_block(timeout_s=10.0)
    card.fail_on_read = code
    with pytest.raises(kind, match=words):
        for _ in range(10):
            daq.read_block(timeout_s=10.0)
    with pytest.raises(kind):                  # and it stays failed, it does not hang
        daq.read_block(timeout_s=10.0)
    daq.stop()
    assert all(t.closed for t in card.tasks)


def test_shared_sample_clock_option(card):
    dev = DaqmxCard(make_rig(share_sample_clock=True))
    dev.stop()
    ao = next(t for t in card.tasks if t.name == "flamebode-drive")
    assert ao.timing["source"] == f"/{DEVICE}/ai/SampleClock" and ao.rate_hz == 25600.0
    card.assert_clean()


def test_input_only_mode_has_no_drive(card):
    dev = DaqmxCard(make_rig(input_only=True))
    try:
        dev.start()
        assert dev.read_block(timeout_s=10.0).data.shape == (6, 2560)
        with pytest.raises(DriverError, match="input only"):
            dev.set_drive(100.0, 0.1)
    finally:
        dev.stop()
    assert [t.name for t in card.tasks] == ["flamebode-input"]
    card.assert_clean()


def test_configuration_errors_name_the_key(card):
    bad = dict(CHANNELS)
    del bad["p3"]
    bad["p9"] = "Dev1/ai7"
    with pytest.raises(ConfigError) as err:
        DaqmxCard(make_rig(channels=bad, terminal_config="differential", output_range="1 V", buffer="3 s"))
    text = str(err.value)
    for key in ("hardware.daqmx.channels.p3", "hardware.daqmx.channels.p9", "terminal_config",
                "output_range", "hardware.daqmx.buffer: unknown key"):
        assert key in text
    assert card.tasks == []


def test_a_failing_configuration_closes_every_task(card):
    card.wiring.pop("Dev1/ai3")                # the card has no such channel
    with pytest.raises(DriverError, match="p4.*Dev1/ai3"):
        DaqmxCard(make_rig())
    assert card.tasks and all(t.closed for t in card.tasks)


def test_probe_names_the_missing_runtime():
    probe = DaqmxCard.probe()
    if probe.available:
        pytest.skip("an NI-DAQmx runtime is installed here")
    assert probe.reason == RUNTIME_MISSING
    from drivers.registry import list_backends
    listed = {i.name: i.availability for i in list_backends()}
    assert listed["daqmx"].reason == RUNTIME_MISSING and not listed["daqmx"].available


@pytest.mark.hardware
@pytest.mark.skipif(not DaqmxCard.probe().available, reason="needs an NI-DAQmx runtime and a card: "
                    + DaqmxCard.probe().reason)
def test_real_card_loopback(demo_rig_path):
    """Bench run: wire the drive output to the reference input; channels from the rig file."""
    from app.rig import load_rig
    import os

    rig = load_rig(os.environ.get("FLAMEBODE_DAQ_RIG", str(demo_rig_path)))
    dev = DaqmxCard(rig)
    try:
        dev.start()
        dev.set_drive(200.0, 0.1 * rig.drive.ceiling)
        read_until_settled(dev)
        b = dev.read_block()
        assert b.data.shape[0] == len(rig.input_channels) and math.isfinite(b.loopback_delay_s)
    finally:
        dev.stop()


def test_registered_for_zeroing_at_exit_until_stopped(card):
    from drivers import safety

    dev = DaqmxCard(make_rig())
    assert any(o is dev for o in safety.registered())
    dev.stop()
    assert not any(o is dev for o in safety.registered())


def test_the_dry_run_check_asks_the_card_and_leaves_nothing_open(card):
    # what the dry run asks (drivers.registry.check_settings): the card configures the tasks, says
    # the rate it chose, and every task is closed again, nothing started (the stand-in records breaches)
    from drivers import safety

    text = DaqmxCard.check_settings(make_rig(sample_rate="25 kHz"))
    assert "samples at 25600 Hz (asked 25000 Hz: the card's nearest rate)" in text
    assert not card.violations
    assert all(t.closed for t in card.tasks) and not any(getattr(t, "started", False) for t in card.tasks)
    assert not [o for o in safety._outputs if isinstance(o, DaqmxCard)]     # not left on the safety net
