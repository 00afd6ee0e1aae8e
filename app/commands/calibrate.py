"""``flamebode calibrate RIG``: relative calibration of the pressure sensors (common-plane method;
``--method sensor-swap`` in the duct is app.commands.sensor_swap).

With every pressure sensor mounted in a calibration holder (one axial plane, the same
pressure), a stepped sine over ``--band`` every ``--step`` Hz, each frequency tuned so that
the reference sensor reads ``--pressure``; per frequency the core gives each sensor's factor
C_i = G_ref,ref / G_ref,i with coherence and uncertainty (app.core.calibration). Frequencies
at or above the duct's first transverse cut-on are refused with a warning naming them.
``--check-reference`` repeats the estimate against a second reference sensor from the same
records and refuses to write a file whose two results disagree. The result is written
atomically to ``--out`` (docs/calibration-file.md); nothing is written when the run is
stopped, and an older file of that name stays as it was.

On the simulated burner the holder is simulated (all sensors at one plane, no flame, the
scenario's true sensor errors); ``--fast`` and ``--seed`` as for ``flamebode sweep`` (use the
same seed as the sweeps the calibration is for: the seed draws the simulated sensors' errors).
SIGINT, SIGTERM and SIGHUP zero the output at once and exit 128 + the signal's number.

Imports: the core's calibration, descriptions, the driver registry and safety (through
.running), lazily. Never Qt.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import math
import signal
import sys
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import FlamebodeError

MAX_PRESSURE_PA = 200.0      # 137 dB re 20 µPa: a holder target above this is refused
MAX_FREQUENCIES = 1000


class CalibrateCommandError(FlamebodeError):
    """The calibrate command cannot run as asked; the message names the option."""


class CalibrationStopped(FlamebodeError):
    """A signal stopped the run: output zeroed, nothing written."""

    def __init__(self, signum: int, out: Path):
        self.exit_code = 128 + signum
        super().__init__(f"{signal.Signals(signum).name} received: outputs zeroed at once; nothing written "
                         f"({out} {'left as it was' if out.exists() else 'not created'})")


def _seed(text: str) -> int:
    from ..cli import seed_type

    return seed_type(text)


def coherence_text(worst: float) -> str:
    """The lowest coherence as a person reads it: four decimals, or, when it rounds to 1, how
    far below 1 it is (1 - coherence is what sets the factors' uncertainty)."""
    if 1.0 - worst >= 5e-5:
        return f"coherence >= {worst:.4f}"
    return f"coherence >= 1 - {max(1.0 - worst, 1e-12):.1e}"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("rig", help="rig file (TOML), see docs/rig-file.md")
    p.add_argument("--method", choices=("common-plane", "sensor-swap"), default="common-plane",
                   help="common-plane: every sensor in a holder at one plane (default); sensor-swap: in the duct, "
                        "each sensor exchanged with the reference in turn (the tool waits for each swap)")
    p.add_argument("--band", default="100-2000", help="LOW-HIGH in Hz (default 100-2000)")
    p.add_argument("--step", type=float, default=50.0, help="frequency step in Hz (default 50)")
    p.add_argument("--reference", help="reference sensor (default: the rig's first pressure sensor)")
    p.add_argument("--check-reference", metavar="SENSOR",
                   help="also estimate against this second reference and check the two agree")
    p.add_argument("--pressure", default="20 Pa", help="peak pressure at the holder, with its unit (default 20 Pa)")
    p.add_argument("--record", default="1 s", help="record length per frequency, with its unit (default 1 s)")
    p.add_argument("--segments", type=int, default=16, help="segments per record for the cross-spectra (default 16)")
    p.add_argument("--out", required=True, metavar="CAL_FILE", help="calibration file to write (TOML)")
    p.add_argument("--commissioning-record", metavar="FILE", help="commissioning record to note the calibration in (default: beside "
                                                    "the rig file, RIG.commissioning.toml)")
    p.add_argument("--backend", default="simulated", help="back-end name (default: simulated)")
    p.add_argument("--scenario", help="simulated burner scenario (default: the demo's for the demo rig)")
    p.add_argument("--fast", action="store_true", help="simulator only: run as fast as the CPU allows")
    p.add_argument("--seed", type=_seed, default=None, help="simulator only: random seed (0 or more)")


# ----------------------------------------------------------------------------- options
def parse_band(text: str, step_hz: float) -> list[float]:
    lo_s, sep, hi_s = str(text).partition("-")
    try:
        lo, hi = float(lo_s), float(hi_s)
    except ValueError:
        raise CalibrateCommandError(f"--band {text!r}: expected LOW-HIGH in Hz, e.g. 100-2000") from None
    if not sep or not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo <= hi):
        raise CalibrateCommandError(f"--band {text!r}: expected LOW-HIGH in Hz with 0 < LOW <= HIGH")
    if not (math.isfinite(step_hz) and step_hz > 0):
        raise CalibrateCommandError(f"--step {step_hz!r}: must be a number of Hz > 0")
    n = int(math.floor((hi - lo) / step_hz + 1e-9)) + 1
    if n > MAX_FREQUENCIES:
        raise CalibrateCommandError(f"--band {text} with --step {step_hz:g} gives {n} frequencies; at most "
                                    f"{MAX_FREQUENCIES}")
    return [round(lo + k * step_hz, 9) for k in range(n)]


