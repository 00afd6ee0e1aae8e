"""Malformed records never crash the reader or ``flamebode reprocess``.

A valid record is written by the project's own run writer (RunWriter, through synthetic
engine events); each case copies it and mutates one thing: drops, retypes or reshapes an
attribute or the dataset, puts NaN or infinity in, truncates or empties the file, or
replaces it with something that is not HDF5. Every case is either read as a valid record
or refused with a RecordError that names the file (and, where the case is about one
attribute or the dataset, names that too). A sample goes through the real CLI in a
subprocess: exit code 2, no traceback, the file named. CSV text is mutated by a
derandomised hypothesis test (profile in tests/conftest.py).
"""

from __future__ import annotations

import math
import shutil
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import h5py
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from app.cli import main
from app.errors import RecordError
from app.storage.csv_record import read_csv_record
from app.storage.record import DATASET, RECORD_ATTRS, read_record
from storage_synth import CHANNELS, RIG, ROOT, make_record, plan_of, write_run

N_SAMPLES = 2560            # storage_synth: 0.5 s at 5120 Hz
FREQ_HZ = 200.0


@pytest.fixture(scope="module")
def valid_record(tmp_path_factory) -> Path:
    base = tmp_path_factory.mktemp("valid")
    plan = base / "plan.toml"
    plan.write_text('name = "fuzz base"\n')
    writer, _, acks = write_run(base / "run", plan, plan_of([FREQ_HZ]))
    assert acks == [(True, None)] and writer.fault is None
    (record,) = sorted((base / "run" / "records").glob("*.h5"))
    return record


# --- the cases -------------------------------------------------------------------------------

@dataclass(frozen=True)
class Case:
    name: str
    mutate: Callable[[Path], Path]      # gets a copy of the valid record, returns the file to read
    outcome: str                        # "refuse", "accept" or "either"
    mentions: str = ""                  # what a refusal must name besides the file


def _attrs(fn):
    def mutate(p: Path) -> Path:
        with h5py.File(p, "r+") as f:
            fn(f)
        return p
    return mutate


def _set(name, value):
    return _attrs(lambda f: f.attrs.__setitem__(name, value))


def _replace_dataset(data, **ds_attrs):
    def fn(f):
        del f[DATASET]
        ds = f.create_dataset(DATASET, data=data)
        for k, v in ds_attrs.items():
            ds.attrs[k] = v
    return _attrs(fn)


def _attribute_cases() -> list[Case]:
    cases = []
    for name, spec in RECORD_ATTRS.items():
        k = spec.kind
        numeric = k in ("int", "number")
        cases.append(Case(f"{name}: dropped", _attrs(lambda f, n=name: f.attrs.__delitem__(n)),
                          "refuse" if spec.required else "accept", name))
        cases.append(Case(f"{name}: text 'abc'", _set(name, "abc"),
                          "accept" if k == "text" and not spec.choices else "refuse", name))
        cases.append(Case(f"{name}: boolean", _set(name, True), "refuse", name))
        cases.append(Case(f"{name}: empty value", _set(name, h5py.Empty("f8")), "refuse", name))
        cases.append(Case(f"{name}: complex", _set(name, 1 + 2j), "refuse", name))
        if k == "text":
            cases.append(Case(f"{name}: integer", _set(name, 7), "refuse", name))
            cases.append(Case(f"{name}: fixed-length bytes", _set(name, np.bytes_(b"abc")),
                              "refuse" if spec.choices else "accept", name))
            cases.append(Case(f"{name}: list of texts", _set(name, np.array(["a", "b"], dtype=h5py.string_dtype())),
                              "refuse", name))
        if k in ("json_object", "json_list"):
            cases.append(Case(f"{name}: JSON of the other kind", _set(name, "[]" if k == "json_object" else "{}"),
                              "refuse", name))
            cases.append(Case(f"{name}: integer", _set(name, 7), "refuse", name))
        if numeric:
            cases.append(Case(f"{name}: NaN", _set(name, math.nan), "accept" if spec.allow_nan else "refuse", name))
            cases.append(Case(f"{name}: +inf", _set(name, math.inf), "refuse", name))
            cases.append(Case(f"{name}: -inf", _set(name, -math.inf), "refuse", name))
            cases.append(Case(f"{name}: -1", _set(name, -1 if k == "int" else -1.0), "refuse", name))
            cases.append(Case(f"{name}: 1e300", _set(name, 1e300), "refuse", name))
            cases.append(Case(f"{name}: array of 2", _set(name, np.array([1.0, 2.0])), "refuse", name))
            if k == "int":
                cases.append(Case(f"{name}: 1.5", _set(name, 1.5), "refuse", name))
        if k in ("texts", "numbers"):
            cases.append(Case(f"{name}: scalar", _set(name, 1.0 if k == "numbers" else "p1"), "refuse", name))
            cases.append(Case(f"{name}: 2x3 array", _set(name, np.ones((2, 3))), "refuse", name))
            cases.append(Case(f"{name}: one entry short",
                              _attrs(lambda f, n=name: f.attrs.__setitem__(n, f.attrs[n][:-1])), "refuse", name))
        if k == "texts":
            cases.append(Case(f"{name}: numbers", _set(name, np.arange(len(CHANNELS), dtype=float)), "refuse", name))
            cases.append(Case(f"{name}: integer", _set(name, 7), "refuse", name))
        if k == "numbers":
            def nan_entry(f, n=name):
                v = np.array(f.attrs[n], dtype=float)
                v[0] = math.nan
                f.attrs[n] = v
            cases.append(Case(f"{name}: NaN entry", _attrs(nan_entry), "accept" if spec.allow_nan else "refuse",
                              name))
            cases.append(Case(f"{name}: texts", _set(name, np.array(["1"] * len(CHANNELS),
                                                                    dtype=h5py.string_dtype())), "refuse", name))
    return cases


