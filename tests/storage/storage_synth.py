"""Synthetic engine events for the storage tests: small honest records and their results.

Each record holds sines at the drive frequency on every channel plus seeded white noise;
the result's gain and phase are computed from that record by projecting each channel on
e^{-iωt} (time convention x(t) = Re{x̂ e^{+iωt}}), the textbook discrete Fourier
coefficient at a known frequency (Kay 1993, Fundamentals of Statistical Signal
Processing, vol. 1, ch. 3), so stored numbers can be re-derived from stored samples.
"""

from __future__ import annotations

import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from app.engine.events import EventBus, PointSettled, SweepFinished, SweepStarted
from app.storage.writer import RunWriter

CHANNELS = ("p1", "p2", "p3", "p4", "pmt", "drv_ref")
ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"


@dataclass(frozen=True)
class Velocity:
    amplitude_ratio: float
    velocity_ref: complex
    sigma_ratio: float
    mean_velocity_ref_m_s: float


@dataclass(frozen=True)
class Result:
    freq_hz: float
    velocity: Velocity
    light_ratio: complex
    ftf: complex
    gain: float
    phase_rad: float
    gain_ci95: float
    phase_ci95_rad: float
    quality: dict = field(default_factory=dict)
    warnings: tuple = ()


@dataclass(frozen=True)
class PlanPoint:
    index: int
    freq_hz: float
    target_ratio: float


@dataclass(frozen=True)
class Plan:
    points: tuple


def phasor(x: np.ndarray, freq_hz: float, fs: float) -> np.ndarray:
    """Complex amplitude of each row at freq_hz: (2/N) Σ x[n] e^{-iωnΔt}."""
    n = x.shape[-1]
    e = np.exp(-2j * np.pi * freq_hz * np.arange(n) / fs)
    return 2.0 * (x @ e) / n


def make_record(freq_hz: float, ratio: float, fs: float = 5120.0, seconds: float = 0.5,
                seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(int(fs * seconds)) / fs
    amps = np.array([0.10, 0.12, 0.09, 0.11, 2.0 * ratio * 0.8, 0.5])
    phases = np.array([0.0, -0.3, -0.7, -1.1, -2.0, 0.0])
    x = amps[:, None] * np.cos(2 * np.pi * freq_hz * t + phases[:, None])
    x[4] += 1.0                                     # mean light level
    return x + 0.002 * rng.standard_normal(x.shape)


def make_result(record: np.ndarray, freq_hz: float, ratio: float, fs: float) -> Result:
    ph = phasor(record - record.mean(axis=1, keepdims=True), freq_hz, fs)
    u_ratio = ratio * ph[3] / abs(ph[3])             # velocity phasor stand-in: ratio along p4's phase
    light = ph[4] / record[4].mean()
    ftf = light / u_ratio
    return Result(freq_hz=freq_hz, velocity=Velocity(abs(u_ratio), complex(u_ratio), 0.001, 2.5),
                  light_ratio=complex(light), ftf=complex(ftf), gain=abs(ftf), phase_rad=float(np.angle(ftf)),
                  gain_ci95=0.01, phase_ci95_rad=0.02, quality={"coherence": 0.99}, warnings=())


def settled(point_index: int, freq_hz: float, ratio: float = 0.05, fs: float = 5120.0,
            seconds: float = 0.5, flags: tuple = (), seed: int | None = None,
            attempt_id: str | None = None) -> PointSettled:
    rec = make_record(freq_hz, ratio, fs, seconds, seed=point_index if seed is None else seed)
    return PointSettled(attempt_id=attempt_id or uuid.uuid4().hex[:12], point_index=point_index,
                        freq_hz=freq_hz, target_ratio=ratio, drive_v=0.4 + 0.01 * point_index, record=rec,
                        channels=CHANNELS, sample_rate_hz=fs, result=make_result(rec, freq_hz, ratio, fs),
                        tuning=((0.2, 0.03, 0.5), (0.4 + 0.01 * point_index, ratio, 0.5)), flags=flags,
                        overflows=0, identity={"backend": "synthetic"}, started_wall_s=time.time())


def plan_of(freqs: list[float], ratios: list[float] | None = None) -> Plan:
    ratios = ratios or [0.05]
    pts = [(f, a) for a in ratios for f in freqs]
    return Plan(points=tuple(PlanPoint(i, f, a) for i, (f, a) in enumerate(pts)))


def write_run(run_dir: Path, plan_path: Path, plan: Plan, events: list[PointSettled] | None = None,
              timeout_s: float = 20.0) -> tuple[RunWriter, EventBus, list[tuple[bool, str | None]]]:
    """Drive a RunWriter through a whole synthetic sweep; returns the acks in order."""
    bus = EventBus()
    writer = RunWriter(run_dir, RIG, plan_path, bus).start()
    bus.subscribe(writer)
    bus.publish(SweepStarted(run_label="synthetic", n_points=len(plan.points), backend="synthetic",
                             identity={"backend": "synthetic"}, plan=plan, rig=None))
    if events is None:
        events = [settled(p.index, p.freq_hz, p.target_ratio) for p in plan.points]
    acks = []
    for ev in events:
        bus.publish(ev)
        acks.append(bus.wait_ack(ev.attempt_id, timeout_s))
    bus.publish(SweepFinished(reason="complete", n_settled=len(events), n_points=len(plan.points)))
    writer.close()
    return writer, bus, acks
