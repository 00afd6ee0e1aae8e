"""Writing a measured dark offset into the rig file keeps the file as the lab keeps it: its line
endings, its permissions, a symbolic link to it, a spaced [ light ] header; a layout it cannot
edit in place is refused with a message, the file untouched (common practice: a tool that edits a
hand-kept configuration file changes the values it was asked to and nothing else)."""

from __future__ import annotations

import os
import stat
import tomllib
from pathlib import Path

import pytest

from app.rig import load_rig
from app.services.commissioning import CommissionError, update_rig_dark_offset

ROOT = Path(__file__).resolve().parents[2]
DATE = "2026-12-04T10:00:00Z"


def _copy(tmp_path: Path, transform=lambda t: t, name: str = "rig.toml") -> Path:
    p = tmp_path / name
    p.write_bytes(transform((ROOT / "configs" / "demo-rig.toml").read_text(encoding="utf-8")).encode("utf-8"))
    return p


def _light(p: Path) -> dict:
    return tomllib.loads(p.read_bytes().decode("utf-8").replace("\r\n", "\n"))["light"]


def test_the_values_land_in_light_and_the_rig_still_loads(tmp_path):
    p = _copy(tmp_path)
    before = p.read_text().splitlines()
    update_rig_dark_offset(p, 0.0213, 4.2e-6, DATE)
    assert _light(p)["dark_offset"] == "21.3 mV" and _light(p)["dark_offset_uncertainty"] == "0.0042 mV"
    assert load_rig(p).light.dark_offset == pytest.approx(0.0213)
    after = p.read_text().splitlines()
    changed = [line for line in after if line not in before]
    assert all(line.startswith("dark_offset") for line in changed)      # nothing else touched


def test_crlf_line_endings_stay_crlf(tmp_path):
    p = _copy(tmp_path, lambda t: t.replace("\n", "\r\n"))
    update_rig_dark_offset(p, 0.0213, 4.2e-6, DATE)
    raw = p.read_bytes()
    assert raw.count(b"\n") == raw.count(b"\r\n")                       # no bare LF slipped in
    assert _light(p)["dark_offset"] == "21.3 mV"


def test_permissions_and_a_symbolic_link_are_kept(tmp_path):
    real = _copy(tmp_path, name="real-rig.toml")
    os.chmod(real, 0o640)
    link = tmp_path / "rig.toml"
    link.symlink_to(real.name)
    update_rig_dark_offset(link, 0.0213, 4.2e-6, DATE)
    assert link.is_symlink() and link.resolve() == real.resolve()
    assert stat.S_IMODE(real.stat().st_mode) == 0o640
    assert _light(real)["dark_offset"] == "21.3 mV"


def test_a_spaced_table_header_is_found(tmp_path):
    p = _copy(tmp_path, lambda t: t.replace("[light]", "[ light ]", 1))
    update_rig_dark_offset(p, 0.0213, 4.2e-6, DATE)
    assert _light(p)["dark_offset"] == "21.3 mV"


def test_dotted_keys_are_refused_and_the_file_is_left_as_it_was(tmp_path):
    def dotted(text: str) -> str:
        head, rest = text.split("[light]\n", 1)
        body, tail = (rest.split("\n[", 1) + [""])[:2]
        keys = "".join(f"light.{line.strip()}\n" for line in body.splitlines() if "=" in line and
                       not line.lstrip().startswith("#"))
        return keys + head + ("[" + tail if tail else "")
    p = _copy(tmp_path, dotted)
    load_rig(p)                                                         # a valid rig file all the same
    before = p.read_bytes()
    with pytest.raises(CommissionError, match="set \\[light\\] dark_offset .* by hand"):
        update_rig_dark_offset(p, 0.0213, 4.2e-6, DATE)
    assert p.read_bytes() == before
