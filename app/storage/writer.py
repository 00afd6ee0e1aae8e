"""The run writer: subscribes to engine events and stores a run folder on its own thread.

``RunWriter(run_dir, rig_path, plan_path, bus)`` creates (or reopens) the run folder,
copies the rig, plan and scenario text into it, and then, for every ``PointSettled``
event, writes the raw record (record.py), commits its index rows (index.py) and
acknowledges the attempt on the bus. Its ``__call__`` runs on the engine's thread and
only copies and enqueues; all file work happens on the writer's thread, never on the
GUI thread. A failed write removes only its own temporary file, acknowledges the
attempt with a named fault message (what failed, where, what to free) and puts the
writer in a faulted state; nothing already stored is touched.

Imports: standard library, numpy, h5py (via record.py), ``app.rig`` and
``app.engine.events`` only. Must not import Qt, pyqtgraph, drivers or app.ui.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import platform
import queue
import shutil
import threading
import time
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from ..core.point import FtfPoint
from ..engine.events import Event, EventBus, FaultRaised, PointSettled, SweepFinished, SweepStarted, TransferMeasured
from ..errors import FlamebodeError
from . import index
from .record import fsync_dir, write_record

try:
    import fcntl          # POSIX: the writer lock; without it (Windows) the lock is not taken
except ImportError:       # pragma: no cover
    fcntl = None  # type: ignore[assignment]

RECORDS_DIR = "records"
SNAPSHOT_RIG = "rig.toml"
SNAPSHOT_CALIBRATION = "calibration.toml"   # the calibration file the rig names (app.calibration_file.RUN_SNAPSHOT)
SNAPSHOT_PLAN = "plan.toml"
SNAPSHOT_SCENARIO = "scenario"      # + the source file's suffix
_STOP = object()


class RunFolderError(FlamebodeError):
    """A run folder cannot be created or does not match the files given."""


def sha256_file(path: str | Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def library_versions() -> dict[str, str]:
    import h5py

    return {"flamebode": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "h5py": h5py.version.version, "hdf5": h5py.version.hdf5_version, "sqlite": index.sqlite3.sqlite_version}


def channel_map(rig: Any) -> dict[str, dict[str, Any]]:
    """Role, unit, sensitivity (V per unit) and position of every channel the rig names."""
    out: dict[str, dict[str, Any]] = {}
    if rig is None:
        return out
    for s in getattr(rig, "pressure_sensors", ()):
        out[s.channel] = {"role": "pressure", "unit": "Pa", "sensitivity": float(s.sensitivity),
                          "position_m": float(s.position)}
    light = getattr(rig, "light", None)
    if light is not None:
        out[light.channel] = {"role": "light", "unit": "1", "sensitivity": float(light.sensitivity),
                              "position_m": float("nan")}
    drive = getattr(rig, "drive", None)
    if drive is not None and drive.reference_channel:
        out[drive.reference_channel] = {"role": "drive_reference", "unit": "V", "sensitivity": 1.0,
                                        "position_m": float("nan")}
    return out


def _num(value: Any) -> float | None:
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if np.isfinite(out) else None


def analysis_from_result(result: FtfPoint) -> dict[str, Any]:
    """Plain numbers from a core FtfPoint (read defensively: missing attributes become None, so a
    partial stand-in in a test or an older result type still stores what it has)."""
    vel = getattr(result, "velocity", None)
    ftf = getattr(result, "ftf", None)
    ftf_c = complex(ftf) if ftf is not None else None
    quality = getattr(result, "quality", {}) or {}
    return {
        "achieved_ratio": _num(getattr(vel, "amplitude_ratio", None)),
        "sigma_ratio": _num(getattr(vel, "sigma_ratio", None)),
        "mean_velocity_m_s": _num(getattr(vel, "mean_velocity_ref_m_s", None)),
        "gain": _num(getattr(result, "gain", None)),
        "phase_rad": _num(getattr(result, "phase_rad", None)),
        "gain_ci95": _num(getattr(result, "gain_ci95", None)),
        "phase_ci95_rad": _num(getattr(result, "phase_ci95_rad", None)),
        "ftf_re": _num(ftf_c.real) if ftf_c is not None else None,
        "ftf_im": _num(ftf_c.imag) if ftf_c is not None else None,
        "quality": {str(k): _num(v) for k, v in dict(quality).items()},
        "warnings": [str(w) for w in (getattr(result, "warnings", ()) or ())],
    }


def transfer_info(ev: TransferMeasured) -> str:
    """The pre-scan as one JSON text for run_info["prescan"] (non-finite numbers as null)."""
    def clean(values: Any) -> list[float | None]:
        return [float(v) if np.isfinite(v) else None for v in values]
    return json.dumps({"skipped": ev.skipped, "duration_s": ev.duration_s, "peak_drive_v": ev.peak_drive_v,
                       "total_ratio": ev.total_ratio, "levels": ev.levels, "freqs_hz": clean(ev.freqs_hz),
                       "ratio_per_volt": clean(ev.ratio_per_volt), "rel_sigma": clean(ev.rel_sigma),
                       "phase_rad": clean(ev.phase_rad), "wall_time_s": ev.wall_time_s})


def plan_points(plan: Any) -> list[tuple[int, float, float]]:
    """(index, freq_hz, target_ratio) of each planned point, read defensively from a Plan."""
    pts = getattr(plan, "points", None)
    if callable(pts):
        pts = pts()
    out = []
    for i, p in enumerate(pts or ()):
        freq = _num(getattr(p, "freq_hz", None))
        ratio = _num(next((getattr(p, k) for k in ("target_ratio", "amplitude_ratio", "amplitude")
                           if hasattr(p, k)), None))
        if freq is not None and ratio is not None:
            out.append((int(getattr(p, "index", i)), freq, ratio))
    return out


def record_file_name(point_index: int, attempt_number: int, copy: int = 1) -> str:
    """``point0007-attempt02.h5`` for point 7's second attempt (numbers from 1, as people read them);
    ``copy`` > 1 appends ``-<copy>`` when an unindexed file left by a kill already has the name.
    Runs written before this scheme have ``p<index from 0>-<attempt id>.h5``; readers take the
    name from the index (or any ``*.h5`` in records/), never from the pattern."""
    return f"point{point_index + 1:04d}-attempt{attempt_number:02d}{f'-{copy}' if copy > 1 else ''}.h5"


def _copy_snapshot(src: Path, dst: Path) -> None:
    """Copy a text file into the run atomically; an existing different snapshot is an error."""
    text = src.read_bytes()
    if dst.exists():
        if dst.read_bytes() != text:
            raise RunFolderError(f"{dst}: the run already holds a different {dst.name}; a run keeps the "
                                 f"files it was started with (use a new run folder, or reprocess-run)")
        return
    tmp = dst.with_name(f".tmp-{dst.name}.part")
    tmp.write_bytes(text)
    tmp.replace(dst)


class RunWriter:
    """Stores one run; see the module docstring. Subscribe it with ``bus.subscribe(writer)``."""

    def __init__(self, run_dir: str | Path, rig_path: str | Path, plan_path: str | Path, bus: EventBus,
                 scenario_path: str | Path | None = None, options: dict[str, Any] | None = None) -> None:
        self.run_dir = Path(run_dir)
        self._rig_source = Path(rig_path)
        self.records_dir = self.run_dir / RECORDS_DIR
        self.index_path = self.run_dir / index.INDEX_NAME
        self.bus = bus
        self._queue: queue.Queue[Any] = queue.Queue()
        self._thread: threading.Thread | None = None
        self._fault: str | None = None
        self._fault_lock = threading.Lock()
        self._lock_fd: int | None = None
        self.stored: list[str] = []
        try:
            self.records_dir.mkdir(parents=True, exist_ok=True)
            snapshots = {"rig": (Path(rig_path), SNAPSHOT_RIG), "plan": (Path(plan_path), SNAPSHOT_PLAN)}
            if scenario_path is not None:
                src = Path(scenario_path)
                snapshots["scenario"] = (src, f"{SNAPSHOT_SCENARIO}{src.suffix or '.txt'}")
            calibration = named_calibration(Path(rig_path))
            if calibration is not None:      # the run keeps the calibration it was measured with
                snapshots["calibration"] = (calibration, SNAPSHOT_CALIBRATION)
            self._lock_fd = hold_writer_lock(self.run_dir)
            info: dict[str, Any] = {"tool_version": __version__}
            contents: dict[str, bytes] = {}
            for key, (src, name) in snapshots.items():
                _copy_snapshot(src, self.run_dir / name)
                contents[name] = (self.run_dir / name).read_bytes()
                info[f"{key}_snapshot"] = name
                info.setdefault(f"{key}_source", str(src.resolve()))
                info[f"{key}_sha256"] = hashlib.sha256(contents[name]).hexdigest()
            fsync_dir(self.run_dir)
            index.create(self.index_path)
            conn = index.connect(self.index_path)
            try:
                with conn:
                    old = index.get_info(conn)
                    # the snapshots' names, sources and hashes are fixed when the run is created:
                    # a changed snapshot is only ever recorded as a change (index.accept_snapshot_changes)
                    keep = ("_source", "_sha256", "_snapshot")
                    info = {k: v for k, v in info.items() if not (k.endswith(keep) and k in old)}
                    if "created_wall_s" not in old:
                        info["created_wall_s"] = repr(time.time())
                    index.set_info(conn, {**info, **{k: str(v) for k, v in (options or {}).items()}})
                    # the creation text, kept so that a later change can be named key by key
                    # (a run made before this table existed gets it while its snapshot is unchanged)
                    created = {}
                    for key, (_, name) in snapshots.items():
                        fixed = old.get(f"{key}_sha256") or info.get(f"{key}_sha256")
                        if fixed == hashlib.sha256(contents[name]).hexdigest():
                            created[name] = contents[name]
                    index.record_creation_snapshots(conn, created)
            finally:
                conn.close()
        except OSError as exc:
            self._release_lock()
            raise RunFolderError(f"{self.run_dir}: cannot create the run folder ({exc})") from None
        except BaseException:
            self._release_lock()
            raise
        self.rig_sha256 = sha256_file(self.run_dir / SNAPSHOT_RIG)
        self._channel_map = self._load_channel_map()
        self._versions = library_versions()

    # -- engine side -------------------------------------------------------------------

    def __call__(self, event: Event) -> None:
        """Engine thread: copy what must be kept and enqueue; no file work here."""
        if isinstance(event, PointSettled):
            self._queue.put(("point", event, np.array(event.record, copy=True)))
        elif isinstance(event, (SweepStarted, FaultRaised, SweepFinished, TransferMeasured)):
            self._queue.put(("event", event, None))

    @property
    def fault(self) -> str | None:
        with self._fault_lock:
            return self._fault

    def start(self) -> "RunWriter":
        if self._thread is None:
            self._thread = threading.Thread(target=self._loop, name="run-writer", daemon=True)
            self._thread.start()
        return self

    def close(self, timeout_s: float = 30.0) -> None:
        """Store everything queued, then stop the thread (waits at most ``timeout_s``)."""
        if self._thread is None:
            self._release_lock()
            return
        self._queue.put(_STOP)
        self._thread.join(timeout_s)
        if self._thread.is_alive():
            self._set_fault(f"storage-writer-stuck: the run writer for {self.run_dir} did not finish "
                            f"within {timeout_s:.0f} s; points still queued may not be stored")
        else:
            self._release_lock()
        self._thread = None

    def _release_lock(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)      # closing the descriptor releases the lock
            self._lock_fd = None

    def note(self, values: dict[str, Any]) -> None:
        """Record extra run facts (back-end, scenario, fast flag) in run_info (caller's thread)."""
        conn = index.connect(self.index_path)
        try:
            with conn:
                index.set_info(conn, {k: str(v) for k, v in values.items()})
        finally:
            conn.close()

    # -- writer thread -------------------------------------------------------------------

    def _load_channel_map(self) -> dict[str, dict[str, Any]]:
        """Roles, units and sensitivities for the records, from the rig file the sweep was started
        with (a calibration file it names by a relative path resolves against it), else from the
        run's snapshot of it."""
        from ..rig import load_rig

        for path in (self._rig_source, self.run_dir / SNAPSHOT_RIG):
            try:
                return channel_map(load_rig(path))
            except FlamebodeError:
                continue
        return {}

    def _set_fault(self, message: str) -> None:
        with self._fault_lock:
            if self._fault is None:
                self._fault = message

    def _loop(self) -> None:
        conn = None
        try:
            conn = index.connect(self.index_path)
            while True:
                item = self._queue.get()
                if item is _STOP:
                    break
                kind, event, data = item
                if kind == "point":
                    self._store_point(conn, event, data)
                else:
                    self._store_event(conn, event)
        except Exception as exc:  # the index itself cannot be opened: fail every point loudly
            self._set_fault(f"storage-index-failed: cannot use the run index {self.index_path}: {exc}")
            self._drain_with_fault()
        finally:
            if conn is not None:
                conn.close()

    def _drain_with_fault(self) -> None:
        while True:
            item = self._queue.get()
            if item is _STOP:
                return
            if item[0] == "point":
                self.bus.acknowledge(item[1].attempt_id, error=self.fault)

    def _store_event(self, conn: Any, event: Event) -> None:
        try:
            with conn:
                if isinstance(event, SweepStarted):
                    # the run's own label and size stay those of its first sweep; a resume or
                    # re-acquire of a few points is recorded as the last sweep beside them
                    old = index.get_info(conn)
                    first = {k: v for k, v in (("run_label", event.run_label), ("n_points", str(event.n_points)))
                             if k not in old}
                    index.set_info(conn, {**first, "backend": event.backend, "identity": event.identity,
                                          "last_sweep_label": event.run_label,
                                          "last_sweep_n_points": str(event.n_points),
                                          "sweep_started_wall_s": repr(event.wall_time_s)})
                    basis = getattr(getattr(event.plan, "amplitude", None), "basis", None)
                    if basis:
                        index.set_info(conn, {"amplitude_basis": str(basis)})
                    index.upsert_points(conn, plan_points(event.plan))
                elif isinstance(event, FaultRaised):
                    index.insert_fault(conn, {k: getattr(event, k) for k in
                                              ("wall_time_s", "name", "message", "action", "advice",
                                               "point_index", "fatal")})
                elif isinstance(event, TransferMeasured):
                    # the pre-scan: duration, level and the transfer (NaN -> null), or why it was skipped
                    index.set_info(conn, {"prescan": transfer_info(event)})
                elif isinstance(event, SweepFinished):
                    index.set_info(conn, {"last_finish_reason": event.reason,
                                          "last_finish_detail": event.detail,
                                          "last_finish_wall_s": repr(event.wall_time_s)})
        except Exception:  # run facts are not points: a failure here must not stop the sweep
            pass

    def _store_point(self, conn: Any, ev: PointSettled, data: np.ndarray) -> None:
        if self.fault is not None:
            self.bus.acknowledge(ev.attempt_id, error=self.fault)
            return
        try:
            number = index.next_seq(conn, int(ev.point_index))
        except Exception:              # an unreadable index fails below, where the fault is named
            number = 1
        name = record_file_name(ev.point_index, number)
        n = 1
        while (self.records_dir / name).exists():  # an unindexed file left by a kill keeps its name
            n += 1
            name = record_file_name(ev.point_index, number, n)
        final = None
        try:
            analysis = analysis_from_result(ev.result)
            attrs = self._record_attrs(ev, data, analysis)
            final, size, digest = write_record(self.records_dir, name, ev.attempt_id, data, attrs)
            row = {"attempt_id": ev.attempt_id, "point_index": int(ev.point_index), "record_file":
                   f"{RECORDS_DIR}/{name}", "record_bytes": size, "record_sha256": digest,
                   "freq_hz": float(ev.freq_hz), "target_ratio": float(ev.target_ratio),
                   "drive_v": float(ev.drive_v), "sample_rate_hz": float(ev.sample_rate_hz),
                   "n_samples": int(data.shape[1]), "overflows": int(ev.overflows), "flags": tuple(ev.flags),
                   "started_wall_s": float(ev.started_wall_s), "recorded_wall_s": float(ev.recorded_wall_s), "stored_wall_s": time.time()}
            analysis.update(rig_path=SNAPSHOT_RIG, rig_sha256=self.rig_sha256, tool_version=__version__)
            with conn:
                # a point the plan did not list (inserted by the engine's refinement) joins the points table
                index.upsert_points(conn, [(int(ev.point_index), float(ev.freq_hz), float(ev.target_ratio))])
                index.insert_attempt(conn, row, analysis)
        except Exception as exc:
            if final is not None:  # renamed but not indexed: remove it so no orphan is left behind
                final.unlink(missing_ok=True)
            self._set_fault(self._fault_message(ev, name, exc))
            self.bus.acknowledge(ev.attempt_id, error=self.fault)
            return
        self.stored.append(ev.attempt_id)
        self.bus.acknowledge(ev.attempt_id)

    def _record_attrs(self, ev: PointSettled, data: np.ndarray, analysis: dict[str, Any]) -> dict[str, Any]:
        chans = tuple(ev.channels)
        cmap = [self._channel_map.get(c, {"role": "unknown", "unit": "V", "sensitivity": 1.0,
                                          "position_m": float("nan")}) for c in chans]
        tuning = np.asarray(ev.tuning, dtype=float).reshape(-1, 3)
        return {
            "attempt_id": ev.attempt_id, "point_index": int(ev.point_index), "freq_hz": float(ev.freq_hz),
            "drive_v": float(ev.drive_v), "target_ratio": float(ev.target_ratio),
            "achieved_ratio": analysis["achieved_ratio"] if analysis["achieved_ratio"] is not None else np.nan,
            "sample_rate_hz": float(ev.sample_rate_hz), "n_samples": int(data.shape[1]),
            "channels": list(chans), "channel_roles": [m["role"] for m in cmap],
            "channel_units": [m["unit"] for m in cmap],
            "channel_sensitivity_v_per_unit": np.array([m["sensitivity"] for m in cmap], dtype=float),
            "channel_position_m": np.array([m["position_m"] for m in cmap], dtype=float),
            "identity": {str(k): str(v) for k, v in dict(ev.identity).items()},
            "library_versions": self._versions, "overflows": int(ev.overflows),
            "started_wall_s": float(ev.started_wall_s), "recorded_wall_s": float(ev.recorded_wall_s),
            "started_utc": datetime.fromtimestamp(ev.started_wall_s, timezone.utc).isoformat(),
            "tuning_drive_v": tuning[:, 0], "tuning_measured_ratio": tuning[:, 1],
            "tuning_window_s": tuning[:, 2], "flags": json.dumps(list(ev.flags)),
            "rig_sha256": self.rig_sha256, "host": platform.node(),
            "analysis": {k: v for k, v in analysis.items()},
        }

    def _fault_message(self, ev: PointSettled, name: str, exc: BaseException) -> str:
        code = getattr(exc, "errno", None)
        text = str(exc)
        full = code in (errno.ENOSPC, errno.EFBIG, errno.EDQUOT) or any(
            s in text for s in ("No space left", "File too large", "errno = 28", "errno = 27", "Disk quota"))
        try:
            free_mb = shutil.disk_usage(self.run_dir).free / 1e6
            free = f"{free_mb:.0f} MB free there now"
        except OSError:
            free = "free space unknown"
        need_mb = 2.0 * ev.record.nbytes / 1e6
        where = self.records_dir / name
        head = "storage-disk-full" if full else "storage-write-failed"
        what = "the disk is full or the file-size limit was reached" if full else f"{type(exc).__name__}: {text}"
        return (f"{head}: could not store point {ev.point_index + 1} (attempt {ev.attempt_id}, {ev.freq_hz:g} Hz) "
                f"to {where}: {what}. Points stored before are intact; the sweep stops. "
                f"Free at least {need_mb:.0f} MB on the disk holding {self.run_dir} ({free}) or fix the "
                f"cause, then continue with `flamebode resume {self.run_dir}`.")


def named_calibration(rig_path: Path) -> Path | None:
    """The calibration file a rig file names (``pressure_calibration``), if it names one that
    exists; read from the file's text (the rig is loaded elsewhere, with its checks)."""
    import tomllib

    from ..calibration_file import resolve_name

    try:
        name = tomllib.loads(rig_path.read_text(encoding="utf-8")).get("pressure_calibration")
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError):
        return None
    if not isinstance(name, str) or not name:
        return None
    p = resolve_name(name, rig_path)
    return p if p.is_file() else None