def _quantity(option: str, text: str, kind: str, lo: float, hi: float, unit: str) -> float:
    from ..units import parse_quantity

    try:
        float(text)
    except ValueError:
        pass
    else:   # a bare number: Pa or dB? seconds or periods? Never guessed for a drive target
        raise CalibrateCommandError(f"{option} {text!r}: give the unit, e.g. \"{text} {unit}\"")
    try:
        value = parse_quantity(text, kind, unit_required=True)
    except (ValueError, TypeError) as exc:
        raise CalibrateCommandError(f"{option} {text!r}: {exc}") from None
    if not lo < value <= hi:
        raise CalibrateCommandError(f"{option} {text!r}: must be more than {lo:g} {unit} and at most {hi:g} {unit}")
    return value


def _reference(rig: Any, name: str | None, option: str) -> str:
    names = [s.channel for s in rig.pressure_sensors]
    if name is None:
        return names[0]
    if name not in names:
        raise CalibrateCommandError(f"{option} {name!r}: not a pressure sensor of {rig.source_path} "
                                    f"({', '.join(names)})")
    return name


# ----------------------------------------------------------------------------- run
def run(args: argparse.Namespace) -> int:
    from ..core import calibration as core
    from ..rig import load_rig

    rig = load_rig(args.rig)
    reference = _reference(rig, args.reference, "--reference")
    second = _reference(rig, args.check_reference, "--check-reference") if args.check_reference else None
    if second == reference:
        raise CalibrateCommandError(f"--check-reference {second}: must differ from the reference sensor")
    target_pa = _quantity("--pressure", args.pressure, "pressure", 0.0, MAX_PRESSURE_PA, "Pa")
    record_s = _quantity("--record", args.record, "time", 0.0, 600.0, "s")
    if not 4 <= args.segments <= 256:
        raise CalibrateCommandError(f"--segments {args.segments}: must be from 4 to 256")
    freqs = parse_band(args.band, args.step)
    nyquist = rig.acquisition.sample_rate / 2.0
    if freqs[-1] >= 0.45 * rig.acquisition.sample_rate:
        raise CalibrateCommandError(f"--band {args.band}: {freqs[-1]:g} Hz is too close to half the rig's "
                                    f"{rig.acquisition.sample_rate:g} Hz sample rate ({nyquist:g} Hz)")
    cut_on = core.duct_cut_on_hz(rig)
    freqs, refused = core.split_at_cut_on(freqs, cut_on)
    if refused:
        print(f"warning: refused {', '.join(f'{f:g}' for f in refused)} Hz: at or above the duct's first transverse "
              f"cut-on {cut_on:.0f} Hz (radius {rig.duct.radius_m * 1e3:g} mm), where the sensors at one plane no "
              f"longer see one pressure", file=sys.stderr)
    if not freqs:
        raise CalibrateCommandError(f"--band {args.band}: every frequency is at or above the cut-on {cut_on:.0f} Hz")
    from ..outputs import output_target

    out = output_target(args.out, "calibration file", _is_calibration)   # never over a rig file or a run's files
    if args.method == "sensor-swap":
        if second:
            raise CalibrateCommandError("--check-reference: the sensor-swap method has no second reference; use it "
                                        "with --method common-plane")
        from .sensor_swap import run_swap

        return run_swap(args, rig, reference, freqs, cut_on, target_pa, record_s, out)
    return _calibrate(args, rig, reference, second, freqs, cut_on, target_pa, record_s, out)


