"""Sound-card back-end through a real audio server: a PulseAudio null sink played and recorded.

The "rig" is the null sink: output 1 carries the drive, and its monitor gives it back on
input 1 (the drive reference); a test-only subclass plays on output 2 a known filtered,
delayed and scaled copy of the drive, H, which comes back on input 2 as the "flame".
The back-end's blocks are fitted with the core's harmonic estimator and the ratio of the two
inputs must give H back in gain and phase.

Convention: x(t) = Re{x̂ e^{+iωt}}. H of the test filter is scipy.signal.freqz of its
coefficients times e^{-iωm/fs} for a delay of m samples (freqz evaluates Σ h[n] e^{-iωn},
the e^{+iωt} transfer function; a delay gives a falling phase). Sources: scipy.signal
(lfilter/freqz) for the known transfer; the 16-bit sample format of the null sink
(PulseAudio default) bounds the level error to about 1/32768 of full scale.

These tests need the server that .ci/start-audio starts (PULSE_SERVER exported); they skip
with the reason otherwise. Records are short (0.5 s) and the whole module runs in ~15 s.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import signal

from app.core.harmonic import fit_harmonics
from app.rig import Rig, rig_from_dict
from drivers.errors import CeilingExceeded, DriveHalted, DriverError
from drivers.soundcard import SoundCard, SoundCardBlock
from run_watch import short_plan_text

DEMO = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"
FS = 48000.0
LSB = 1.0 / 32768.0


def _audio_server_reason() -> str:
    if not os.environ.get("PULSE_SERVER"):
        return "PULSE_SERVER is not set (no private audio server; .ci/start-audio starts one)"
    if shutil.which("pactl") is None:
        return "pactl not found (pulseaudio-utils missing)"
    try:
        ok = subprocess.run(["pactl", "info"], check=False, capture_output=True, timeout=10).returncode == 0
    except (OSError, subprocess.TimeoutExpired) as exc:
        return f"pactl info failed: {exc}"
    if not ok:
        return f"no audio server answers at PULSE_SERVER={os.environ['PULSE_SERVER']} (pactl info failed)"
    av = SoundCard.probe()
    return "" if av.available else f"sound-card back-end unavailable: {av.reason}"


_REASON = _audio_server_reason()
pytestmark = [pytest.mark.audio, pytest.mark.skipif(bool(_REASON), reason=_REASON or "audio server present")]


def make_rig() -> Rig:
    """The demo rig's channels, every one read from one of the two monitor inputs."""
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    data["acquisition"] = {"sample_rate": "48 kHz", "block_duration": "0.05 s"}
    data["drive"] = {**data["drive"], "ceiling": "0.8 V", "ramp_time": "0.1 s"}
    data["hardware"] = {"soundcard": {
        "device": "pulse", "output_channel": 1, "output_full_scale": "1 V",
        "inputs": {"drv_ref": 1, "p1": 2, "p2": 2, "p3": 2, "p4": 2, "pmt": 2},
        # p2 as a calibrated microphone: a full scale of 50 Pa at 14.2 mV/Pa is 0.71 V
        "full_scale": {"drv_ref": "1 V", "p1": "1 V", "p2": "50 Pa", "p3": "1 V", "p4": "1 V", "pmt": "1 V"}}}
    return rig_from_dict(data, "loopback-rig.toml")


# The known "flame": gain 0.6, a 37-sample delay and a first-order low-pass (Butterworth, 1.5 kHz).
GAIN, DELAY_N = 0.6, 37
B_LP, A_LP = signal.butter(1, 1500.0, fs=FS)


def true_h(freq_hz: float) -> complex:
    _, h = signal.freqz(B_LP, A_LP, worN=[freq_hz], fs=FS)
    return complex(GAIN * h[0] * np.exp(-2j * np.pi * freq_hz * DELAY_N / FS))