def writer_for_existing_run(run_dir: str | Path, bus: EventBus) -> RunWriter:
    """A writer that appends to an existing run, using its own snapshots (resume, reacquire).

    Refuses (:class:`index.SnapshotChanged`) while a snapshot differs from the version the run
    accepts; the command accepts a change first when the user asks for it."""
    run = index.require_run_folder(run_dir)
    changes = index.snapshot_changes(run)
    if changes:
        raise index.SnapshotChanged(refusal_message(run, changes))
    scenarios = sorted(run.glob(f"{SNAPSHOT_SCENARIO}.*"))
    return RunWriter(run, run / SNAPSHOT_RIG, run / SNAPSHOT_PLAN, bus,
                     scenario_path=scenarios[0] if scenarios else None)


def refusal_message(run: Path, changes: list[index.SnapshotChange]) -> str:
    lines = "\n".join(f"  - {c.describe()}" for c in changes)
    return (f"{run}: {len(changes)} snapshot(s) changed since the run was created; nothing was measured:\n{lines}\n"
            f"A run keeps the files it was started with. Restore the snapshot, start a new run with the changed "
            f"file, or pass --accept-changed-snapshot to continue with it (the change is recorded in the run).")


# -- the writer lock and leftovers --------------------------------------------------------

LOCK_NAME = "writer.lock"
SET_ASIDE_DIR = "set-aside"