def _is_calibration(p: Path) -> bool:
    """An existing calibration file (it may be replaced by a new calibration)."""
    import tomllib

    from ..calibration_file import FORMAT

    return p.stat().st_size == 0 or tomllib.loads(p.read_text(encoding="utf-8")).get("format") == FORMAT


def _open(args: argparse.Namespace, rig: Any) -> Any:
    from drivers.registry import open_backend

    if args.backend == "simulated":
        return open_backend("simulated", rig, scenario=args.scenario, real_time=not args.fast, seed=args.seed,
                            holder=True)
    print("caution: the sensors must be mounted in the calibration holder; the speaker will be driven loud "
          "(hearing protection), within the rig's drive ceiling; the laboratory's own rules come first",
          file=sys.stderr)
    return open_backend(args.backend, rig)


def drive_pass(holder: Any, device: Any, freqs: list[float], on_record: Any, out: Path) -> None:
    """One stepped-sine pass of ``holder`` over ``freqs``; whatever happens the drive ends at zero
    (ramped, or zeroed at once if the ramp fails) and the back-end is closed; a stop signal
    raises CalibrationStopped (nothing written)."""
    from drivers.registry import close_backend

    from .holder_run import Halted
    from .running import StopSignals

    with StopSignals(holder) as stops:
        try:
            holder.run(freqs, on_record)
        except Halted:
            pass
        except FlamebodeError:
            if stops.received is None:   # after a signal, a refused request (halt latched) is the stop itself
                raise
        finally:
            try:
                holder.ramp_to_zero()
            except Exception as exc:     # never leave the drive on: zero it at once instead
                holder.halt(f"the ramp to zero failed: {exc}")
                print(f"warning: the ramp to zero failed ({exc}); the output was zeroed at once", file=sys.stderr)
            finally:
                close_backend(device)
    if stops.received is not None:
        raise CalibrationStopped(stops.received, out)