class LoopbackCard(SoundCard):
    """Test-only: output 2 plays H applied to the drive; the rendered drive is kept for checks."""

    def __init__(self, rig: Rig, **options: Any) -> None:
        super().__init__(rig, **options)
        self._zi = signal.lfilter_zi(B_LP, A_LP) * 0.0
        self._line = np.zeros(DELAY_N, dtype=np.float64)
        self.rendered: list[np.ndarray] = []
        self.stall_once_s = 0.0

    def extra_outputs(self, drive_digital: np.ndarray, frames: np.ndarray) -> None:
        d = drive_digital.astype(np.float64)
        self.rendered.append(d.copy())
        delayed = np.concatenate([self._line, d])
        self._line = delayed[-DELAY_N:]
        y, self._zi = signal.lfilter(B_LP, A_LP, delayed[:d.size], zi=self._zi)
        frames[:, 1] = GAIN * y
        if self.stall_once_s:
            stall, self.stall_once_s = self.stall_once_s, 0.0
            time.sleep(stall)   # the renderer falls behind: the callback must count it


@pytest.fixture
def card() -> Any:
    dev = LoopbackCard(make_rig())
    dev.start()
    try:
        yield dev
    finally:
        dev.stop()


def settle(dev: SoundCard, timeout_s: float = 5.0) -> list[SoundCardBlock]:
    """Read blocks until the ramp has reached the inputs, then one more."""
    blocks = []
    deadline = time.monotonic() + timeout_s
    while dev.drive_status().ramping:
        assert time.monotonic() < deadline, "the drive never settled"
        blocks.append(dev.read_block(timeout_s=5.0))
    blocks.append(dev.read_block(timeout_s=5.0))
    return blocks


def record(dev: SoundCard, n_blocks: int, attempts: int = 4) -> tuple[np.ndarray, list[SoundCardBlock]]:
    """``n_blocks`` contiguous blocks; taken again (as an operator would) when the back-end counted
    an overflow or glitch in them, which a loaded machine can cause."""
    for _ in range(attempts):
        blocks = [dev.read_block(timeout_s=5.0) for _ in range(n_blocks)]
        for a, b in zip(blocks, blocks[1:]):
            assert b.start_index == a.start_index + a.n_samples   # contiguous, no gap
        if attempts == 1 or not any(b.overflows for b in blocks):
            break
    return np.concatenate([b.data for b in blocks], axis=1), blocks


def test_recovers_a_known_transfer_between_two_channels(card: LoopbackCard) -> None:
    rig = card.rig
    ch = card.channels
    assert card.sample_rate_hz == FS
    for freq_hz in (240.0, 600.0, 1200.0):     # whole periods in a 0.05 s block
        card.set_drive(freq_hz, 0.5)
        settle(card)
        data, blocks = record(card, 10)          # 0.5 s
        fit = fit_harmonics(data, FS, freq_hz)
        ref = fit.amplitude[ch.index(rig.drive.reference_channel)]
        flame = fit.amplitude[ch.index("p1")]
        h_est = flame / ref
        h = true_h(freq_hz)
        # gain within 0.1 %, phase within 0.1 degree (16-bit path: errors ~ 1e-5 measured)
        assert abs(h_est) == pytest.approx(abs(h), rel=1e-3), freq_hz
        assert np.degrees(np.angle(h_est / h)) == pytest.approx(0.0, abs=0.1), freq_hz
        # input calibration: 0.5 digital at 1 V output full scale, read at 1 V input full scale
        assert abs(ref) == pytest.approx(0.5, abs=4 * LSB)
        # p2 reads the same samples as p1 with a 50 Pa x 14.2 mV/Pa = 0.71 V full scale
        assert fit.amplitude[ch.index("p2")] / flame == pytest.approx(0.71, rel=1e-9)
        assert all(b.drive_freq_hz == freq_hz for b in blocks)
        assert all(b.drive_amplitude_v == pytest.approx(0.5, abs=0.01) for b in blocks)
    assert card.guard.clip_events == 0