def _dataset_cases() -> list[Case]:
    good = make_record(FREQ_HZ, 0.05, 5120.0, 0.5, seed=0)
    codes = np.round(good * 1000).astype(np.int16)
    nan_at = good.copy()
    nan_at[2, 100] = math.nan
    inf_at = good.copy()
    inf_at[4, 0] = math.inf
    huge = good.copy()
    huge[0, 7] = 1e300
    compound = np.zeros((6, N_SAMPLES), dtype=[("a", "f8"), ("b", "i4")])

    def group_instead(f):
        del f[DATASET]
        f.create_group(DATASET)

    def no_record_group(f):
        del f["record"]

    def soft_link_nowhere(f):
        del f[DATASET]
        f["record"]["volts"] = h5py.SoftLink("/nowhere")

    def external_link_nowhere(f):
        del f[DATASET]
        f["record"]["volts"] = h5py.ExternalLink("missing-file.h5", "/record/volts")

    def chunked_unallocated(f):
        del f[DATASET]
        f.create_dataset(DATASET, shape=(6, N_SAMPLES), dtype="f8", chunks=(1, 256))  # no data: fill value 0

    return [
        Case("dataset: a group", _attrs(group_instead), "refuse", DATASET),
        Case("dataset: missing", _attrs(lambda f: f.__delitem__(DATASET)), "refuse", DATASET),
        Case("dataset: no 'record' group", _attrs(no_record_group), "refuse", DATASET),
        Case("dataset: soft link to nothing", _attrs(soft_link_nowhere), "refuse", DATASET),
        Case("dataset: external link to a missing file", _attrs(external_link_nowhere), "refuse", DATASET),
        Case("dataset: text", _replace_dataset(np.full((6, N_SAMPLES), "a", dtype=h5py.string_dtype())),
             "refuse", DATASET),
        Case("dataset: fixed-length bytes", _replace_dataset(np.full((6, N_SAMPLES), b"1.0")), "refuse", DATASET),
        Case("dataset: complex", _replace_dataset(good.astype(complex)), "refuse", DATASET),
        Case("dataset: booleans", _replace_dataset(good > 0), "refuse", DATASET),
        Case("dataset: compound", _replace_dataset(compound), "refuse", DATASET),
        Case("dataset: int16 without a scale", _replace_dataset(codes), "refuse", "volts_per_count"),
        Case("dataset: uint16 without a scale", _replace_dataset(codes.astype(np.uint16)), "refuse", "volts_per_count"),
        Case("dataset: int16 with volts_per_count", _replace_dataset(codes, volts_per_count=1e-3), "accept"),
        Case("dataset: int16 with one scale per channel",
             _replace_dataset(codes, volts_per_count=np.full(6, 1e-3)), "accept"),
        Case("dataset: int16 with scale 0", _replace_dataset(codes, volts_per_count=0.0), "refuse", "volts_per_count"),
        Case("dataset: int16 with scale NaN", _replace_dataset(codes, volts_per_count=math.nan), "refuse",
             "volts_per_count"),
        Case("dataset: int16 with scale text", _replace_dataset(codes, volts_per_count="1 mV"), "refuse",
             "volts_per_count"),
        Case("dataset: int16 with 5 scales", _replace_dataset(codes, volts_per_count=np.full(5, 1e-3)), "refuse",
             "volts_per_count"),
        Case("dataset: int16 with units V", _replace_dataset(codes, volts_per_count=1e-3, units="V"), "refuse",
             "units"),
        Case("dataset: float with volts_per_count", _replace_dataset(good, volts_per_count=1e-3), "refuse",
             "volts_per_count"),
        Case("dataset: units Pa", _replace_dataset(good, units="Pa"), "refuse", "units"),
        Case("dataset: units an integer", _replace_dataset(good, units=3), "refuse", "units"),
        Case("dataset: float32", _replace_dataset(good.astype(np.float32), units="V"), "accept"),
        Case("dataset: float16", _replace_dataset(good.astype(np.float16)), "accept"),
        Case("dataset: 1-D", _replace_dataset(good[0]), "refuse", DATASET),
        Case("dataset: 3-D", _replace_dataset(good[None]), "refuse", DATASET),
        Case("dataset: scalar", _replace_dataset(np.float64(1.0)), "refuse", DATASET),
        Case("dataset: transposed", _replace_dataset(good.T.copy()), "refuse", DATASET),
        Case("dataset: 5 rows for 6 channels", _replace_dataset(good[:5]), "refuse", DATASET),
        Case("dataset: 7 rows for 6 channels", _replace_dataset(np.vstack([good, good[:1]])), "refuse", DATASET),
        Case("dataset: 10 samples", _replace_dataset(good[:, :10]), "refuse", DATASET),
        Case("dataset: 0 samples", _replace_dataset(good[:, :0]), "refuse", DATASET),
        Case("dataset: fewer samples than n_samples", _replace_dataset(good[:, :2000]), "refuse", "n_samples"),
        Case("dataset: NaN at p3 sample 100", _replace_dataset(nan_at), "refuse", "channel 'p3': 1 sample(s), "
             "the first at sample 100"),
        Case("dataset: +inf at pmt sample 0", _replace_dataset(inf_at), "refuse", "channel 'pmt': 1 sample(s), "
             "the first at sample 0"),
        Case("dataset: 1e300 V at p1 sample 7", _replace_dataset(huge), "refuse", "channel 'p1'"),
        Case("dataset: all NaN", _replace_dataset(np.full((6, N_SAMPLES), math.nan)), "refuse",
             "channel 'drv_ref': 2560 sample(s)"),
        Case("dataset: chunked, never written (fill value)", _attrs(chunked_unallocated), "accept"),
    ]


