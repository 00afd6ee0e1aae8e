"""`flamebode commission ...` run as a user would (real processes) on the simulated burner: the dark
offset measured with the drive at zero recovers the simulator's true offset within its stated
uncertainty and lands, dated, in the rig file (which still loads, comments kept) and in the
commissioning record; a linearity check needs its steps; King's law from a CSV table; a broken
record or table is named, never a traceback.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from app.commissioning_record import age_notes, read_record, record_path_for
from app.rig import load_rig
from run_watch import run_cli

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture()
def rig(tmp_path: Path) -> Path:
    p = tmp_path / "rig.toml"
    p.write_text((ROOT / "configs" / "demo-rig.toml").read_text())
    return p


@pytest.mark.timeout(300)
def test_dark_offset_recovers_the_simulated_offset_and_is_written_where_the_rig_reads_it(rig: Path):
    from drivers.simulated.burner import SimulatedBurner

    before = rig.read_text()
    out = run_cli("commission", "dark", str(rig), "--fast", "--seed", "2", "--duration", "2 s", "--update-rig")
    assert out.returncode == 0 and "Traceback" not in out.stderr, out.stderr[-2000:]
    assert "flame must be off" in out.stderr                       # the caution, every time
    record = read_record(record_path_for(rig))
    dark = record.latest("dark-offset")
    true_v = SimulatedBurner(load_rig(rig), seed=2, holder=True).model.dark_offset_v   # the simulator's truth
    assert abs(dark.result["mean_v"] - true_v) <= 4 * dark.result["u_mean_v"] + 2e-5   # + ADC step (from memory)
    loaded = load_rig(rig)
    assert loaded.light.dark_offset == pytest.approx(dark.result["mean_v"], rel=1e-5)
    assert "measured by flamebode commission dark, " + dark.date in rig.read_text()
    # every other line of the rig file is kept (comments included)
    kept = [line for line in before.splitlines() if not line.strip().startswith("dark_offset")]
    assert all(line in rig.read_text().splitlines() for line in kept)
    assert not any(p.name.startswith(".rig") for p in rig.parent.iterdir())   # no temporary file left


@pytest.mark.timeout(300)
def test_linearity_needs_three_steps_and_reports_a_constant_light_as_not_proportional(rig: Path):
    assert run_cli("commission", "dark", str(rig), "--fast", "--seed", "1", "--duration", "1 s").returncode == 0
    out = run_cli("commission", "linearity", str(rig))
    assert out.returncode == 2 and "0 light step(s) since the newest dark offset" in out.stderr, out.stderr
    out = run_cli("commission", "light-step", str(rig), "--fast", "--duration", "1 s")
    assert out.returncode == 2 and "needs --power" in out.stderr
    # the simulated burner burns at one power whatever is typed: the light cannot follow the entered
    # steps, and the check must say so rather than pass
    for kw in (3, 4, 5):
        out = run_cli("commission", "light-step", str(rig), "--power", f"{kw} kW", "--fast", "--seed", str(kw),
                      "--duration", "1 s")
        assert out.returncode == 0, out.stderr[-2000:]
    out = run_cli("commission", "linearity", str(rig))
    assert out.returncode == 0 and "not proportional" in out.stdout, out.stdout
    record = read_record(record_path_for(rig))
    assert record.latest("light-linearity").result["n_steps"] == 3
    assert [n for n in age_notes(record, 30.0) if "calibration" in n]        # still to do
    assert not [n for n in age_notes(record, 30.0) if "dark" in n or "linearity" in n]


def test_hot_wire_table_and_bad_inputs(rig: Path, tmp_path: Path):
    U = np.linspace(0.5, 10.0, 8)
    E = np.sqrt(1.6 + 0.9 * U ** 0.47)
    table = tmp_path / "wire.csv"
    table.write_text("voltage_v,velocity_m_s\n" + "".join(f"{e:.6f},{u:.4f}\n" for e, u in zip(E, U)))
    out = run_cli("commission", "hot-wire", str(rig), "--table", str(table))
    assert out.returncode == 0, out.stderr
    k = read_record(record_path_for(rig)).latest("hot-wire").result
    assert k["a_v2"] == pytest.approx(1.6, rel=1e-3) and k["n"] == pytest.approx(0.47, rel=1e-3)
    bad = tmp_path / "bad.csv"
    bad.write_text("voltage_v,velocity_m_s\n1.0,2\nx,3\n")
    out = run_cli("commission", "hot-wire", str(rig), "--table", str(bad))
    assert out.returncode == 2 and "line 3" in out.stderr and "Traceback" not in out.stderr
    broken = record_path_for(rig)
    broken.write_text(broken.read_text().replace('kind = "hot-wire"', 'kind = "lunch"'))
    out = run_cli("commission", "status", str(rig))
    assert out.returncode == 2 and "check 1" in out.stderr and "lunch" in out.stderr, out.stderr
    broken.write_text("format = 'flamebode-commissioning'\nformat_version = 1\n[[check]\n")
    out = run_cli("commission", "status", str(rig))
    assert out.returncode == 2 and str(broken) in out.stderr and "Traceback" not in out.stderr
