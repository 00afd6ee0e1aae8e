"""Benchmark: the write-then-query stall of a SCPI socket session with and without TCP_NODELAY.

Run with ``python tests/bench/bench_scpi.py`` (not collected by pytest). The generator
back-end talks to the project's loopback SCPI emulator through pyvisa-py; one "drive
cycle" is a one-step amplitude change and back (SOUR:VOLT, OUTP ON, SYST:ERR?; OUTP OFF,
SYST:ERR?). With Nagle's algorithm on, a small write followed by another waits for the
delayed ACK of the first (RFC 896 with RFC 1122 delayed ACKs; about 40 ms on Linux, from
memory). Prints best and median cycle times side by side and their ratio.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests" / "drivers"))

from scpi_emulator import ScpiEmulator  # noqa: E402
from test_scpi_generator import make_rig  # noqa: E402

from drivers.scpi_generator import ScpiGenerator  # noqa: E402

REPEATS = 15


def cycles(gen: ScpiGenerator) -> list[float]:
    out = []
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        gen.set_drive(200.0, 0.01)
        gen.set_drive(200.0, 0.0)
        out.append(time.perf_counter() - t0)
    return out


def main() -> None:
    rows = []
    with ScpiEmulator() as emu:
        for label, nodelay in (("TCP_NODELAY on (as shipped)", True), ("Nagle on (option skipped)", False)):
            if not nodelay:
                ScpiGenerator._set_nodelay = lambda self: "off (benchmark)"  # type: ignore[method-assign]
            gen = ScpiGenerator(make_rig(emu))
            t = cycles(gen)
            gen.stop()
            rows.append((label, min(t), statistics.median(t)))
    print(f"SCPI drive cycle through pyvisa-py to the loopback emulator, {REPEATS} cycles each")
    print(f"{'session':<30}{'best ms':>10}{'median ms':>12}")
    for label, best, med in rows:
        print(f"{label:<30}{best * 1e3:>10.2f}{med * 1e3:>12.2f}")
    print(f"median ratio Nagle / NODELAY: {rows[1][2] / rows[0][2]:.0f}×")


if __name__ == "__main__":
    main()