class RunBusy(FlamebodeError):
    """Another process is writing the run."""


def hold_writer_lock(run_dir: Path) -> int:
    """A shared lock on RUN_DIR/writer.lock held by every writer while it is open (released at
    close or when the process dies); :func:`set_aside_leftovers` needs it exclusively."""
    fd = os.open(run_dir / LOCK_NAME, os.O_RDWR | os.O_CREAT, 0o644)
    deadline = time.monotonic() + 5.0
    while fcntl is not None:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
            return fd
        except BlockingIOError:
            if time.monotonic() > deadline:
                os.close(fd)
                raise RunBusy(f"{run_dir}: another command is setting aside leftover files of this run; "
                              f"try again") from None
            time.sleep(0.05)
    return fd


def _exclusive_lock(run: Path) -> int:
    """The run's ``writer.lock`` held exclusively (an open descriptor the caller closes), or
    :class:`RunBusy` when another process is writing the run."""
    fd = os.open(run / LOCK_NAME, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        if fcntl is not None:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        raise RunBusy(f"{run}: a sweep, resume or re-acquire is still writing this run (it holds "
                      f"{run / LOCK_NAME}); wait for it to end or stop it first") from None
    return fd


def ensure_not_busy(run_dir: str | Path) -> None:
    """:class:`RunBusy` when another process is writing the run (it holds ``writer.lock``)."""
    os.close(_exclusive_lock(Path(run_dir)))


def set_aside_leftovers(run_dir: str | Path) -> list[tuple[Path, Path, str]]:
    """Move unfinished ``.part`` files and record files no index row names into RUN_DIR/set-aside/.

    Nothing is deleted: a leftover keeps its name without the leading dot (so it is not hidden),
    with ``-2``, ``-3``... added before the suffix if the name is taken. Refuses
    (:class:`RunBusy`) while a writer holds the run, and moves nothing when the index cannot be
    read. Returns (from, to, what it was) for every file moved."""
    run = Path(run_dir)
    fd = _exclusive_lock(run)
    try:
        try:
            conn = index.connect(run / index.INDEX_NAME, read_only=True, timeout_s=2.0)
            try:
                known = {r["record_file"] for r in conn.execute("SELECT record_file FROM attempts")}
            finally:
                conn.close()
        except index.sqlite3.Error:
            return []
        leftovers = [(f, "unfinished temporary file from an interrupted write (not data)")
                     for f in sorted(run.rglob(".tmp-*")) if f.is_file() and f.name.endswith(".part")
                     and SET_ASIDE_DIR not in f.relative_to(run).parts]
        records = run / RECORDS_DIR
        leftovers += [(f, "record file no index row names (written just before an interruption; its point "
                          "was never acknowledged)")
                      for f in (sorted(records.glob("*.h5")) if records.is_dir() else ())
                      if f.is_file() and f"{RECORDS_DIR}/{f.name}" not in known]
        moved = []
        if leftovers:
            dest_dir = run / SET_ASIDE_DIR
            dest_dir.mkdir(exist_ok=True)
            for f, why in leftovers:
                name = f.name.lstrip(".") or "leftover"
                dest = dest_dir / name
                n = 1
                while dest.exists():
                    n += 1
                    stem, dot, suffix = name.partition(".")
                    dest = dest_dir / f"{stem}-{n}{dot}{suffix}"
                os.rename(f, dest)
                moved.append((f, dest, why))
            fsync_dir(dest_dir)
            for folder in {f.parent for f, _ in leftovers}:
                fsync_dir(folder)
        return moved
    finally:
        os.close(fd)


__all__ = ["RunWriter", "RunFolderError", "writer_for_existing_run", "analysis_from_result",
           "record_file_name", "RECORDS_DIR", "SNAPSHOT_RIG", "SNAPSHOT_PLAN", "SNAPSHOT_SCENARIO",
           "library_versions", "sha256_file", "set_aside_leftovers", "ensure_not_busy", "RunBusy", "SET_ASIDE_DIR", "LOCK_NAME",
           "refusal_message"]