def _truncate(fraction: float):
    def mutate(p: Path) -> Path:
        data = p.read_bytes()
        p.write_bytes(data[:int(len(data) * fraction)])
        return p
    return mutate


def _write(data: bytes, name: str | None = None):
    def mutate(p: Path) -> Path:
        q = p.with_name(name) if name else p
        if name:
            p.unlink()
        q.write_bytes(data)
        return q
    return mutate


def _flip_byte(fraction: float):
    def mutate(p: Path) -> Path:
        data = bytearray(p.read_bytes())
        data[int(len(data) * fraction)] ^= 0xFF
        p.write_bytes(bytes(data))
        return p
    return mutate


def _empty_hdf5(p: Path) -> Path:
    p.unlink()
    with h5py.File(p, "w"):
        pass
    return p


def _directory(p: Path) -> Path:
    p.unlink()
    p.mkdir()
    return p


def _file_cases() -> list[Case]:
    rng = np.random.default_rng(11)
    csv_text = ("time_s," + ",".join(CHANNELS) + "\n" + "0,1,2,3,4,5,6\n" * 20).encode()
    cases = [
        Case("file: zero bytes", _write(b""), "refuse", "empty file"),
        Case("file: CSV text named .h5", _write(csv_text), "refuse", "not an HDF5 file"),
        Case("file: random bytes", _write(rng.bytes(4096)), "refuse", "not an HDF5 file"),
        Case("file: HDF5 signature then junk", _write(b"\x89HDF\r\n\x1a\n" + rng.bytes(4096)), "refuse", "damaged"),
        Case("file: empty HDF5 file", _empty_hdf5, "refuse", "not a flamebode record"),
        Case("file: a directory", _directory, "refuse", "not a regular file"),
        Case("file: interrupted write (.part)", lambda p: shutil.move(p, p.with_name(".tmp-x.h5.part")) or
             p.with_name(".tmp-x.h5.part"), "refuse", "temporary file"),
        Case("file: format other", _set("format", "other-record"), "refuse", "not a flamebode record"),
        Case("file: format_version 99", _set("format_version", 99), "refuse", "newer flamebode"),
        Case("file: format_version 0", _set("format_version", 0), "refuse", "format_version"),
        Case("file: format_version '1'", _set("format_version", "1"), "refuse", "format_version"),
        Case("file: freq_hz above half the sample rate", _set("freq_hz", 3000.0), "refuse", "freq_hz"),
        Case("file: duplicate channel names",
             _set("channels", np.array(["p1"] * 6, dtype=h5py.string_dtype())), "refuse", "duplicate"),
        Case("file: an empty channel name",
             _set("channels", np.array(["p1", "p2", "p3", "p4", "", "drv_ref"], dtype=h5py.string_dtype())),
             "refuse", "channels"),
        Case("file: tuning history lengths differ",
             _attrs(lambda f: f.attrs.__setitem__("tuning_window_s", np.array([0.5]))), "refuse", "tuning"),
    ]
    for frac in (0.0005, 0.01, 0.1, 0.5, 0.9, 0.99, 0.999):
        cases.append(Case(f"file: truncated to {frac:.1%}", _truncate(frac), "refuse"))
    for frac in (0.2, 0.5, 0.8):
        cases.append(Case(f"file: one byte flipped at {frac:.0%}", _flip_byte(frac), "either"))
    return cases


