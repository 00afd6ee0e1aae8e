"""Tests of the back-end registry (drivers.registry) and the ``flamebode backends`` command.

External reference: the declared entry points are read back from pyproject.toml with
tomllib, and fake entry points are built with importlib.metadata.EntryPoint (the standard
library's own type), so the registry is checked against the packaging metadata rather
than against itself.
"""

from __future__ import annotations

import json
import sys
import textwrap
import tomllib
from importlib.metadata import EntryPoint
from pathlib import Path

import pytest

from app.cli import main
from app.rig import load_rig
from drivers import registry, safety
from drivers.errors import BackendUnavailable, DriverError
from drivers.protocols import Availability

ROOT = Path(__file__).resolve().parents[2]

FAKE_MODULE = textwrap.dedent('''
    from drivers.protocols import Availability

    class NoCard:
        """A card back-end whose card is not plugged in."""
        title = "Fake acquisition card"

        @classmethod
        def probe(cls):
            return Availability(False, "no card found on the bus")

        def __init__(self, rig, **options):
            raise AssertionError("must not be constructed when unavailable")

    class ProbeCrashes:
        @classmethod
        def probe(cls):
            raise OSError("vendor runtime answered garbage")

    class NoProbe:
        pass

    class Ready:
        """Always there."""
        @classmethod
        def probe(cls):
            return Availability(True, "ready")

        def __init__(self, rig, **options):
            self.rig, self.options, self.halted = rig, options, 0

        def halt(self):
            self.halted += 1
''')


def _ep(name: str, value: str) -> EntryPoint:
    return EntryPoint(name=name, value=value, group=registry.GROUP)


@pytest.fixture
def fake_backends(monkeypatch, tmp_path):
    """Replace the installed entry points with the simulated one plus some broken fakes."""
    (tmp_path / "fake_hw_backends.py").write_text(FAKE_MODULE)
    (tmp_path / "fake_vendor_lib.py").write_text(
        'raise ImportError("libfakevendor.so.1: cannot open shared object file")\n')
    monkeypatch.syspath_prepend(str(tmp_path))
    eps = [_ep("simulated", "drivers.simulated.burner:SimulatedBurner"),
           _ep("missing", "drivers.no_such_backend:Thing"),
           _ep("vendor", "fake_vendor_lib:Card"),
           _ep("nocard", "fake_hw_backends:NoCard"),
           _ep("crashy", "fake_hw_backends:ProbeCrashes"),
           _ep("noprobe", "fake_hw_backends:NoProbe"),
           _ep("typo", "fake_hw_backends:DoesNotExist"),
           _ep("ready", "fake_hw_backends:Ready")]
    monkeypatch.setattr(registry, "entry_points", lambda group: [e for e in eps if e.group == group])
    yield
    for mod in ("fake_hw_backends", "fake_vendor_lib"):
        sys.modules.pop(mod, None)


def test_installed_entry_points_match_pyproject():
    declared = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["entry-points"]["flamebode.backends"]
    infos = {i.name: i for i in registry.list_backends()}
    assert set(infos) == set(declared), "re-run `pip install -e .` after editing the entry points"
    sim = infos["simulated"]
    assert sim.target == declared["simulated"]
    assert sim.availability.available, sim.availability.reason
    assert sim.title and sim.title != "simulated"


def test_broken_backends_are_listed_unavailable_with_reasons(fake_backends):
    infos = {i.name: i for i in registry.list_backends()}
    assert list(infos) == sorted(infos)
    reasons = {name: i.availability.reason for name, i in infos.items() if not i.availability.available}
    assert set(reasons) == {"missing", "vendor", "nocard", "crashy", "noprobe", "typo"}
    assert "cannot import drivers.no_such_backend" in reasons["missing"] and "No module named" in reasons["missing"]
    assert "libfakevendor.so.1" in reasons["vendor"]
    assert reasons["nocard"] == "no card found on the bus"
    assert "vendor runtime answered garbage" in reasons["crashy"]
    assert "no probe()" in reasons["noprobe"]
    assert "DoesNotExist" in reasons["typo"]
    assert infos["nocard"].title == "Fake acquisition card"
    assert infos["ready"].availability == Availability(True, "ready") and infos["ready"].title == "Always there"


def test_open_unknown_backend_names_the_known_ones(fake_backends):
    with pytest.raises(DriverError) as info:
        registry.open_backend("daq9000", rig=None)
    assert not isinstance(info.value, BackendUnavailable)
    assert "'daq9000'" in str(info.value) and "simulated" in str(info.value) and "ready" in str(info.value)


@pytest.mark.parametrize("name, words", [("nocard", "no card found"), ("missing", "No module named"),
                                         ("vendor", "libfakevendor"), ("crashy", "garbage")])
def test_open_unavailable_backend_gives_the_reason(fake_backends, name, words):
    with pytest.raises(BackendUnavailable, match=words) as info:
        registry.open_backend(name, rig=None)
    assert repr(name) in str(info.value)


def test_open_backend_passes_options_and_registers_for_safety(fake_backends):
    dev = registry.open_backend("ready", rig="RIG", seed=3)
    try:
        assert dev.rig == "RIG" and dev.options == {"seed": 3}
        assert dev in safety.registered()
        safety.halt_all()
        assert dev.halted == 1
    finally:
        safety.unregister(dev)


def test_open_simulated_backend(demo_rig_path):
    rig = load_rig(demo_rig_path)
    sim = registry.open_backend("simulated", rig, seed=1)
    try:
        from drivers.simulated.burner import SimulatedBurner
        assert isinstance(sim, SimulatedBurner) and sim in safety.registered()
        sim.start()
        sim.set_drive(100.0, 0.5)
        for _ in range(5):
            sim.read_block()
        assert sim.drive_status().amplitude_v == 0.5
    finally:
        registry.close_backend(sim)
    assert sim not in safety.registered()
    assert sim.drive_status().amplitude_v == 0.0


# --------------------------------------------------------------------------- CLI
def test_cli_backends_plain_table(fake_backends, capsys):
    assert main(["backends"]) == 0
    out = capsys.readouterr().out
    lines = out.splitlines()
    assert lines[0].split()[:2] == ["NAME", "STATUS"]
    by_name = {line.split()[0]: line for line in lines[1:]}
    assert set(by_name) == {"simulated", "missing", "vendor", "nocard", "crashy", "noprobe", "typo", "ready"}
    assert by_name["simulated"].split()[1] == "available"
    assert by_name["nocard"].split()[1] == "unavailable" and "no card found on the bus" in by_name["nocard"]


def test_cli_backends_json(fake_backends, capsys):
    assert main(["backends", "--json"]) == 0
    rows = {r["name"]: r for r in json.loads(capsys.readouterr().out)}
    assert rows["simulated"]["available"] is True
    assert rows["simulated"]["target"] == "drivers.simulated.burner:SimulatedBurner"
    assert rows["vendor"]["available"] is False and "libfakevendor.so.1" in rows["vendor"]["reason"]


def test_cli_backends_rich_table_on_a_terminal(fake_backends, capsys, monkeypatch):
    monkeypatch.setattr(sys.stdout, "isatty", lambda: True)
    assert main(["backends"]) == 0
    out = capsys.readouterr().out
    assert "simulated" in out and "unavailable" in out and "no card found" in out
