"""Sound-card back-end without an audio server: the rig table, the delay estimator, probe().

Sources: a microphone's full scale in pascals times its sensitivity in V/Pa is the voltage at
the input (definition of sensitivity, IEC 61094 terms); the normalised cross-correlation is
checked against numpy.correlate computed directly; the delay of a delayed copy of a signal is
the lag of its correlation peak (common practice for latency measurement). No phase is
checked here, so the e^{+iωt} convention does not enter.
"""

from __future__ import annotations

import importlib.abc
import sys
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from app.errors import ConfigError
from app.rig import Rig, rig_from_dict
from drivers.guard import CeilingGuard
from drivers.soundcard import SoundCard, load_config, normalised_xcorr, pick_delay

DEMO = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"
FS = 48000.0


def make_rig(**table: Any) -> Rig:
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    data["acquisition"] = {"sample_rate": "48 kHz", "block_duration": "0.05 s"}
    hw = {"device": "pulse", "output_channel": 1, "output_full_scale": "1 V",
          "inputs": {"drv_ref": 1, "p1": 2, "p2": 2, "p3": 2, "p4": 2, "pmt": 2},
          "full_scale": {"drv_ref": "1 V", "p1": "1 V", "p2": "100 Pa", "p3": "1 V", "p4": "250 mV",
                         "pmt": "2 V"}}
    hw.update(table)
    data["hardware"] = {"soundcard": hw}
    return rig_from_dict(data, "test-rig.toml")


# ---------------------------------------------------------------- the [hardware.soundcard] table
def test_config_reads_channels_and_full_scales_in_volts() -> None:
    rig = make_rig()
    cfg = load_config(rig)
    assert cfg.sample_rate_hz == FS and cfg.block_n == 2400
    assert cfg.inputs["drv_ref"] == 1 and cfg.inputs["p4"] == 2
    assert cfg.n_inputs == 2 and cfg.output_channel == 1
    # volts at a full scale given in pascals = Pa x sensitivity (definition of sensitivity)
    assert cfg.volts_full_scale["p2"] == pytest.approx(100.0 * 14.2e-3, rel=1e-12)
    assert cfg.volts_full_scale["p4"] == pytest.approx(0.25, rel=1e-12)
    assert cfg.volts_full_scale["pmt"] == pytest.approx(2.0, rel=1e-12)


def test_options_override_the_table() -> None:
    cfg = load_config(make_rig(), sample_rate="44.1 kHz", output_lead="0.1 s")
    assert cfg.sample_rate_hz == 44100.0 and cfg.output_lead_s == pytest.approx(0.1)
    assert cfg.block_n == round(0.05 * 44100)


@pytest.mark.parametrize("change, where", [
    ({"inputs": {"drv_ref": 1, "p1": 2, "p2": 2, "p4": 2, "pmt": 2}}, "hardware.soundcard.inputs.p3"),
    ({"output_channel": 0}, "hardware.soundcard.output_channel"),
    ({"colour": "red"}, "hardware.soundcard.colour: unknown key"),
    ({"full_scale": {"drv_ref": "1 V", "p1": "1 V", "p2": "1 V", "p3": "1 V", "p4": "1 V", "pmt": "3 Pa"}},
     "full_scale.pmt: a full scale in Pa needs a pressure sensor"),
    ({"full_scale": {"drv_ref": "1 V", "p1": "1 V", "p2": "1 V", "p3": "1 V", "p4": "1 V"}},
     "hardware.soundcard.full_scale.pmt: missing"),
    ({"latency": "fast"}, "hardware.soundcard.latency"),
    ({"sample_rate": "48 kV"}, "hardware.soundcard.sample_rate"),
])
def test_config_errors_name_the_key(change: dict[str, Any], where: str) -> None:
    with pytest.raises(ConfigError) as info:
        load_config(make_rig(**change))
    assert where in str(info.value)
    assert "test-rig.toml" in str(info.value)


def test_missing_output_channel_is_reported() -> None:
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    data["hardware"] = {"soundcard": {"inputs": {}, "full_scale": {}}}
    with pytest.raises(ConfigError) as info:
        load_config(rig_from_dict(data, "x.toml"))
    text = str(info.value)
    assert "output_channel: required" in text and "inputs.drv_ref" in text


# ---------------------------------------------------------------- delay by cross-correlation
def test_normalised_xcorr_matches_a_direct_computation() -> None:
    # reference: numpy.correlate and explicit norms, lag by lag
    rng = np.random.default_rng(3)
    max_lag, n = 50, 300
    history = rng.standard_normal(n + max_lag)
    x = rng.standard_normal(n)
    rho = normalised_xcorr(x, history, max_lag)
    for lag in (0, 1, 17, 50):
        seg = history[max_lag - lag:max_lag - lag + n]
        direct = np.correlate(x, seg, "valid")[0] / np.sqrt(np.dot(x, x) * np.dot(seg, seg))
        assert rho[lag] == pytest.approx(direct, abs=1e-12)