def _calibrate(args: argparse.Namespace, rig: Any, reference: str, second: str | None, freqs: list[float],
               cut_on: float, target_pa: float, record_s: float, out: Path) -> int:
    from ..core import calibration as core
    from .holder_run import DriveSettings, HolderRun

    sensors = [s.channel for s in rig.pressure_sensors]
    sens = [s.sensitivity for s in rig.pressure_sensors]
    device = _open(args, rig)
    settings = DriveSettings(target_pa=target_pa, ceiling_v=rig.drive.ceiling)
    holder = HolderRun(device, sensors, sens, reference, settings, record_s, rig.acquisition.block_duration)
    results: dict[str, list[core.FrequencyFactors]] = {reference: [], **({second: []} if second else {})}
    print(f"calibrating {len(sensors)} sensors of {rig.name} against {reference}: {len(freqs)} frequencies "
          f"{freqs[0]:g}-{freqs[-1]:g} Hz at {target_pa:g} Pa, cut-on {cut_on:.0f} Hz")

    def on_record(rec: Any) -> None:
        for ref in results:
            results[ref].append(core.calibrate_record(rec.pressures, sensors, ref, device.sample_rate_hz,
                                                      rec.freq_hz, args.segments))
        q = results[reference][-1]
        others = [j for j, n in enumerate(sensors) if n != reference]
        note = "  (ceiling reached: below the target)" if rec.at_ceiling else ""
        print(f"  {rec.freq_hz:8.1f} Hz  drive {rec.drive_v * 1e3:8.2f} mV  {rec.pressure_pa:7.2f} Pa  "
              f"{coherence_text(float(q.coherence[others].min()))}  "
              f"u(gain) <= {q.u_gain_rel[others].max() * 100:.3f} %{note}", flush=True)

    drive_pass(holder, device, freqs, on_record, out)
    cal = core.assemble(results[reference], sensors, reference)
    check = None
    if second:
        check = core.consistency(cal, core.assemble(results[second], sensors, second))
        print(f"check against {second}: largest deviation {check.worst_z:.2f} standard uncertainties "
              f"({check.worst_part} of {check.worst_sensor} at {check.worst_freq_hz:g} Hz)")
        if not check.consistent:
            raise CalibrateCommandError(
                f"the calibrations against {reference} and {second} disagree: the {check.worst_part} of "
                f"{check.worst_sensor} at {check.worst_freq_hz:g} Hz by {check.worst_z:.1f} standard "
                f"uncertainties (limit {check.limit:g}); nothing written. Check the holder (every sensor at "
                f"one plane, sealed) and repeat")
    drifted = drift_since_last(args, cal)        # before the file is written: it may replace the last one
    written = _write(out, cal, rig, args, target_pa, record_s, cut_on, check)   # atomic: whole or absent
    return finish(args, rig, written, reference, freqs, check, drifted)


def finish(args: argparse.Namespace, rig: Any, written: Path, reference: str, freqs: list[float],
           check: Any, drifted: list[str]) -> int:
    """What every method says after its file is written, and its note (with the sensors that
    drifted, :func:`drift_since_last`) in the commissioning record."""
    print(f"calibration file: {written}")
    _note_in_record(args, rig, written, reference, freqs, check, drifted)
    print(f"to use it, add to {rig.source_path} (before its first table): "
          f"pressure_calibration = {json.dumps(str(written.resolve()))}")
    return 0


def core_calibration(cf: Any) -> Any:
    """A calibration file's factors as the core's :class:`~app.core.calibration.Calibration`."""
    from ..core.calibration import Calibration

    g = np.array([s.gain for s in cf.sensors]).T
    ph = np.radians(np.array([s.phase_deg for s in cf.sensors]).T)
    return Calibration(tuple(s.name for s in cf.sensors), cf.reference, np.array(cf.frequency_hz), g * np.exp(1j * ph),
                       np.array([s.u_gain for s in cf.sensors]).T, np.radians(np.array([s.u_phase_deg
                                                                                        for s in cf.sensors]).T),
                       np.array([s.coherence for s in cf.sensors]).T, cf.method, str(getattr(cf, "source", "")))


def drift_since_last(args: argparse.Namespace, cal: Any) -> list[str]:
    """Sensors whose factors moved beyond their uncertainties (app.core.sensor_drift) since the record's previous
    calibration (printed either way); a previous file that is gone or unreadable is said."""
    from ..calibration_file import read_calibration
    from ..commissioning_record import read_record, record_path_for
    from ..core.sensor_drift import drift_limit, sensor_drift

    try:
        last = read_record(args.commissioning_record or record_path_for(args.rig)).latest("pressure-calibration")
    except FlamebodeError:
        return []
    if last is None:
        print("drift: no earlier calibration in the commissioning record to compare with")
        return []
    try:
        previous = core_calibration(read_calibration(last.result.get("file", "")))
        drift = sensor_drift(previous, cal)
    except (FlamebodeError, OSError, ValueError) as exc:
        print(f"drift: not compared with the calibration of {last.date} ({exc})")
        return []
    moved = [d for d in drift if d.drifted]
    for d in moved:
        amount = f"{d.change * 100:+.2f} %" if d.part == "gain" else f"{np.degrees(d.change):+.2f} deg"
        print(f"drift: {d.sensor} {d.part} changed by {amount} at {d.freq_hz:g} Hz since {last.date} "
              f"({d.z:.1f} standard uncertainties): check its mounting, cable and certificate")
    if not moved:
        print(f"drift: no sensor moved beyond its uncertainty since {last.date} (limit "
              f"{drift_limit(len(cal.freq_hz)):.1f} standard uncertainties, 1 % false alarms per sensor)")
    return [d.sensor for d in moved]


