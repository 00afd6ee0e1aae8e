"""``flamebode calibrate RIG``: relative calibration of the pressure sensors (common-plane method;
or ``--method sensor-swap`` in the duct, each sensor exchanged with the reference in turn).

With every pressure sensor mounted in a calibration holder (one axial plane, the same
pressure), a stepped sine over ``--band`` every ``--step`` Hz, each frequency tuned so that
the reference sensor reads ``--pressure``; per frequency the core gives each sensor's factor
C_i = G_ref,ref / G_ref,i with coherence and uncertainty (app.core.calibration). Frequencies
at or above the duct's first transverse cut-on are refused with a warning naming them.
``--check-reference`` repeats the estimate against a second reference sensor from the same
records and refuses to write a file whose two results disagree. The result is written
atomically to ``--out`` (docs/calibration-file.md); nothing is written when the run is
stopped, and an older file of that name stays as it was.

On the simulated burner the holder is simulated (all sensors at one plane, no flame, the
scenario's true sensor errors); ``--fast`` and ``--seed`` as for ``flamebode sweep`` (use the
same seed as the sweeps the calibration is for: the seed draws the simulated sensors' errors).
SIGINT, SIGTERM and SIGHUP zero the output at once and exit 128 + the signal's number.

This module only parses the options, prints what the run says and holds the stop signals
around each pass; the calibration itself is ``app.services.pressure_calibration``, which the
window's commissioning panel calls too (one operation, one place). Imports: that service and
the sweep's stop signals (.running). Never Qt.
"""

from __future__ import annotations

import argparse
import signal
import sys
from pathlib import Path
from typing import Any

from ..services.pressure_calibration import CalibrationRunError, CalibrationStopped, Request, run_calibration
from .running import StopSignals

CalibrateCommandError = CalibrationRunError      # the command's refusals are the service's


def _seed(text: str) -> int:
    from ..cli import seed_type

    return seed_type(text)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("rig", help="rig file (TOML), see docs/rig-file.md")
    p.add_argument("--method", choices=("common-plane", "sensor-swap"), default="common-plane",
                   help="common-plane: every sensor in a holder at one plane (default); sensor-swap: in the duct, "
                        "each sensor exchanged with the reference in turn (the tool waits for each swap)")
    p.add_argument("--band", default="100-2000", help="LOW-HIGH in Hz (default 100-2000)")
    p.add_argument("--step", type=float, default=50.0, help="frequency step in Hz (default 50)")
    p.add_argument("--reference", help="reference sensor (default: the rig's first pressure sensor)")
    p.add_argument("--check-reference", metavar="SENSOR",
                   help="also estimate against this second reference and check the two agree")
    p.add_argument("--pressure", default="20 Pa", help="peak pressure at the holder, with its unit (default 20 Pa)")
    p.add_argument("--record", default="1 s", help="record length per frequency, with its unit (default 1 s)")
    p.add_argument("--segments", type=int, default=16, help="segments per record for the cross-spectra (default 16)")
    p.add_argument("--out", required=True, metavar="CAL_FILE", help="calibration file to write (TOML)")
    p.add_argument("--commissioning-record", metavar="FILE", help="commissioning record to note the calibration in (default: beside "
                                                    "the rig file, RIG.commissioning.toml)")
    p.add_argument("--backend", default="simulated", help="back-end name (default: simulated)")
    p.add_argument("--scenario", help="simulated burner scenario (default: the demo's for the demo rig)")
    p.add_argument("--fast", action="store_true", help="simulator only: run as fast as the CPU allows")
    p.add_argument("--seed", type=_seed, default=None, help="simulator only: random seed (0 or more)")


class _SignalScope(StopSignals):
    """The sweep's stop signals (every output zeroed lock-free, the holder halted) around one
    pass; on leaving, a received signal ends the run (exit 128 + its number, nothing written)."""

    def __init__(self, holder: Any, out: Path) -> None:
        super().__init__(holder)
        self.out = out

    def __exit__(self, *exc: Any) -> None:
        super().__exit__(*exc)
        if self.received is not None:
            raise CalibrationStopped(f"{signal.Signals(self.received).name} received", self.out,
                                     128 + self.received)


class _Terminal:
    """The run's words on stdout (warnings and cautions on stderr); a swap waits for Enter."""

    def say(self, line: str) -> None:
        print(line, flush=True)

    def warn(self, line: str) -> None:
        print(line, file=sys.stderr, flush=True)

    def wait_for_swap(self, instruction: str) -> None:
        print(f"{instruction}, then press Enter (Ctrl-C stops; nothing is written)", flush=True)
        try:
            input()
        except EOFError:
            raise CalibrationRunError("no answer on the terminal before a swapped pass (stdin closed); nothing "
                                      "written. Run the sensor swap from a terminal") from None

    def stop_scope(self, holder: Any, out: Path) -> _SignalScope:
        return _SignalScope(holder, out)


def run(args: argparse.Namespace) -> int:
    req = Request(rig=args.rig, out=args.out, method=args.method, band=args.band, step_hz=args.step,
                  reference=args.reference, check_reference=args.check_reference, pressure=args.pressure,
                  record=args.record, segments=args.segments, commissioning_record=args.commissioning_record,
                  backend=args.backend, scenario=args.scenario, fast=args.fast, seed=args.seed)
    run_calibration(req, _Terminal())
    return 0