def test_delay_of_a_delayed_noise_copy() -> None:
    # a broadband signal delayed by D samples correlates best at lag D (common practice)
    rng = np.random.default_rng(5)
    d_true, max_lag, n = 2048, 4000, 2400
    played = rng.standard_normal(20000)
    start = 10000
    x = played[start - d_true:start - d_true + n] + 1e-3 * rng.standard_normal(n)
    history = played[start - max_lag:start + n]
    assert pick_delay(normalised_xcorr(x, history, max_lag), None, np.nan) == d_true


def _guard_drive(freq_hz: float, n: int, onset: int) -> np.ndarray:
    """A drive as the back-end plays it: silence, then the guard's ramp up and steady sine."""
    guard = CeilingGuard(1.0, FS, ramp_time_s=0.1)
    guard.request(freq_hz, 0.5)
    out = np.zeros(n)
    out[onset:] = guard.render(n - onset)
    return np.round(out * 32767.0) / 32767.0      # 16-bit as through the audio server


@pytest.mark.parametrize("freq_hz", [400.0, 317.0])
def test_onset_fixes_the_period_count_then_tracking_keeps_it(freq_hz: float) -> None:
    d_true, max_lag, n = 1872, 12000, 2400
    played = _guard_drive(freq_hz, 60000, onset=20000)
    # block holding the onset: the ramp's envelope makes the global peak unique
    start = 20000 + 1000
    x = played[start - d_true:start - d_true + n]
    rho = normalised_xcorr(x, played[start - max_lag:start + n], max_lag)
    assert pick_delay(rho, None, FS / freq_hz) == d_true
    # a steady block: every period is nearly as good; the previous estimate decides
    start = 50000
    x = played[start - d_true:start - d_true + n]
    rho = normalised_xcorr(x, played[start - max_lag:start + n], max_lag)
    period = FS / freq_hz
    near_other = int(round(d_true + 3 * period))
    assert rho[near_other] > 0.99              # the ambiguity is real
    assert pick_delay(rho, d_true + 3, period) == d_true
    assert pick_delay(rho, near_other, period) != d_true   # tracking never jumps a period


def test_no_correlation_gives_no_delay() -> None:
    rng = np.random.default_rng(9)
    x = rng.standard_normal(1000)
    history = rng.standard_normal(1500)
    assert pick_delay(normalised_xcorr(x, history, 500), None, np.nan) is None


# ---------------------------------------------------------------- probe says why
class _NoPortAudio(importlib.abc.MetaPathFinder):
    def find_spec(self, name: str, path: Any = None, target: Any = None) -> None:
        if name == "sounddevice":
            raise OSError("PortAudio library not found")   # what sounddevice raises without libportaudio2
        return None


def test_probe_names_a_missing_portaudio(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delitem(sys.modules, "sounddevice", raising=False)
    monkeypatch.setattr(sys, "meta_path", [_NoPortAudio(), *sys.meta_path])
    av = SoundCard.probe()
    assert not av.available and "PortAudio library missing" in av.reason and "libportaudio2" in av.reason


def test_probe_names_a_missing_package(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "sounddevice", None)    # import raises ImportError
    av = SoundCard.probe()
    assert not av.available and "sounddevice is not installed" in av.reason


def sounddevice_or_skip():
    """sounddevice, or a skip naming the package: importing it raises OSError (not ImportError)
    when the PortAudio library is missing, which pytest.importorskip does not catch."""
    try:
        import sounddevice
    except (ImportError, OSError) as exc:
        pytest.skip(f"needs the PortAudio library (apt package libportaudio2): {exc}")
    return sounddevice


@pytest.mark.parametrize("server", [None, "unix:/nonexistent/native"])
def test_probe_without_duplex_device_names_the_audio_server(monkeypatch: pytest.MonkeyPatch,
                                                            server: str | None) -> None:
    sd = sounddevice_or_skip()
    output_only = {"index": 0, "name": "hdmi", "max_input_channels": 0, "max_output_channels": 2}
    monkeypatch.setattr(sd, "query_devices", lambda *a, **k: [output_only])
    if server is None:
        monkeypatch.delenv("PULSE_SERVER", raising=False)
    else:
        monkeypatch.setenv("PULSE_SERVER", server)
    av = SoundCard.probe()
    assert not av.available and "no duplex audio device" in av.reason
    assert ("no audio server answers at PULSE_SERVER=" + server if server else "the audio server is not running") \
        in av.reason


def test_probe_never_raises(monkeypatch: pytest.MonkeyPatch) -> None:
    sd = sounddevice_or_skip()

    def broken(*_a: Any, **_k: Any) -> Any:
        raise sd.PortAudioError("Error querying device -1")

    monkeypatch.setattr(sd, "query_devices", broken)
    av = SoundCard.probe()
    assert not av.available and "PortAudio query failed" in av.reason
