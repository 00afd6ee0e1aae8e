"""One attempt's raw record as its own HDF5 file: written whole, then renamed into place.

A record is built in memory, written under a temporary name (``.tmp-<attempt>.h5.part``)
in the same folder with plain file I/O, fsync'd, renamed to its final name and the folder fsync'd, so a
file with a final name is always complete; a killed writer leaves only a ``.part``
file, which readers report and never take for data. The samples are kept exactly as
acquired (native dtype, volts), chunked per channel, gzip level 1 with shuffle and a
fletcher32 checksum. Layout and attribute names: docs/run-layout.md.

Imports: standard library, numpy, h5py only (no Qt, no drivers).
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from ..errors import RecordError

FORMAT = "flamebode-record"
FORMAT_VERSION = 1
DATASET = "record/volts"
TMP_PREFIX = ".tmp-"
TMP_SUFFIX = ".h5.part"
CHUNK_BYTES_MAX = 1 << 20        # 1 MiB
GZIP_LEVEL = 1


@dataclass(frozen=True)
class RawRecord:
    """A stored record read back: ``data`` (n_channels, n_samples) volts, as acquired."""

    data: np.ndarray
    channels: tuple[str, ...]
    sample_rate_hz: float
    freq_hz: float
    attrs: dict[str, Any]


def tmp_name(attempt_id: str) -> str:
    return f"{TMP_PREFIX}{attempt_id}{TMP_SUFFIX}"


def is_tmp(path: str | Path) -> bool:
    name = Path(path).name
    return name.startswith(TMP_PREFIX) and name.endswith(TMP_SUFFIX)


def chunk_shape(n_samples: int, itemsize: int) -> tuple[int, int]:
    """One channel per chunk, at most 1 MiB (and the whole row when it is smaller)."""
    return 1, max(1, min(n_samples, CHUNK_BYTES_MAX // itemsize))


def _attr_value(value: Any) -> Any:
    if isinstance(value, (dict, list)) and not (isinstance(value, list) and value and
                                                all(isinstance(v, str) for v in value)):
        return json.dumps(value)
    if isinstance(value, (list, tuple)) and all(isinstance(v, str) for v in value):
        return np.array(list(value), dtype=h5py.string_dtype())
    if value is None:
        return ""
    return value


def fsync_dir(folder: Path) -> None:
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def write_record(folder: str | Path, final_name: str, attempt_id: str, data: np.ndarray,
                 attrs: dict[str, Any]) -> tuple[Path, int, str]:
    """Write ``data`` with ``attrs`` to ``folder/final_name`` atomically.

    Returns (final path, size in bytes, sha256 of the file). On any failure the
    temporary file is removed and the exception propagates; no other file is touched.
    """
    folder = Path(folder)
    tmp = folder / tmp_name(attempt_id)
    final = folder / final_name
    if final.exists():
        raise FileExistsError(f"{final} already exists; a record is never overwritten")
    image = build_image(np.ascontiguousarray(data), attrs)
    try:
        with open(tmp, "wb") as fh:
            fh.write(image)
            fh.flush()
            os.fsync(fh.fileno())
        os.rename(tmp, final)
        fsync_dir(folder)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return final, len(image), hashlib.sha256(image).hexdigest()


def build_image(arr: np.ndarray, attrs: dict[str, Any]) -> bytes:
    """The complete HDF5 file as bytes, built in memory.

    HDF5 never writes to disk itself: a write that fails inside the library (full disk,
    file-size limit) can crash the process when the file is closed, so the finished
    image is written with plain file I/O, where a failure is an ordinary OSError.
    """
    bio = io.BytesIO()
    with h5py.File(bio, "w", libver=("v110", "latest")) as f:
        f.attrs["format"] = FORMAT
        f.attrs["format_version"] = FORMAT_VERSION
        ds = f.create_dataset(DATASET, data=arr, chunks=chunk_shape(arr.shape[1], arr.dtype.itemsize),
                              compression="gzip", compression_opts=GZIP_LEVEL, shuffle=True, fletcher32=True)
        ds.attrs["units"] = "V"
        for key, value in attrs.items():
            f.attrs[key] = _attr_value(value)
    return bio.getvalue()


def file_digest(path: str | Path) -> tuple[int, str]:
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
            size += len(block)
    return size, h.hexdigest()


# --- reading: every attribute and the dataset through one checked reader ---------------------

SAMPLE_RATE_MIN_HZ = 1.0          # bounds that only reject nonsense (from memory: sound cards
SAMPLE_RATE_MAX_HZ = 1e8          # sample at 8-384 kHz, DAQ cards at up to a few MS/s)
MIN_SAMPLES = 16
VOLTS_MAX = 1e6                   # far beyond any ADC input range (from memory: ±10 V typical); rejects nonsense
ROLES = ("pressure", "light", "drive_reference", "unknown")


@dataclass(frozen=True)
class AttrSpec:
    """What one attribute must be: ``kind`` is one of text, int, number, texts, numbers,
    json_object, json_list; ``lo``/``hi`` are inclusive bounds for numbers; ``per_channel``
    arrays hold one entry per channel; ``allow_nan`` lets NaN stand for "not available";
    ``positive`` excludes 0 itself."""

    kind: str
    expected: str
    required: bool = False
    lo: float | None = None
    hi: float | None = None
    allow_nan: bool = False
    per_channel: bool = False
    choices: tuple[str, ...] = ()
    positive: bool = False          # strictly above 0 (``lo`` is then 0)


# The record format, attribute by attribute (docs/run-layout.md, "Record files").
RECORD_ATTRS: dict[str, AttrSpec] = {
    "format": AttrSpec("text", f"the text '{FORMAT}'", required=True, choices=(FORMAT,)),
    "format_version": AttrSpec("int", f"the integer {FORMAT_VERSION}", required=True,
                               lo=FORMAT_VERSION, hi=FORMAT_VERSION),
    "attempt_id": AttrSpec("text", "the attempt's id (text)"),
    "point_index": AttrSpec("int", "the point's index, an integer from 0", lo=0, hi=10**9),
    "freq_hz": AttrSpec("number", "the drive frequency in Hz, a number above 0 and below half the sample rate",
                        required=True, lo=0.0, hi=SAMPLE_RATE_MAX_HZ / 2, positive=True),
    "drive_v": AttrSpec("number", "the drive amplitude in V peak, a number from 0 to 1000", lo=0.0, hi=1e3),
    "target_ratio": AttrSpec("number", "the target velocity ratio, a number from 0 to 10", lo=0.0, hi=10.0),
    "achieved_ratio": AttrSpec("number", "the measured velocity ratio, a number from 0 (NaN when not measured)",
                               lo=0.0, hi=1e6, allow_nan=True),
    "sample_rate_hz": AttrSpec("number", f"the sample rate in Hz, a number from {SAMPLE_RATE_MIN_HZ:g} to "
                               f"{SAMPLE_RATE_MAX_HZ:g}", required=True, lo=SAMPLE_RATE_MIN_HZ,
                               hi=SAMPLE_RATE_MAX_HZ),
    "n_samples": AttrSpec("int", "the number of samples per channel, the length of record/volts' rows", lo=1,
                          hi=2**62),
    "channels": AttrSpec("texts", "a list of channel names (text), one per row of record/volts",
                         required=True, per_channel=True),
    "channel_roles": AttrSpec("texts", f"one role per channel, each one of {', '.join(ROLES)}",
                              per_channel=True, choices=ROLES),
    "channel_units": AttrSpec("texts", "one unit (text) per channel", per_channel=True),
    "channel_sensitivity_v_per_unit": AttrSpec("numbers", "one sensitivity per channel in V per unit, each "
                                               "above 0", per_channel=True, lo=0.0, hi=1e9, positive=True),
    "channel_position_m": AttrSpec("numbers", "one axial position per channel in m (NaN where not a pressure "
                                   "sensor)", per_channel=True, lo=-1e3, hi=1e3, allow_nan=True),
    "identity": AttrSpec("json_object", "a JSON object of instrument identities"),
    "library_versions": AttrSpec("json_object", "a JSON object of library versions"),
    "overflows": AttrSpec("int", "the overflow count, an integer from 0", lo=0, hi=2**62),
    "started_wall_s": AttrSpec("number", "the record start in Unix seconds, a number from 0", lo=0.0, hi=1e11),
    "started_utc": AttrSpec("text", "the record start as ISO 8601 text"),
    "recorded_wall_s": AttrSpec("number", "the record end in Unix seconds, a number from 0", lo=0.0, hi=1e11),
    "tuning_drive_v": AttrSpec("numbers", "the tuning history's drive amplitudes in V", lo=0.0, hi=1e3),
    "tuning_measured_ratio": AttrSpec("numbers", "the tuning history's measured velocity ratios", lo=0.0,
                                      hi=1e6, allow_nan=True),
    "tuning_window_s": AttrSpec("numbers", "the tuning history's window lengths in s", lo=0.0, hi=1e6),
    "flags": AttrSpec("json_list", "a JSON list of flag names"),
    "rig_sha256": AttrSpec("text", "the rig snapshot's sha256 (text)"),
    "host": AttrSpec("text", "the computer name (text)"),
    "analysis": AttrSpec("json_object", "a JSON object with the first analysis"),
}
TUNING = ("tuning_drive_v", "tuning_measured_ratio", "tuning_window_s")


def _describe(value: Any) -> str:
    """What was found, in words, for a message."""
    if isinstance(value, h5py.Empty):
        return "an empty value"
    if isinstance(value, (bytes, str)):
        text = value.decode("utf-8", "replace") if isinstance(value, bytes) else value
        return f"the text {text[:40]!r}" + ("..." if len(text) > 40 else "")
    if isinstance(value, (bool, np.bool_)):
        return f"the boolean {bool(value)}"
    if isinstance(value, (int, np.integer)):
        return f"the integer {int(value)}"
    if isinstance(value, (float, np.floating)):
        return f"the number {float(value):g}"
    if isinstance(value, (complex, np.complexfloating)):
        return f"the complex number {complex(value)}"
    if isinstance(value, np.ndarray):
        kinds = {"f": "numbers", "i": "integers", "u": "integers", "O": "values", "S": "texts", "U": "texts",
                 "b": "booleans", "c": "complex numbers"}
        shape = "x".join(map(str, value.shape)) or "0-d"
        return f"an array ({shape}) of {kinds.get(value.dtype.kind, str(value.dtype))}"
    return f"a value of type {type(value).__name__}"


def _text(value: Any) -> str | None:
    if isinstance(value, bytes):
        try:
            return value.decode("utf-8")
        except UnicodeDecodeError:
            return None
    return value if isinstance(value, str) else None


def _is_int(value: Any) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))


def _is_real(value: Any) -> bool:
    return _is_int(value) or isinstance(value, (float, np.floating))


def check_attr(where: str, name: str, value: Any, spec: AttrSpec, n_channels: int | None = None) -> Any:
    """The one checked reader of a record attribute: type, shape, finite, range and choices.

    Returns the value as plain Python (str, int, float, tuple of str, float64 array, parsed
    JSON) or raises RecordError naming the file, the attribute, what was found and what is
    expected.
    """
    def bad(found: str) -> RecordError:
        return RecordError(f"{where}: attribute '{name}': found {found}, expected {spec.expected}")

    kind = spec.kind
    if kind in ("text", "json_object", "json_list"):
        text = _text(value)
        if text is None:
            raise bad(_describe(value))
        if kind == "text":
            if spec.choices and text not in spec.choices:
                raise bad(_describe(text))
            return text
        try:
            parsed = json.loads(text)
        except ValueError:
            raise bad(f"{_describe(text)}, which is not JSON") from None
        want = dict if kind == "json_object" else list
        if not isinstance(parsed, want):
            raise bad(f"JSON of type {type(parsed).__name__}")
        if kind == "json_list" and not all(isinstance(v, str) for v in parsed):
            raise bad("a JSON list with entries that are not text")
        return parsed
    if kind in ("int", "number"):
        if not _is_real(value) or (kind == "int" and not _is_int(value)):
            raise bad(_describe(value))
        num = int(value) if kind == "int" else float(value)
        if kind == "number" and math.isnan(num) and spec.allow_nan:
            return num
        if kind == "number" and not math.isfinite(num):
            raise bad(_describe(value))
        if (spec.lo is not None and num < spec.lo) or (spec.hi is not None and num > spec.hi) or \
                (spec.positive and num <= 0):
            raise bad(_describe(value))
        return num
    # arrays
    if not isinstance(value, np.ndarray) or value.ndim != 1:
        raise bad(_describe(value))
    if spec.per_channel and n_channels is not None and value.shape[0] != n_channels:
        raise bad(f"{value.shape[0]} entries for {n_channels} channels")
    if kind == "texts":
        texts = tuple(_text(v) for v in value.tolist()) if value.dtype.kind in ("O", "S", "U") else None
        if texts is None or any(t is None for t in texts):
            raise bad(_describe(value))
        if spec.choices and any(t not in spec.choices for t in texts):
            odd = next(t for t in texts if t not in spec.choices)
            raise bad(f"the entry {odd!r}")
        return texts
    if value.dtype.kind not in ("f", "i", "u"):
        raise bad(_describe(value))
    arr = value.astype(np.float64)
    ok = np.isfinite(arr) | (np.isnan(arr) if spec.allow_nan else False)
    with np.errstate(invalid="ignore"):
        ok &= ~(arr < spec.lo) if spec.lo is not None else True
        ok &= ~(arr > spec.hi) if spec.hi is not None else True
        if spec.positive:
            ok &= ~(arr <= 0.0)
    if not ok.all():
        i = int(np.argmin(ok))
        raise bad(f"{arr[i]:g} at entry {i}")
    return arr


def _read_attrs(where: str, node: Any) -> dict[str, Any]:
    """Every attribute of an HDF5 object, raw; an unreadable one is a RecordError."""
    out = {}
    try:
        names = list(node.attrs.keys())
    except Exception as exc:  # h5py raises several types for damaged headers
        raise RecordError(f"{where}: the attributes cannot be read ({type(exc).__name__}: {exc}); "
                          f"the file is damaged") from None
    for name in names:
        try:
            out[name] = node.attrs[name]
        except Exception as exc:
            raise RecordError(f"{where}: attribute '{name}' cannot be read ({type(exc).__name__}: {exc})") from None
    return out


def _lenient(value: Any) -> Any:
    """An attribute outside the format (kept for whoever wrote it), decoded without guessing."""
    text = _text(value)
    if text is not None:
        return text
    if isinstance(value, np.generic):
        return value.item()
    return value


def check_attrs(where: str, raw: dict[str, Any]) -> dict[str, Any]:
    """All root attributes of a record, each through ``check_attr``."""
    fmt = raw.get("format")
    if fmt is None or _text(fmt) != FORMAT:
        found = "no 'format' attribute" if fmt is None else f"'format' is {_describe(fmt)}"
        raise RecordError(f"{where}: not a flamebode record ({found}; expected the text '{FORMAT}')")
    version = raw.get("format_version")
    if _is_int(version) and int(version) > FORMAT_VERSION:
        raise RecordError(f"{where}: attribute 'format_version': found {int(version)}, expected "
                          f"{FORMAT_VERSION}: the record was written by a newer flamebode; read it with that "
                          f"version")
    for name, spec in RECORD_ATTRS.items():
        if spec.required and name not in raw:
            raise RecordError(f"{where}: attribute '{name}' is missing; expected {spec.expected}")
    out: dict[str, Any] = {}
    out["channels"] = check_attr(where, "channels", raw["channels"], RECORD_ATTRS["channels"])
    channels = out["channels"]
    if not channels or any(not c.strip() for c in channels):
        raise RecordError(f"{where}: attribute 'channels': found {list(channels)!r}, expected at least one "
                          f"channel name, none empty")
    dupes = sorted({c for c in channels if channels.count(c) > 1})
    if dupes:
        raise RecordError(f"{where}: attribute 'channels': duplicate name(s) {', '.join(dupes)}")
    for name, value in raw.items():
        spec = RECORD_ATTRS.get(name)
        if name != "channels":
            out[name] = _lenient(value) if spec is None else check_attr(where, name, value, spec, len(channels))
    if out["freq_hz"] >= out["sample_rate_hz"] / 2:
        raise RecordError(f"{where}: attribute 'freq_hz': found {out['freq_hz']:g} Hz, expected a frequency "
                          f"below half the sample rate ({out['sample_rate_hz'] / 2:g} Hz)")
    lengths = {n: len(out[n]) for n in TUNING if n in out}
    if len(set(lengths.values())) > 1:
        raise RecordError(f"{where}: the tuning history attributes differ in length "
                          f"({', '.join(f'{n}: {k}' for n, k in lengths.items())}); expected one entry per step")
    return out


def _memory_bytes() -> int:
    try:
        return int(os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return 16 << 30


def _check_dataset(where: str, f: h5py.File, attrs: dict[str, Any]) -> np.ndarray:
    """``record/volts`` read and checked: a 2-D dataset of real samples, one row per channel,
    finite; integer ADC codes only with a ``volts_per_count`` scale. Returns volts."""
    n_ch = len(attrs["channels"])
    expect = f"a dataset of real samples in volts, shape ({n_ch} channels, samples)"
    try:
        node = f.get(DATASET)
    except Exception as exc:
        raise RecordError(f"{where}: '{DATASET}' cannot be opened ({type(exc).__name__}: {exc})") from None
    if node is None:
        raise RecordError(f"{where}: no dataset '{DATASET}'; expected {expect}")
    if not isinstance(node, h5py.Dataset):
        raise RecordError(f"{where}: '{DATASET}' is a {type(node).__name__.lower()}, expected {expect}")
    dt, shape = node.dtype, node.shape
    if dt.kind not in ("f", "i", "u"):
        what = {"c": "complex numbers", "S": "text", "U": "text", "b": "booleans", "V": "compound or opaque values",
                "O": "text" if h5py.check_string_dtype(dt) else "objects"}.get(dt.kind, str(dt))
        raise RecordError(f"{where}: '{DATASET}' holds {what} ({dt}), expected {expect}")
    if shape is None or len(shape) != 2 or shape[0] != n_ch:
        raise RecordError(f"{where}: '{DATASET}' has shape {shape}, expected {expect}")
    if shape[1] < MIN_SAMPLES:
        raise RecordError(f"{where}: '{DATASET}' holds {shape[1]} samples per channel, expected at least "
                          f"{MIN_SAMPLES} (a record needs many periods of the forcing)")
    if "n_samples" in attrs and attrs["n_samples"] != shape[1]:
        raise RecordError(f"{where}: attribute 'n_samples': found {attrs['n_samples']}, but '{DATASET}' holds "
                          f"{shape[1]} samples per channel")
    need = 8 * shape[0] * shape[1]
    if need > _memory_bytes() // 2:
        raise RecordError(f"{where}: '{DATASET}' declares {shape[0]} x {shape[1]} samples ({need / 1e9:.1f} GB "
                          f"as float64), more than half this computer's memory; not read")
    ds_attrs = _read_attrs(f"{where}: '{DATASET}'", node)
    units = ds_attrs.get("units")
    scale_raw = ds_attrs.get("volts_per_count")
    if dt.kind == "f":
        if units is not None and _text(units) != "V":
            raise RecordError(f"{where}: '{DATASET}' attribute 'units': found {_describe(units)}, expected 'V'")
        if scale_raw is not None:
            raise RecordError(f"{where}: '{DATASET}' holds float samples (volts) but has a 'volts_per_count' "
                              f"attribute, which is for integer ADC codes only; remove one of them")
    else:
        if scale_raw is None:
            raise RecordError(f"{where}: '{DATASET}' holds integers ({dt}), i.e. raw ADC codes, and no "
                              f"'volts_per_count' attribute says how to convert them to volts; expected float "
                              f"samples in volts, or integers with 'volts_per_count' (one number, or one per "
                              f"channel)")
        if units is not None and _text(units) != "count":
            raise RecordError(f"{where}: '{DATASET}' attribute 'units': found {_describe(units)}, expected "
                              f"'count' for integer ADC codes")
    scale = None if dt.kind == "f" else _volts_per_count(where, scale_raw, n_ch)
    try:
        data = node[...]
    except Exception as exc:
        raise RecordError(f"{where}: '{DATASET}' cannot be read: damaged or truncated "
                          f"({type(exc).__name__}: {exc})") from None
    if scale is not None:
        data = data.astype(np.float64) * scale
    _check_samples(where, data, attrs["channels"], attrs["sample_rate_hz"])
    return data


def _volts_per_count(where: str, raw: Any, n_channels: int) -> float | np.ndarray:
    """The dataset's ``volts_per_count`` scale: one number, or one per channel (as a column)."""
    expected = "volts per ADC count, one number above 0 or one per channel"
    per_channel = isinstance(raw, np.ndarray)
    spec = AttrSpec("numbers" if per_channel else "number", expected, per_channel=per_channel, lo=0.0, hi=1e6,
                    positive=True)
    scale = check_attr(f"{where}: '{DATASET}'", "volts_per_count", raw, spec, n_channels)
    return scale[:, None] if per_channel else scale