def test_delay_is_measured_on_every_block_and_aligns_the_reference(card: LoopbackCard) -> None:
    card.set_drive(400.0, 0.5)
    blocks = settle(card)
    _, steady = record(card, 6)
    measured = [b for b in blocks + steady if b.delay_measured]
    assert steady and all(b.delay_measured for b in steady)
    delays = {b.delay_samples for b in measured}
    assert len(delays) == 1, f"delay changed between blocks: {sorted(delays)}"
    d = delays.pop()
    assert 0 < d < card.config.max_delay_s * FS
    assert steady[0].delay_s == pytest.approx(d / FS)
    assert card.delay_samples == d
    # shifting the played drive by the delay reproduces the reference input sample by sample
    played = np.concatenate(card.rendered)
    for b in steady:
        start = card.first_frame + b.start_index - d
        expected = played[start:start + b.n_samples]
        assert np.max(np.abs(b.channel("drv_ref") - expected)) <= 2 * LSB


def test_ceiling_refusal_halt_and_ramped_resume(card: LoopbackCard) -> None:
    # the ceiling is the smaller of the rig's 0.8 V and the 1 V output full scale
    with pytest.raises(CeilingExceeded):
        card.set_drive(500.0, 0.81)
    card.set_drive(500.0, 0.5)
    settle(card)
    card.halt()
    assert card.drive_status().amplitude_v == 0.0
    quiet = [card.read_block(timeout_s=5.0) for _ in range(int(0.3 * FS / card.config.block_n))]
    # silent from (halt + output lead + delay) on: the last blocks are exactly zero
    assert np.max(np.abs(quiet[-1].channel("drv_ref"))) == 0.0
    # the halt latches: nothing can bring the drive back until a new sweep arms the card
    with pytest.raises(DriveHalted):
        card.set_drive(500.0, 0.5)
    assert np.max(np.abs(card.read_block(timeout_s=5.0).channel("drv_ref"))) == 0.0
    card.arm(0.8)
    card.set_drive(500.0, 0.5)
    first_on: SoundCardBlock | None = None
    deadline = time.monotonic() + 5.0
    while first_on is None and time.monotonic() < deadline:
        b = card.read_block(timeout_s=5.0)
        if np.any(b.channel("drv_ref")):
            first_on = b
    assert first_on is not None
    # resumed with the guard's ramp (0.8 V per 0.1 s), not a jump back to 0.5 V
    x = first_on.channel("drv_ref")
    onset = int(np.flatnonzero(x)[0])
    head = np.abs(x[onset:onset + 240])
    assert head.max() <= 0.8 / 0.1 * (240 / FS) + 2 * LSB


def test_starved_output_is_counted_in_the_blocks(card: LoopbackCard) -> None:
    card.set_drive(300.0, 0.2)
    settle(card)
    _, clean = record(card, 4)
    card.stall_once_s = 0.6                        # longer than the 0.2 s output lead
    _, stalled = record(card, 20, attempts=1)
    assert sum(b.overflows for b in stalled) >= 1
    assert all(isinstance(b.overflows, int) and b.overflows >= 0 for b in clean + stalled)


def test_stop_is_idempotent_and_restart_works() -> None:
    dev = LoopbackCard(make_rig())
    dev.start()
    dev.set_drive(440.0, 0.3)
    settle(dev)
    dev.stop()
    dev.stop()
    assert dev.drive_status().amplitude_v == 0.0
    with pytest.raises(DriverError):
        dev.read_block()
    with pytest.raises(DriverError):
        dev.set_drive(440.0, 0.3)
    dev.start()
    try:
        b = dev.read_block(timeout_s=5.0)
        assert b.start_index == 0 and b.data.shape == (len(dev.channels), dev.config.block_n)
        assert dev.identity()["model"] == "pulse"
    finally:
        dev.stop()


# ---------------------------------------------------------------- a short sweep by the engine
LIGHT_DC_V = 0.3      # the "light" input's mean level; the fluctuation is H applied to the drive
NOISE_V = 1e-3        # white noise on the flame output, so no sensor reads flat with the drive off