def _note_in_record(args: argparse.Namespace, rig: Any, written: Path, reference: str, freqs: list[float],
                    check: Any, drifted: list[str] | None = None) -> None:
    """The calibration in the rig's commissioning record (app.commissioning_record); a record that
    cannot be written is said, and the calibration file already written stays."""
    from ..calibration_file import rig_identity
    from ..commissioning_record import Check, append_check, now_utc, record_path_for

    result = {"file": str(written.resolve()), "reference": reference, "band_low_hz": float(freqs[0]),
              "band_high_hz": float(freqs[-1]), "n_frequencies": len(freqs)}
    if check is not None:
        result["check_worst_z"] = float(check.worst_z)
    if drifted is not None:
        result["drifted"] = list(drifted)
    try:
        rec = append_check(args.commissioning_record or record_path_for(args.rig), rig.name,
                           Check("pressure-calibration", now_utc(), args.backend, rig_identity(rig), result))
        print(f"commissioning record: {rec.path}")
    except FlamebodeError as exc:
        print(f"warning: the commissioning record was not updated: {exc}", file=sys.stderr)


def calibration_file_of(cal: Any, rig: Any, conditions: dict[str, Any], cut_on_hz: float,
                        created: str | None = None) -> Any:
    """The file's contents for a core :class:`~app.core.calibration.Calibration` made on ``rig``."""
    from ..calibration_file import CalibrationFile, SensorFactors, rig_identity

    phase = np.degrees(np.unwrap(np.angle(cal.factor), axis=0))
    sensors = []
    for j, s in enumerate(rig.pressure_sensors):
        col = cal.column(s.channel)
        sensors.append(SensorFactors(
            name=s.channel, sensitivity_v_pa=float(s.sensitivity), position_m=float(s.position),
            gain=tuple(float(v) for v in np.abs(cal.factor[:, col])), phase_deg=tuple(float(v) for v in phase[:, col]),
            u_gain=tuple(float(v) for v in cal.u_gain_rel[:, col]),
            u_phase_deg=tuple(float(v) for v in np.degrees(cal.u_phase_rad[:, col])),
            coherence=tuple(float(v) for v in cal.coherence[:, col]), serial=str(getattr(s, "serial", "") or "")))
    when = created or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    return CalibrationFile(created=when, method=cal.method, reference=cal.reference, rig_name=rig.name,
                           rig_identity=rig_identity(rig), frequency_hz=tuple(float(f) for f in cal.freq_hz),
                           sensors=tuple(sensors), cut_on_hz=float(cut_on_hz),
                           rig_file=str(Path(rig.source_path).resolve()) if rig.source_path else "",
                           conditions=conditions)


def _write(out: Path, cal: Any, rig: Any, args: argparse.Namespace, target_pa: float, record_s: float,
           cut_on: float, check: Any) -> Path:
    from ..calibration_file import write_calibration

    conditions: dict[str, Any] = {"backend": args.backend, "pressure_pa": target_pa, "record_s": record_s,
                                  "segments": args.segments}
    if args.backend == "simulated" and args.seed is not None:
        conditions["simulated_seed"] = args.seed
    if check is not None:
        conditions.update({"check_reference": args.check_reference, "check_worst_z": check.worst_z})
    try:
        return write_calibration(out, calibration_file_of(cal, rig, conditions, cut_on))
    except OSError as exc:
        raise CalibrateCommandError(f"--out {out}: could not be written ({exc.strerror or exc})") from None