def _check_samples(where: str, data: np.ndarray, channels: tuple[str, ...], sample_rate_hz: float) -> None:
    """Every sample finite and within ±VOLTS_MAX, or a RecordError naming channel and sample index."""
    with np.errstate(invalid="ignore"):
        bad = ~(np.abs(data).astype(np.float64, copy=False) <= VOLTS_MAX)   # NaN compares false: caught too
    if not bad.any():
        return
    parts = []
    for row in np.flatnonzero(bad.any(axis=1)):
        first = int(np.argmax(bad[row]))
        parts.append(f"channel '{channels[row]}': {int(bad[row].sum())} sample(s), the first at sample {first} "
                     f"(t = {first / sample_rate_hz:.6g} s): {data[row, first]}")
    raise RecordError(f"{where}: '{DATASET}' holds samples that are not finite volts within ±{VOLTS_MAX:g} V "
                      f"(NaN, infinity or absurd values), which cannot be evaluated: {'; '.join(parts)}")


def _open(p: Path) -> h5py.File:
    if is_tmp(p):
        raise RecordError(f"{p}: a temporary file left by an interrupted write, not a record")
    if not p.exists():
        raise RecordError(f"{p}: record file is missing")
    if not p.is_file():
        raise RecordError(f"{p}: not a regular file, expected an HDF5 record")
    try:
        size = p.stat().st_size
        with open(p, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise RecordError(f"{p}: cannot read the file ({exc.strerror or exc})") from None
    if size == 0:
        raise RecordError(f"{p}: empty file (0 bytes), expected an HDF5 record")
    if not h5py.is_hdf5(p):
        raise RecordError(f"{p}: not an HDF5 file (it starts with {head!r}, {size} bytes); expected an HDF5 "
                          f"record written by flamebode")
    try:
        return h5py.File(p, "r")
    except Exception as exc:
        raise RecordError(f"{p}: record file is damaged or truncated ({type(exc).__name__}: {exc})") from None


def read_record_attrs(path: str | Path) -> dict[str, Any]:
    """The checked root attributes of a record file, without reading the samples."""
    p = Path(path)
    try:
        with _open(p) as f:
            return check_attrs(str(p), _read_attrs(str(p), f))
    except RecordError:
        raise
    except Exception as exc:  # closing a damaged file can fail too
        raise RecordError(f"{p}: record file is damaged or truncated ({type(exc).__name__}: {exc})") from None


def read_record(path: str | Path) -> RawRecord:
    """Read a record file (checksums verified by HDF5) or raise RecordError naming the file,
    the attribute or dataset, what was found and what is expected."""
    p = Path(path)
    try:
        with _open(p) as f:
            attrs = check_attrs(str(p), _read_attrs(str(p), f))
            data = _check_dataset(str(p), f, attrs)
    except RecordError:
        raise
    except Exception as exc:  # closing a damaged file can fail too
        raise RecordError(f"{p}: record file is damaged or truncated ({type(exc).__name__}: {exc})") from None
    return RawRecord(data=data, channels=attrs["channels"], sample_rate_hz=attrs["sample_rate_hz"],
                     freq_hz=attrs["freq_hz"], attrs=attrs)
