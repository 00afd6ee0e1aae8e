"""CSV records as another acquisition program writes them: 7 significant digits, BOM, CRLF.

Files are written with numpy.savetxt(fmt="%.6E") — scientific notation with 7 significant
digits, as many acquisition programs export — behind a UTF-8 byte-order mark, with CRLF
line ends and a header row. Uniform sampling must be accepted and its rate found from all
stamps; a missing, repeated or drifting sample must be refused, and no refusal of a
uniformly sampled file may tell the user to resample.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pytest

from app.errors import RecordError
from app.storage.csv_record import read_csv_record, resolution_s
from storage_synth import CHANNELS

BOM = b"\xef\xbb\xbf"


def write_like_another_program(path: Path, t: np.ndarray, fmt: str = "%.6E", bom: bool = True,
                               crlf: bool = True, seed: int = 0) -> Path:
    rng = np.random.default_rng(seed)
    table = np.column_stack([t, 0.1 * rng.standard_normal((t.size, len(CHANNELS)))])
    buf = io.StringIO()
    np.savetxt(buf, table, fmt=fmt, delimiter=",", header="time_s," + ",".join(CHANNELS), comments="",
               newline="\r\n" if crlf else "\n")
    path.write_bytes((BOM if bom else b"") + buf.getvalue().encode("utf-8"))
    return path


def grid(fs: float, seconds: float, start_s: float = 0.0) -> np.ndarray:
    return start_s + np.arange(int(round(fs * seconds))) / fs


def test_the_file_really_looks_like_another_programs_export(tmp_path):
    raw = write_like_another_program(tmp_path / "a.csv", grid(25600.0, 2.0)).read_bytes()
    assert raw.startswith(BOM + b"time_s,p1,") and b"\r\n" in raw
    assert b"\r\n1.000000E+00," in raw                       # 7 significant digits


@pytest.mark.parametrize("fs, seconds, start_s", [
    (25600.0, 2.0, 0.0),        # stamps above 1 s are rounded to 1 us, 2.6 % of a step: refused before
    (12800.0, 1.0, 0.0),
    (51200.0, 1.0, 10.0),       # rounded to 10 us, 0.51 of a step
    (48000.0, 0.5, 20.0),
])
def test_seven_digit_stamps_of_uniform_sampling_are_accepted_with_the_exact_rate(tmp_path, fs, seconds, start_s):
    rec = read_csv_record(write_like_another_program(tmp_path / "a.csv", grid(fs, seconds, start_s)))
    # least squares through all stamps: the rounding (±5e-6 s at most) averages out
    assert rec.sample_rate_hz == pytest.approx(fs, rel=1e-7)
    assert rec.channels == CHANNELS and rec.data.shape == (6, int(round(fs * seconds)))


def test_lf_without_bom_is_read_too(tmp_path):
    rec = read_csv_record(write_like_another_program(tmp_path / "a.csv", grid(12800.0, 0.5), bom=False, crlf=False))
    assert rec.sample_rate_hz == pytest.approx(12800.0, rel=1e-9)


@pytest.mark.parametrize("fmt", ["%.9g", "%.8f", "%.10E"])
def test_other_printings_of_uniform_stamps_are_accepted(tmp_path, fmt):
    rec = read_csv_record(write_like_another_program(tmp_path / "a.csv", grid(12800.0, 0.5), fmt=fmt))
    assert rec.sample_rate_hz == pytest.approx(12800.0, rel=1e-6)


@pytest.mark.parametrize("fs, start_s", [(25600.0, 0.0), (51200.0, 10.0)])    # rounding 0.03 and 0.51 of a step
@pytest.mark.parametrize("where", ["second", "third", "a third in", "middle", "third last"])
def test_a_missing_row_is_refused_even_through_the_rounding(tmp_path, fs, start_s, where):
    t = grid(fs, 1.0, start_s)
    k = {"second": 1, "third": 2, "a third in": t.size // 3, "middle": t.size // 2, "third last": t.size - 3}[where]
    path = write_like_another_program(tmp_path / "a.csv", np.delete(t, k))
    with pytest.raises(RecordError, match="uneven time steps") as err:
        read_csv_record(path)
    assert str(path) in str(err.value)
    assert f"line {k + 1} to line {k + 2}" in str(err.value) and "1 sample(s) seem to be missing" in str(err.value)


def test_a_repeated_row_is_refused(tmp_path):
    t = grid(25600.0, 0.5)
    path = write_like_another_program(tmp_path / "a.csv", np.insert(t, 500, t[500]))
    with pytest.raises(RecordError, match="repeated"):
        read_csv_record(path)


def test_a_drifting_rate_is_refused(tmp_path):
    i = np.arange(25600)
    t = i / 25600.0 * (1 + 1e-3 * i / i.size)          # the clock slows by 0.1 % over the record
    with pytest.raises(RecordError, match="drifts during the record"):
        read_csv_record(write_like_another_program(tmp_path / "a.csv", t, fmt="%.9E"))


def test_stamps_too_coarse_to_judge_ask_for_more_digits_not_for_resampling(tmp_path):
    # at 100 s, 7 significant digits round to 0.1 ms, five sample steps at 51.2 kHz
    path = write_like_another_program(tmp_path / "a.csv", grid(51200.0, 0.2, 100.0))
    with pytest.raises(RecordError) as err:
        read_csv_record(path)
    msg = str(err.value)
    assert "printed too coarsely" in msg and "at least 8 significant digits (e.g. %.7E)" in msg
    assert "resample" not in msg
    # ... and with the digits it asks for, the same sampling is accepted
    rec = read_csv_record(write_like_another_program(tmp_path / "b.csv", grid(51200.0, 0.2, 100.0), fmt="%.7E"))
    assert rec.sample_rate_hz == pytest.approx(51200.0, rel=1e-7)


def test_no_refusal_of_uniform_data_says_resample(tmp_path):
    for n, (fs, start) in enumerate([(51200.0, 100.0), (51200.0, 1000.0), (1e6, 5.0)]):
        path = write_like_another_program(tmp_path / f"{n}.csv", grid(fs, 0.05, start))
        try:
            read_csv_record(path)
        except RecordError as exc:
            assert "resample" not in str(exc)


@pytest.mark.parametrize("step_s, expected", [
    (1e295, "a sample rate of 1e-295 Hz"),
    (1e-12, "a sample rate of 1e+12 Hz"),
])
def test_absurd_time_steps_are_refused_naming_the_rate(tmp_path, step_s, expected):
    path = write_like_another_program(tmp_path / "a.csv", np.arange(2000) * step_s, fmt="%.9E")
    with pytest.raises(RecordError, match="expected 1 to 1e\\+08 Hz") as err:
        read_csv_record(path)
    assert expected in str(err.value)


def test_a_quoted_header_behind_a_bom_is_read(tmp_path):
    path = write_like_another_program(tmp_path / "a.csv", grid(12800.0, 0.1))
    raw = path.read_bytes().replace(b"time_s,p1,", b'"time_s","p1",', 1)
    path.write_bytes(raw)
    assert read_csv_record(path).channels == CHANNELS


def test_absurd_voltages_are_refused_naming_line_and_column(tmp_path):
    path = write_like_another_program(tmp_path / "a.csv", grid(12800.0, 0.1))
    lines = path.read_text(encoding="utf-8-sig").splitlines()
    cells = lines[9].split(",")
    cells[3] = "1.0E+300"
    lines[9] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(RecordError, match="line 10, column 'p3'"):
        read_csv_record(path)


@pytest.mark.parametrize("text, res, digits", [
    ("1.234567E+00", 1e-6, 7), ("0.25", 0.01, 2), ("-3.5e-3", 1e-4, 2), ("12", 1.0, 2), ("+4.50E+01", 0.1, 3),
])
def test_printed_resolution(text, res, digits):
    got_res, got_digits = resolution_s(text)
    assert got_res == pytest.approx(res) and got_digits == digits


@pytest.mark.parametrize("cell", ["nan", "inf", "-inf", "1e999"])
def test_non_finite_samples_are_refused_naming_line_and_column(tmp_path, cell):
    path = write_like_another_program(tmp_path / "a.csv", grid(12800.0, 0.1))
    lines = path.read_text(encoding="utf-8-sig").splitlines()
    cells = lines[20].split(",")
    cells[5] = cell
    lines[20] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(RecordError, match=r"line 21 \(sample 19\), column 'pmt' is not a finite number \(1 such cell"):
        read_csv_record(path)
