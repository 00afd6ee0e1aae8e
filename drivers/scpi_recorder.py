"""Composite back-ends: one back-end drives, another records.

:class:`Composite` joins a SineDrive (e.g. an SCPI function generator) and an Acquirer
(a DAQ card in input-only mode, a sound card, the simulator) into one back-end the sweep
engine can run. The drive's phase reference is then a *recorded* channel
(``rig.drive.reference_channel``): the generator's output looped into the recorder.

* ``follow``: an optional callback given the drive's read-back settings after every drive
  change, so a simulated recorder can respond to what the instrument really outputs;
* ``drive_status()`` reports ramping until both the drive and any follower have settled;
* ``output_confirmed_off`` passes on the drive's own answer (an SCPI generator's ``OUTP?``
  confirmation), so the engine can tell "ramped to zero" from "could not be confirmed at zero";
* ``halt()`` and ``stop()`` reach both parts, the drive first; ``identity()`` merges both.

Registered combinations: ``scpi+simulated`` (:class:`ScpiSimulated`: the SCPI generator
drives, the simulated burner records, fed the generator's read-back ``SOUR:FREQ?`` /
``SOUR:VOLT?`` / ``OUTP?``) and ``scpi+daqmx`` (:class:`ScpiDaqmx`: the generator drives, a
DAQ card records in input-only mode).

Imports: ``drivers.protocols``/``errors``, the composed back-ends (``drivers.scpi_generator``,
``drivers.daqmx``, ``drivers.simulated``), ``app.rig``. Never Qt, the engine or storage.
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any, Callable

from app.rig import Rig
from drivers.errors import DriverError
from drivers.protocols import Armable, Availability, Block, DriveStatus, EmergencyHalt, Identified, Stoppable

log = logging.getLogger(__name__)


class Composite:
    """A back-end made of a drive and a recorder. ``follow(settings)`` runs after each drive change."""

    title = "drive and recorder from two back-ends"

    def __init__(self, drive: Any, acquirer: Any, follow: Callable[[Any], None] | None = None) -> None:
        self.drive = drive
        self.acquirer = acquirer
        self._follow = follow

    # ------------------------------------------------------------------ acquisition
    @property
    def channels(self) -> tuple[str, ...]:
        return tuple(self.acquirer.channels)

    @property
    def sample_rate_hz(self) -> float:
        return float(self.acquirer.sample_rate_hz)

    def start(self) -> None:
        self.acquirer.start()

    def read_block(self, timeout_s: float = 2.0) -> Block:
        return self.acquirer.read_block(timeout_s)

    # ------------------------------------------------------------------ drive
    def set_drive(self, freq_hz: float, amplitude_v: float) -> None:
        self.drive.set_drive(freq_hz, amplitude_v)
        if self._follow is not None:
            self._follow(self.drive.actual_settings())

    @property
    def output_confirmed_off(self) -> bool:
        """True only when the drive's output is known to be off: the drive's own
        ``output_confirmed_off`` where it has one, else its status at zero and not ramping."""
        known = getattr(self.drive, "output_confirmed_off", None)
        if known is not None:
            return bool(known)
        status = self.drive.drive_status()
        return status.amplitude_v == 0.0 and not status.ramping

    def drive_status(self) -> DriveStatus:
        status = self.drive.drive_status()
        follower = getattr(self.acquirer, "drive_status", None) if self._follow is not None else None
        if follower is not None and follower().ramping and not status.ramping:
            return DriveStatus(freq_hz=status.freq_hz, amplitude_v=status.amplitude_v,
                               target_amplitude_v=status.target_amplitude_v, ceiling_v=status.ceiling_v,
                               ramping=True)
        return status

    # ------------------------------------------------------------------ identity and stopping
    def identity(self) -> dict[str, str]:
        out: dict[str, str] = {}
        for prefix, part in (("drive", self.drive), ("recorder", self.acquirer)):
            if isinstance(part, Identified):
                out.update({f"{prefix}.{k}": v for k, v in part.identity().items()})
        out["maker"] = out.get("drive.maker", "")
        out["model"] = f"{out.get('drive.model', '?')} + {out.get('recorder.model', '?')}"
        return out

    def arm(self, ceiling_v: float) -> None:
        for part in (self.drive, self.acquirer):
            if isinstance(part, Armable):
                part.arm(ceiling_v)

    def halt(self) -> None:
        for part in (self.drive, self.acquirer):
            if isinstance(part, EmergencyHalt):
                try:
                    part.halt()
                except DriverError as exc:
                    log.error("halt of %s failed: %s", type(part).__name__, exc)

    def stop(self) -> None:
        """Stop the drive (ramped, output off), then the recorder; the first error is raised after both."""
        errors: list[DriverError] = []
        for part in (self.drive, self.acquirer):
            if isinstance(part, Stoppable):
                try:
                    part.stop()
                except DriverError as exc:
                    errors.append(exc)
        if errors:
            raise errors[0]


def _settings_follower(sim: Any, ceiling_v: float) -> Callable[[Any], None]:
    def follow(settings: Any) -> None:
        amp_v = settings.amplitude_v if settings.output_on else 0.0
        if ceiling_v < amp_v <= ceiling_v * (1.0 + 1e-9):
            amp_v = ceiling_v                # decimal round trip of the amplitude, not a real excess
        sim.set_drive(settings.freq_hz, amp_v)
    return follow


class ScpiSimulated(Composite):
    """SCPI generator drives, simulated burner records (fed the generator's read-back settings)."""

    title = "SCPI generator drives, simulated burner records"

    def __init__(self, rig: Rig, scenario: str | Path | None = None, real_time: bool = False,
                 seed: int | None = None, **scpi_options: Any) -> None:
        from drivers.scpi_generator import ScpiGenerator
        from drivers.simulated.burner import SimulatedBurner

        sim = SimulatedBurner(rig, scenario=scenario, real_time=real_time, seed=seed)
        generator = ScpiGenerator(rig, **scpi_options)
        super().__init__(generator, sim, follow=_settings_follower(sim, rig.drive.ceiling))

    @classmethod
    def probe(cls) -> Availability:
        from drivers.scpi_generator import ScpiGenerator

        return ScpiGenerator.probe()


class ScpiDaqmx(Composite):
    """SCPI generator drives, DAQ card records (input only; loop the output into the reference channel)."""

    title = "SCPI generator drives, DAQ card records"

    def __init__(self, rig: Rig, **scpi_options: Any) -> None:
        from drivers.daqmx import DaqmxCard
        from drivers.scpi_generator import ScpiGenerator

        card = DaqmxCard(rig, input_only=True)
        try:
            generator = ScpiGenerator(rig, **scpi_options)
        except BaseException:
            card.stop()
            raise
        super().__init__(generator, card)

    @classmethod
    def probe(cls) -> Availability:
        from drivers.daqmx import DaqmxCard
        from drivers.scpi_generator import ScpiGenerator

        parts = [("SCPI generator", ScpiGenerator.probe()), ("DAQ card", DaqmxCard.probe())]
        missing = [f"{name}: {a.reason}" for name, a in parts if not a.available]
        if missing:
            return Availability(False, "; ".join(missing))
        return Availability(True, "; ".join(f"{name}: {a.reason}" for name, a in parts))


__all__ = ["Composite", "ScpiDaqmx", "ScpiSimulated"]
