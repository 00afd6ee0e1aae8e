"""The SCPI generator back-end against a pyvisa-sim instrument (tests/drivers/scpi-sim.yaml):
the same commands work through a second VISA library, whose error queue is the
``error_queue`` form (drained to ``0,...``), and there is no socket to tune.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from app.rig import read_toml, rig_from_dict
from drivers.scpi_generator import InstrumentError, ScpiGenerator

HERE = Path(__file__).resolve().parent
YAML = HERE / "scpi-sim.yaml"
DEMO = HERE.parents[1] / "configs" / "demo-rig.toml"
RESOURCE = "TCPIP0::sim-generator.local::5025::SOCKET"


def sim_rig(**table):
    data = read_toml(DEMO)
    data["hardware"] = {"scpi": {"resource": RESOURCE, "visa_library": f"{YAML}@sim", "ramp_step": "10 ms",
                                 **table}}
    return rig_from_dict(data, str(DEMO))


def test_drive_and_read_back_through_pyvisa_sim():
    g = ScpiGenerator(sim_rig())
    try:
        ident = g.identity()
        assert (ident["maker"], ident["model"], ident["serial"]) == ("flamebode", "simulated SCPI generator",
                                                                    "SIM-0001")
        assert ident["tcp_nodelay"] == "not applicable"
        g.set_drive(150.0, 0.6)
        s = g.actual_settings()
        assert (s.freq_hz, s.unit, s.output_on) == (150.0, "VPP", True)
        assert s.amplitude_v == pytest.approx(0.6, rel=1e-8)        # 1.2 Vpp read back, Vp = Vpp / 2
        g.set_drive(150.0, 0.0)
        assert g.actual_settings().output_on is False
    finally:
        g.stop()


def test_instrument_refusal_is_read_from_the_error_queue():
    """The simulated instrument's minimum is 1 mVpp: 0.2 mV peak is refused with its own -113 text."""
    g = ScpiGenerator(sim_rig(amplitude_unit="VPP"))
    try:
        with pytest.raises(InstrumentError, match='-113,"Undefined header".*SOUR:VOLT 0.0004'):
            g.set_drive(150.0, 0.0002)
        assert g.actual_settings().output_on is False                 # switched off after the refusal
    finally:
        g.stop()
