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


def _decode(value: Any) -> Any:
    if isinstance(value, bytes):
        return value.decode("utf-8")
    if isinstance(value, np.ndarray):
        if value.dtype.kind in ("O", "S"):
            return tuple(v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in value)
        return value
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, str) and value[:1] in ("{", "["):
        try:
            return json.loads(value)
        except ValueError:
            return value
    return value


def read_record(path: str | Path) -> RawRecord:
    """Read a record file (checksums verified by HDF5) or raise RecordError naming the file."""
    p = Path(path)
    if is_tmp(p):
        raise RecordError(f"{p}: a temporary file left by an interrupted write, not a record")
    if not p.exists():
        raise RecordError(f"{p}: record file is missing")
    try:
        with h5py.File(p, "r") as f:
            if f.attrs.get("format") not in (FORMAT, FORMAT.encode()):
                raise RecordError(f"{p}: not a flamebode record (no 'format' attribute)")
            data = f[DATASET][...]
            attrs = {k: _decode(v) for k, v in f.attrs.items()}
    except RecordError:
        raise
    except (OSError, KeyError, ValueError) as exc:
        raise RecordError(f"{p}: record file is damaged or truncated ({exc})") from None
    channels = tuple(attrs.get("channels", ()))
    if len(channels) != data.shape[0]:
        raise RecordError(f"{p}: {data.shape[0]} data rows but {len(channels)} channel names")
    return RawRecord(data=data, channels=channels, sample_rate_hz=float(attrs["sample_rate_hz"]),
                     freq_hz=float(attrs["freq_hz"]), attrs=attrs)
