"""``flamebode reprocess RECORD --rig RIG.toml``: compute one FTF point from a record.

RECORD is an HDF5 record written by flamebode (named .h5/.hdf5, or recognised by its
first bytes) or a plain CSV (``time_s`` then one column per channel named as in the rig
file). The rig's pressure and light channels must be in the record; the missing ones are
named before anything else. The forcing frequency comes from
``--freq-hz``, the record's own attributes, or is estimated from the drive reference
channel (or the first pressure channel when none is recorded).

The point gets the same quality flags a sweep gives it (``app.core.quality.quality_flags``
against the ``[quality]`` limits of ``--plan``, or the plan defaults without one); flags the
sweep raised while acquiring (tuning, faults) are not in a record's samples and are not
re-derived. ``--json`` carries the gain and phase intervals, the velocity ratio's standard
uncertainty (noise alone and with every stated systematic input), the error budget's terms,
the graded warnings and the flags.
"""

from __future__ import annotations

import argparse
import difflib
import json
import math
from pathlib import Path

from ..errors import RecordError


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("record", help="HDF5 record (.h5) or CSV file (time_s, then one column per channel)")
    p.add_argument("--rig", required=True, help="rig file (TOML) describing sensors, light channel and gas")
    p.add_argument("--freq-hz", type=float, default=None, help="forcing frequency; estimated when omitted")
    p.add_argument("--json", action="store_true", help="print the result as JSON for scripts")
    p.add_argument("--plan", default=None,
                   help="plan file whose [quality] limits decide the flags (default: the plan defaults)")


HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def _is_hdf5(path: Path) -> bool:
    """Named .h5/.hdf5, or an HDF5 file under another name (its first eight bytes say so)."""
    if path.suffix.lower() in (".h5", ".hdf5"):
        return True
    try:
        with open(path, "rb") as fh:
            return fh.read(8) == HDF5_SIGNATURE
    except OSError:
        return False


def _load(path: Path):
    """(data, channels, sample_rate_hz, freq_hz or None) from an HDF5 or CSV record."""
    if _is_hdf5(path):
        from ..storage.record import read_record

        rec = read_record(path)
        return rec.data, tuple(rec.channels), rec.sample_rate_hz, rec.freq_hz
    from ..storage.csv_record import read_csv_record

    rec = read_csv_record(path)
    return rec.data, rec.channels, rec.sample_rate_hz, None


def _check_channels(path: Path, channels: tuple[str, ...], rig, rig_path: str) -> None:
    """The rig's pressure and light channels must be in the record: say which are not, first."""
    needed = [s.channel for s in rig.pressure_sensors] + [rig.light.channel]
    missing = [c for c in needed if c not in channels]
    if not missing:
        return
    spare = [c for c in channels if c not in needed and c != rig.drive.reference_channel]
    hints = []
    for c in missing:
        same = [s for s in spare if s.casefold() == c.casefold()]
        close = same or difflib.get_close_matches(c, spare, n=1, cutoff=0.75)
        if close:
            hints.append(f"'{close[0]}' for '{c}'?")
    column = "channel names" if _is_hdf5(path) else "column names in its header"
    raise RecordError(f"{path}: lacks channel(s) {', '.join(missing)} named in the rig file '{rig_path}' "
                      f"(the file has: {', '.join(channels) or 'none'}"
                      f"{'; ' + ' '.join(hints) if hints else ''}); rename the {column} or use a rig file "
                      f"whose channel names match the record")


def _given_freq(freq_hz: float, sample_rate_hz: float) -> float:
    if not (math.isfinite(freq_hz) and 0 < freq_hz < sample_rate_hz / 2):
        raise RecordError(f"--freq-hz: found {freq_hz:g}, expected a frequency in Hz above 0 and below half the "
                          f"record's sample rate ({sample_rate_hz / 2:g} Hz)")
    return freq_hz


def _estimate_freq(data, channels, sample_rate_hz, rig) -> tuple[float, str]:
    from ..core.harmonic import estimate_frequency

    source = rig.drive.reference_channel if rig.drive.reference_channel in channels else rig.pressure_sensors[0].channel
    if source not in channels:
        raise RecordError(f"cannot estimate the forcing frequency: channel '{source}' is not in the record; "
                          f"give --freq-hz")
    return estimate_frequency(data[list(channels).index(source)], sample_rate_hz, f_min_hz=5.0), source


def _quality_limits(plan_path: str | None):
    """The [quality] table of ``plan_path``, or the plan defaults (as a sweep without one)."""
    from ..plan import Quality

    if not plan_path:
        return Quality()
    from ..plan import load_plan

    return load_plan(plan_path).quality


def run(args: argparse.Namespace) -> int:
    from ..core.quality import quality_flags
    from ..core.response import evaluate_point, point_summary
    from ..rig import load_rig

    rig = load_rig(args.rig)
    data, channels, fs, freq = _load(Path(args.record))
    _check_channels(Path(args.record), channels, rig, str(args.rig))
    how = "given" if args.freq_hz is not None else "from the record"
    if args.freq_hz is not None:
        freq = _given_freq(args.freq_hz, fs)
    if freq is None:
        freq, source = _estimate_freq(data, channels, fs, rig)
        how = f"estimated from channel '{source}'"
    limits = _quality_limits(getattr(args, "plan", None))
    point = evaluate_point(data, channels, fs, freq, rig)
    flags = list(quality_flags(point.quality, limits))
    summary = dict(point_summary(point))
    summary["flags"] = flags
    summary["frequency_source"] = how
    summary["record"] = str(args.record)
    summary["rig"] = str(args.rig)
    if args.json:
        print(json.dumps(summary, indent=2))
        return 0
    q = point.quality
    rows = [
        ("record", str(args.record)),
        ("frequency", f"{point.freq_hz:.4f} Hz ({how})"),
        ("sample rate", f"{fs:.6g} Hz, {data.shape[1] / fs:.3f} s"),
        ("|u'|/u at reference plane", f"{point.velocity.amplitude_ratio:.4f} ± {summary['velocity_ratio_uncertainty']:.2g} "
                                      f"(1σ; peak; mean {point.velocity.mean_velocity_ref_m_s:.3f} m/s)"),
        ("gain", f"{point.gain:.4f} ± {point.gain_ci95:.4f} (95 %)"),
        ("phase", f"{point.phase_rad:+.4f} ± {point.phase_ci95_rad:.4f} rad  ({math.degrees(point.phase_rad):+.1f}°)"),
        ("SNR pressure (min) / light", f"{q['snr_db_pressure_min']:.1f} dB / {q['snr_db_light']:.1f} dB"),
        ("MMM residual / pair spread", f"{q['mmm_residual']:.4f} / {q['pair_spread']:.4f} (cond {q['cond']:.2f})"),
        ("distortion velocity / light", f"{q['distortion_velocity']:.4f} / {q['distortion_light']:.4f}"),
        ("drift velocity / light", f"{q['drift_velocity']:.4f} / {q['drift_light']:.4f}"),
    ]
    width = max(len(k) for k, _ in rows)
    for k, v in rows:
        print(f"{k:<{width}}  {v}")
    print(f"{'flags':<{width}}  {', '.join(flags) or 'none'}")
    for w in point.warnings:
        print(f"warning: {w}")
    return 0