class FlameCard(LoopbackCard):
    """Output 2 = LIGHT_DC + H·drive + noise: a steady "flame" whose response to the drive is H."""

    def __init__(self, rig: Rig, **options: Any) -> None:
        super().__init__(rig, **options)
        self._rng = np.random.default_rng(11)

    def extra_outputs(self, drive_digital: np.ndarray, frames: np.ndarray) -> None:
        super().extra_outputs(drive_digital, frames)
        frames[:, 1] += LIGHT_DC_V + NOISE_V * self._rng.standard_normal(frames.shape[0])


def _phasors(data: np.ndarray, channels: tuple[str, ...], fs: float, freq_hz: float) -> tuple[Any, complex]:
    fit = fit_harmonics(data[[channels.index("drv_ref"), channels.index("p1")]], fs, freq_hz)
    return fit, complex(fit.amplitude[1] / fit.amplitude[0])


def loop_measure(data: np.ndarray, channels: tuple[str, ...], fs: float, freq_hz: float, rig: Rig) -> Any:
    """Stand-in for the velocity estimate: the flame channel's relative fluctuation |p̂1|/LIGHT_DC."""
    from types import SimpleNamespace

    fit, _ = _phasors(data, channels, fs, freq_hz)
    p1 = abs(fit.amplitude[1])
    return SimpleNamespace(amplitude_ratio=p1 / LIGHT_DC_V, sigma_ratio=float(fit.sigma_abs[1]) / LIGHT_DC_V,
                           pressure_peak_pa=p1 / rig.sensor("p1").sensitivity)


def loop_evaluate(data: np.ndarray, channels: tuple[str, ...], fs: float, freq_hz: float, rig: Rig) -> Any:
    from types import SimpleNamespace

    _, h = _phasors(data, channels, fs, freq_hz)
    return SimpleNamespace(velocity=loop_measure(data, channels, fs, freq_hz, rig), transfer=h, quality={})


def _sweep_once(plan: Any, rig: Rig) -> tuple[str, list[Any], FlameCard]:
    from app.engine.events import EventBus
    from app.engine.sweep import SweepEngine

    events: list[Any] = []
    bus = EventBus()
    bus.subscribe(events.append)
    dev = FlameCard(rig)
    engine = SweepEngine(plan, rig, dev, bus, backend_name="soundcard", measure=loop_measure,
                         evaluate=loop_evaluate)
    try:
        reason = engine.run()
    finally:
        dev.stop()
    return reason, events, dev


@pytest.mark.slow
def test_headless_sweep_by_the_engine_recovers_the_transfer() -> None:
    from app.engine.events import PointSettled, SweepFinished
    from app.plan import plan_from_dict

    plan = plan_from_dict({
        "name": "sound-card loopback",
        "frequencies": {"values": [300.0, 900.0]},
        "amplitude": {"values": [0.1], "basis": "peak"},
        "timing": {"record": 0.5, "settle": 0.1, "tuning_window": 0.2, "tuning_discard": 0.05},
        "tuning": {"tolerance": 0.05, "max_steps": 8},
    }, "<loopback plan>")
    rig = make_rig()
    for _ in range(3):   # a sweep whose points counted overflows/glitches is run again (loaded machine)
        reason, events, dev = _sweep_once(plan, rig)
        settled = [e for e in events if isinstance(e, PointSettled)]
        if not any(p.overflows for p in settled):
            break
    faults = [e for e in events if type(e).__name__ == "FaultRaised"]
    assert reason == "complete", faults
    assert [p.freq_hz for p in settled] == [300.0, 900.0]
    for p in settled:
        h = true_h(p.freq_hz)
        # gain within 1 %, phase within 0.5 degree (noise 1e-3 V against a ~0.03 V line)
        assert abs(p.result.transfer) == pytest.approx(abs(h), rel=1e-2)
        assert np.degrees(np.angle(p.result.transfer / h)) == pytest.approx(0.0, abs=0.5)
        # the engine tuned the drive so the flame moves by 10 % of its mean (plan tolerance 5 %)
        assert p.result.velocity.amplitude_ratio == pytest.approx(0.1, rel=0.05)
        assert p.drive_v == pytest.approx(0.1 * LIGHT_DC_V / abs(h), rel=0.06)
        assert p.identity["model"] == "pulse"
    assert isinstance(events[-1], SweepFinished) and events[-1].reason == "complete"
    assert dev.drive_status().amplitude_v == 0.0 and dev.guard.clip_events == 0


