"""What the engine says when the generator is lost mid-sweep: the truth about the output.

The SCPI generator (loopback emulator over pyvisa-py) drives, the simulated burner records.
The emulator is shut down in the middle of a sweep, as a generator losing power or its
network would be. The output can then not be switched off or read back, so the fault must
not claim "drive brought to zero": it must tell the operator to switch the amplifier off
(common practice: never report a safe state that was not confirmed).
"""

from __future__ import annotations

from app.engine import states as S
from app.engine.events import EventBus, FaultRaised, StateChanged
from app.engine.sweep import SweepEngine
from app.plan import plan_from_dict
from app.rig import load_rig
from drivers.scpi_recorder import ScpiSimulated
from scpi_emulator import ScpiEmulator
from test_scpi_sweep import PLAN, rig_file, tomllib_loads


def _sweep_losing_the_generator(tmp_path, lose) -> tuple[str, list[FaultRaised]]:
    with ScpiEmulator() as emu:
        rig = load_rig(rig_file(tmp_path, emu))
        plan = plan_from_dict(tomllib_loads(PLAN), str(tmp_path / "plan.toml"))
        dev = ScpiSimulated(rig, seed=4)
        bus = EventBus()
        faults: list[FaultRaised] = []
        bus.subscribe(lambda e: faults.append(e) if isinstance(e, FaultRaised) else None)
        bus.subscribe(lambda e: lose(emu) if isinstance(e, StateChanged) and e.new == S.TUNING
                      and e.point_index == 1 else None)
        engine = SweepEngine(plan, rig, dev, bus, backend_name="scpi+simulated")
        try:
            reason = engine.run()
        finally:
            try:
                dev.stop()
            except Exception:
                pass
    return reason, faults


def test_a_lost_generator_is_reported_as_not_confirmed_at_zero(tmp_path):
    # before: the stored fault said "drive ramped to zero" although the output could not be switched off
    reason, faults = _sweep_losing_the_generator(tmp_path, lambda emu: emu.close())
    fatal = [f for f in faults if f.fatal]
    assert reason == "fault" and len(fatal) == 1, [f.message for f in faults]
    assert "could not be confirmed at zero" in fatal[0].action
    assert "switch the amplifier off" in fatal[0].action
    assert "brought to zero" not in fatal[0].action