CASES = _attribute_cases() + _dataset_cases() + _file_cases()


def test_there_are_enough_malformed_records():
    assert sum(c.outcome != "accept" for c in CASES) >= 100


def test_the_format_table_covers_every_attribute_the_writer_writes(valid_record):
    with h5py.File(valid_record, "r") as f:
        written = set(f.attrs)
    assert written == set(RECORD_ATTRS)


def _apply(case: Case, valid: Path, folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    copy = folder / f"case-{CASES.index(case):03d}.h5"
    shutil.copyfile(valid, copy)
    return case.mutate(copy)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_malformed_record_is_read_or_refused_naming_the_file(case, valid_record, tmp_path):
    path = _apply(case, valid_record, tmp_path)
    try:
        rec = read_record(path)
    except RecordError as exc:
        assert case.outcome != "accept", f"refused a valid record: {exc}"
        msg = str(exc)
        assert msg.startswith(str(path)), msg
        assert case.mentions in msg, msg
        return
    assert case.outcome != "refuse", "accepted a malformed record"
    assert rec.data.shape == (len(CHANNELS), N_SAMPLES) and rec.channels == CHANNELS
    assert np.isfinite(rec.data).all() and rec.data.dtype.kind == "f"


def test_integer_codes_are_scaled_to_volts(valid_record, tmp_path):
    codes = np.arange(6 * N_SAMPLES, dtype=np.int16).reshape(6, N_SAMPLES) % 2000 - 1000
    path = tmp_path / "codes.h5"
    shutil.copyfile(valid_record, path)
    _replace_dataset(codes, volts_per_count=np.array([1e-3, 2e-3, 1e-3, 1e-3, 5e-3, 1e-3]), units="count")(path)
    rec = read_record(path)
    np.testing.assert_allclose(rec.data[1], codes[1] * 2e-3)
    np.testing.assert_allclose(rec.data[4], codes[4] * 5e-3)


def test_a_record_too_big_for_memory_is_not_read(valid_record, tmp_path, monkeypatch):
    import app.storage.record as record

    monkeypatch.setattr(record, "_memory_bytes", lambda: 100_000)    # 6 x 2560 float64 = 123 kB > half
    with pytest.raises(RecordError, match="more than half this computer's memory"):
        read_record(valid_record)


def test_a_damaged_record_in_a_run_without_index_is_a_problem_not_a_crash(valid_record, tmp_path):
    from app.storage.reader import open_run

    run = valid_record.parent.parent
    copy = tmp_path / "run"
    shutil.copytree(run, copy)
    (copy / "index.sqlite").unlink()
    for extra in copy.glob("index.sqlite-*"):
        extra.unlink()
    rec = next((copy / "records").glob("*.h5"))
    _set("point_index", "three")(rec)
    r = open_run(copy)
    assert r.attempts == []
    assert any(str(rec) in p and "point_index" in p for p in r.problems), r.problems


# --- through the real CLI --------------------------------------------------------------------

# the reported tracebacks and acceptances first, then every 40th other refusal
REPORTED = ["channels: integer", "sample_rate_hz: dropped", "sample_rate_hz: text 'abc'", "freq_hz: dropped",
            "freq_hz: text 'abc'", "dataset: a group", "dataset: text", "file: format_version 99",
            "dataset: int16 without a scale", "dataset: complex", "dataset: NaN at p3 sample 100",
            "file: zero bytes", "file: CSV text named .h5", "file: truncated to 50.0%", "file: a directory",
            "dataset: 5 rows for 6 channels"]
CLI_SAMPLE = [c for c in CASES if c.name in REPORTED] + \
    [c for c in CASES if c.outcome == "refuse" and c.name not in REPORTED][::40]


def _cli(path: Path, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "app.cli", "reprocess", str(path), "--rig", str(RIG), *extra],
                          capture_output=True, text=True, cwd=ROOT, timeout=120)