def test_a_gap_the_server_does_not_flag_is_counted_as_a_glitch(card: LoopbackCard) -> None:
    """Suspending the null sink for 0.3 s breaks the loop inside the server; PortAudio sees no
    flag, but the reference stops matching the drive at the known delay."""
    card.set_drive(400.0, 0.5)
    settle(card)
    _, before = record(card, 4)
    assert all(b.delay_measured for b in before)

    def suspend() -> None:
        try:
            subprocess.run(["pactl", "suspend-sink", "rig", "1"], check=False, capture_output=True, timeout=10)
            time.sleep(0.3)
        finally:
            subprocess.run(["pactl", "suspend-sink", "rig", "0"], check=False, capture_output=True, timeout=10)

    import threading

    gap = threading.Thread(target=suspend)
    gap.start()
    try:
        after = [card.read_block(timeout_s=10.0) for _ in range(16)]   # 0.8 s
    finally:
        gap.join(15.0)
    assert sum(b.overflows for b in after) >= 1
    assert any(not b.delay_measured or b.delay_samples != before[0].delay_samples for b in after)


def test_opened_by_name_through_the_registry() -> None:
    from drivers import safety
    from drivers.registry import open_backend

    dev = open_backend("soundcard", make_rig())
    try:
        assert isinstance(dev, SoundCard) and any(o is dev for o in safety.registered())
        dev.start()
        b = dev.read_block(timeout_s=5.0)
        assert b.channels == dev.channels and b.sample_rate_hz == FS
    finally:
        dev.stop()
    assert not any(o is dev for o in safety.registered())


def test_unknown_device_is_named() -> None:
    from drivers.errors import BackendUnavailable

    with pytest.raises(BackendUnavailable, match="device 'no-such-card' from \\[hardware.soundcard\\] not found"):
        SoundCard(make_rig(), device="no-such-card")


def test_the_dry_run_asks_the_device_for_the_rigs_sample_rate():
    # PortAudio's own check of the configured device, without opening a stream (the dry run's
    # "what the back-end would be asked"): 48 kHz through the audio server is taken, 3 MHz is not
    from drivers.errors import BackendUnavailable
    from drivers.registry import check_settings

    rig = make_rig()
    assert "takes 48000 Hz" in check_settings("soundcard", rig)
    too_fast = rig.model_copy(update={"acquisition": rig.acquisition.model_copy(update={"sample_rate": 3e6})})
    with pytest.raises(BackendUnavailable, match="refuses 3e\\+06 Hz"):
        check_settings("soundcard", too_fast)


def test_the_dry_run_refuses_a_rate_the_device_cannot_take(tmp_path):
    text = DEMO.read_text(encoding="utf-8")
    assert 'sample_rate = "25.6 kHz"' in text
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("rate", 200, 300, 100, 0.5))
    rig = tmp_path / "rig.toml"
    rig.write_text(text.replace('sample_rate = "25.6 kHz"', 'sample_rate = "900 kHz"')
                   + '\n[hardware.soundcard]\ndevice = "pulse"\noutput_channel = 1\noutput_full_scale = "1 V"\n'
                   + 'inputs = { drv_ref = 1, p1 = 2, p2 = 2, p3 = 2, p4 = 2, pmt = 2 }\n'
                   + 'full_scale = { drv_ref = "1 V", p1 = "1 V", p2 = "1 V", p3 = "1 V", p4 = "1 V", pmt = "1 V" }\n')
    out = subprocess.run([sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig", str(rig), "--backend",
                          "soundcard", "--dry-run"], capture_output=True, text=True, timeout=60)
    assert out.returncode == 2 and "Traceback" not in out.stderr, out.stdout[-1000:] + out.stderr[-2000:]
    assert "refuses 900000 Hz" in out.stderr, out.stderr
