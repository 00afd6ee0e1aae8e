"""Command line of the rig emulator: ``python -m drivers.emulator audio ...``.

Runs until SIGINT/SIGTERM (or ``--duration``); on every exit path its outputs fall silent.
See docs/hardware.md, "Rehearsing with the rig emulator".

Imports: argparse, signal, ``app.rig`` and this package. Never Qt, the engine or storage.
"""

from __future__ import annotations

import argparse
import signal
import sys
from pathlib import Path

from app.errors import FlamebodeError
from app.rig import load_rig


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="python -m drivers.emulator",
                                description="Emulated rig: the simulated burner behind an audio server.")
    sub = p.add_subparsers(dest="mode", required=True)
    a = sub.add_parser("audio", help="drive in from a null sink's monitor, sensor signals out to another sink")
    a.add_argument("--rig", required=True, help="rig file with a [hardware.soundcard] table (the same file flamebode uses)")
    a.add_argument("--drive-source", default="fb_drive.monitor",
                   help="audio source carrying flamebode's outputs (default: fb_drive.monitor)")
    a.add_argument("--sensor-sink", default="fb_sense", help="sink whose monitor is flamebode's input (default: fb_sense)")
    a.add_argument("--block", type=int, default=2048, help="frames per processing block (default 2048)")
    a.add_argument("--lead-blocks", type=int, default=5, help="blocks rendered ahead of the audio callback (default 5)")
    a.add_argument("--clock-ppm", type=float, default=0.0, help="emulate a second sample clock off by this many ppm")
    a.add_argument("--seed", type=int, default=None, help="simulated rig seed (default: the scenario's)")
    a.add_argument("--truth", type=Path, help="write the applied FTF here (JSON; for tests, never for flamebode)")
    a.add_argument("--status", type=Path, help="append status lines here (JSON lines)")
    a.add_argument("--duration", type=float, default=None, help="stop after this many seconds")
    return p


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        rig = load_rig(args.rig)
        from .audio import AudioEmulator

        emu = AudioEmulator(rig, args.drive_source, args.sensor_sink, args.truth, args.status,
                            block_n=args.block, lead_blocks=args.lead_blocks, clock_ppm=args.clock_ppm, seed=args.seed)
    except FlamebodeError as exc:
        print(f"emulator: {exc}", file=sys.stderr)
        return 2
    for signum in (signal.SIGINT, signal.SIGTERM):
        signal.signal(signum, lambda *_: emu.stop())
    print(f"emulator: {args.mode} running (pid {__import__('os').getpid()})", flush=True)
    emu.run(args.duration)
    return 0


if __name__ == "__main__":
    sys.exit(main())