@pytest.mark.slow
def test_cli_refuses_a_sample_of_malformed_records_plainly(valid_record, tmp_path):
    assert len(CLI_SAMPLE) == len(REPORTED) + 7
    paths = [_apply(c, valid_record, tmp_path / f"c{i}") for i, c in enumerate(CLI_SAMPLE)]
    with ThreadPoolExecutor(max_workers=3) as pool:
        results = list(pool.map(_cli, [valid_record] + paths))
    ok = results[0]
    assert ok.returncode == 0, ok.stderr
    for case, path, res in zip(CLI_SAMPLE, paths, results[1:]):
        assert res.returncode == 2, (case.name, res.returncode, res.stderr)
        assert "Traceback" not in res.stderr, (case.name, res.stderr)
        assert str(path) in res.stderr and case.mentions in res.stderr, (case.name, res.stderr)


# --- CSV text mutations ----------------------------------------------------------------------

def _valid_csv_text() -> str:
    data = make_record(FREQ_HZ, 0.05, 5120.0, 0.08, seed=3)      # 409 samples, 16 periods
    t = np.arange(data.shape[1]) / 5120.0
    rows = [",".join(f"{v:.6E}" for v in row) for row in np.column_stack([t, data.T])]
    return "\n".join(["time_s," + ",".join(CHANNELS)] + rows) + "\n"


VALID_CSV = _valid_csv_text()
PIECES = ["", ",", "\n", "\r\n", "-", ".", "e", "E+99", "1e999", "nan", "inf", "-inf", "0", "9" * 40, " ",
          "\ufeff", "\x00", "é", '"', "time_s", "p1", ";", "\t", "1e-300", "1e295"]


@st.composite
def csv_mutations(draw):
    text = VALID_CSV
    for _ in range(draw(st.integers(1, 3))):
        op = draw(st.sampled_from(["insert", "delete", "cell", "drop_line", "dup_line", "swap", "truncate",
                                   "header"]))
        lines = text.split("\n")
        if op == "insert":
            pos = draw(st.integers(0, len(text)))
            text = text[:pos] + draw(st.sampled_from(PIECES) | st.text(max_size=5)) + text[pos:]
        elif op == "delete":
            pos = draw(st.integers(0, len(text)))
            text = text[:pos] + text[pos + draw(st.integers(1, 30)):]
        elif op == "cell" and len(lines) > 2:
            k = draw(st.integers(1, len(lines) - 2))
            cells = lines[k].split(",")
            cells[draw(st.integers(0, len(cells) - 1))] = draw(st.sampled_from(PIECES) | st.text(max_size=8))
            lines[k] = ",".join(cells)
            text = "\n".join(lines)
        elif op == "drop_line" and len(lines) > 1:
            del lines[draw(st.integers(0, len(lines) - 1))]
            text = "\n".join(lines)
        elif op == "dup_line" and len(lines) > 1:
            k = draw(st.integers(0, len(lines) - 1))
            lines.insert(k, lines[k])
            text = "\n".join(lines)
        elif op == "swap" and len(lines) > 2:
            a, b = draw(st.integers(0, len(lines) - 1)), draw(st.integers(0, len(lines) - 1))
            lines[a], lines[b] = lines[b], lines[a]
            text = "\n".join(lines)
        elif op == "truncate":
            text = text[:draw(st.integers(0, len(text)))]
        elif op == "header":
            lines[0] = draw(st.sampled_from(["", "time_s", "time_s,p1,p1,p3,p4,pmt,drv_ref", "t,p1,p2,p3,p4,pmt",
                                             "time_s,,p2,p3,p4,pmt,drv_ref", "time_s,P1,P2,P3,P4,PMT,DRV"]))
            text = "\n".join(lines)
    raw = text.encode("utf-8", "surrogatepass")
    if draw(st.booleans()):
        pos = draw(st.integers(0, len(raw)))
        raw = raw[:pos] + draw(st.sampled_from([b"\xff", b"\xc3", b"\x89HDF\r\n\x1a\n", b"\xef\xbb\xbf"])) + raw[pos:]
    return raw


def test_the_unmutated_csv_is_valid(tmp_path, capsys):
    path = tmp_path / "valid.csv"
    path.write_text(VALID_CSV)
    assert read_csv_record(path).data.shape == (6, 409)
    assert main(["reprocess", str(path), "--rig", str(RIG), "--freq-hz", str(FREQ_HZ)]) == 0


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                    HealthCheck.too_slow])
@given(raw=csv_mutations())
def test_mutated_csv_is_read_or_refused_naming_the_file(raw, tmp_path, capsys):
    path = tmp_path / "mutated.csv"
    path.write_bytes(raw)
    try:
        rec = read_csv_record(path)
    except RecordError as exc:
        assert str(exc).startswith(str(path)), str(exc)
    else:
        assert np.isfinite(rec.data).all() and 1.0 <= rec.sample_rate_hz <= 1e8
    code = main(["reprocess", str(path), "--rig", str(RIG), "--freq-hz", str(FREQ_HZ)])
    err = capsys.readouterr().err
    assert code in (0, 2), err
    if code == 2:
        assert err.startswith("flamebode reprocess: ") and "Traceback" not in err


# --- reprocess-run over a run holding one malformed record ---------------------------------------

def test_reprocess_run_names_a_malformed_record_and_keeps_everything(tmp_path):
    import sqlite3

    from app.storage.record import file_digest

    plan = tmp_path / "plan.toml"
    plan.write_text('name = "reprocess-run fuzz"\n')
    run = tmp_path / "run"
    write_run(run, plan, plan_of([100.0, 200.0, 300.0]))
    con = sqlite3.connect(run / "index.sqlite")
    aid, rel = con.execute("SELECT attempt_id, record_file FROM attempts WHERE point_index = 1").fetchone()
    # a record written malformed (its hash in the index matches, so only the reader can tell)
    _set("sample_rate_hz", "fast")(run / rel)
    size, digest = file_digest(run / rel)
    with con:
        con.execute("UPDATE attempts SET record_bytes = ?, record_sha256 = ? WHERE attempt_id = ?", (size, digest, aid))
    n_analyses = con.execute("SELECT COUNT(*) FROM analyses").fetchone()[0]
    con.close()
    res = subprocess.run([sys.executable, "-m", "app.cli", "reprocess-run", str(run), "--rig", str(RIG)],
                         capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert res.returncode == 1, res.stdout + res.stderr
    assert "Traceback" not in res.stderr + res.stdout
    assert (f"point 2 attempt {aid}: not reprocessed: {run / rel}: attribute 'sample_rate_hz': found the text "
            f"'fast'") in res.stdout
    assert "2 attempt(s) reprocessed" in res.stdout and f"1 attempt(s) not reprocessed (point 2 attempt {aid})" \
        in res.stdout
    assert file_digest(run / rel) == (size, digest)               # the record itself untouched
    con = sqlite3.connect(run / "index.sqlite")
    assert con.execute("SELECT COUNT(*) FROM analyses").fetchone()[0] == n_analyses + 2
    con.close()
