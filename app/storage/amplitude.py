"""Amplitude dependence of the response, from one FDF run or from several FTF runs of one rig
and operating point: the points gathered from the runs' accepted attempts (with their stored
coverage factors), the check that the runs share the rig's geometry and operating point, and
the test of ``app.core.fdf`` stated in words for ``fit``, ``report`` and ``review``.

Imports: standard library, numpy, ``app.core.fdf``/``fits`` and ``app.storage``. No Qt, no drivers.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from typing import Any, Iterable

import numpy as np

from ..core.fdf import Comparison, amplitude_independence
from ..errors import FlamebodeError
from .export import finite_number, point_rows

Z95 = 1.959963984540054
# the rig file's sections that fix the operating point (flows, temperature, pressure) and the duct
OPERATING_SECTIONS = ("duct", "gas")


class NotComparable(FlamebodeError):
    """Runs that cannot be pooled for an amplitude test (another rig or operating point)."""


@dataclass(frozen=True)
class AmplitudePoint:
    freq_hz: float
    amplitude_ratio: float      # the target |u'|/ū of the point (the FDF axis)
    ftf: complex
    gain_ci95: float
    phase_ci95_rad: float
    coverage: float             # the point's coverage factor of its gain interval
    flagged: bool
    run: str                    # the run folder it came from


def run_points(run: Any) -> list[AmplitudePoint]:
    """Every accepted point of ``run`` with a finite result (flagged ones marked, not dropped)."""
    coverage = {i + 1: finite_number((a.get("analysis") or {}).get("coverage_factor_gain"), positive=True) or Z95
                for i, a in run.accepted().items()}
    out = []
    for r in point_rows(run):
        if r["status"] != "accepted" or r["gain"] is None or r["phase_wrapped_rad"] is None:
            continue
        if not (r["freq_hz"] is not None and math.isfinite(float(r["freq_hz"])) and float(r["freq_hz"]) > 0):
            continue
        out.append(AmplitudePoint(
            float(r["freq_hz"]), float(r["amplitude_ratio_target"]),
            complex(r["gain"] * np.exp(1j * r["phase_wrapped_rad"])),
            r["gain_ci95"] if r["gain_ci95"] is not None else math.nan,
            r["phase_ci95_rad"] if r["phase_ci95_rad"] is not None else math.nan,
            coverage.get(r["point"], Z95), bool(r["flagged"]), str(run.run_dir)))
    return out


def _operating_point(run: Any) -> dict[str, Any]:
    try:
        rig = tomllib.loads(run.rig_path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise NotComparable(f"{run.run_dir}: its rig file snapshot cannot be read ({exc}); the operating point "
                            "is unknown") from None
    return {k: rig.get(k) for k in OPERATING_SECTIONS}


def _first_difference(a: Any, b: Any, where: str) -> str | None:
    if isinstance(a, dict) and isinstance(b, dict):
        for k in sorted(set(a) | set(b)):
            d = _first_difference(a.get(k), b.get(k), f"{where}.{k}" if where else k)
            if d:
                return d
        return None
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        for j, (x, y) in enumerate(zip(a, b)):
            d = _first_difference(x, y, f"{where}[{j + 1}]")
            if d:
                return d
        return None
    return None if a == b else f"{where} ({a!r} against {b!r})"


def require_same_operating_point(runs: Iterable[Any]) -> None:
    """Raise NotComparable naming the first rig key that differs between two of ``runs``."""
    runs = list(runs)
    if len(runs) < 2:
        return
    first = _operating_point(runs[0])
    for other in runs[1:]:
        d = _first_difference(first, _operating_point(other), "")
        if d:
            raise NotComparable(f"{other.run_dir} and {runs[0].run_dir} differ in the rig's operating point or "
                                f"duct at {d}: the amplitude dependence is only tested between runs of one rig and "
                                "operating point (use 'flamebode compare' to draw them together)")


@dataclass(frozen=True)
class AmplitudeTest:
    amplitudes: tuple[float, ...]           # every forcing amplitude present, ascending
    comparisons: tuple[Comparison, ...]     # one per frequency measured at two or more amplitudes
    alpha: float = 0.05

    @property
    def failing(self) -> tuple[Comparison, ...]:
        return tuple(c for c in self.comparisons if c.fails)

    @property
    def dependent(self) -> bool:
        """More frequencies fail than chance explains (10 %, at least 2, of a 5 % test per frequency)."""
        return len(self.failing) > max(1, 0.1 * len(self.comparisons))

    def lines(self) -> list[str]:
        """What a person reads: the result, the frequencies where it fails, and the note to report."""
        if len(self.amplitudes) < 2:
            return [f"amplitude dependence: not tested (one forcing amplitude, {self.amplitudes[0]:g})"
                    if self.amplitudes else "amplitude dependence: not tested (no point with a result)"]
        if not self.comparisons:
            return ["amplitude dependence: not tested (no frequency was measured at two amplitudes with intervals)"]
        lo = sorted({a for c in self.comparisons for a in c.amplitudes})[:2]
        bad = self.failing
        out = [f"amplitude dependence: at the two lowest amplitudes ({lo[0]:g}, {lo[1]:g}) the response is the same "
               f"within the uncertainties at {len(self.comparisons) - len(bad)} of {len(self.comparisons)} "
               f"frequencies ({self.alpha:.0%} test per frequency: about 1 in {round(1 / self.alpha)} differs "
               "by chance)"]
        if bad:
            out.append("  differs at: " + ", ".join(f"{c.freq_hz:g} Hz (p = {c.p_value:.2g})" for c in bad))
        if self.dependent:
            out.append("  note: the lowest amplitudes are not in the linear range at these frequencies; report it "
                       "with the FTF")
        return out


def amplitude_test(points: Iterable[AmplitudePoint], good_only: bool = False, alpha: float = 0.05) -> AmplitudeTest:
    pts = [p for p in points if not (good_only and p.flagged)]
    comps = amplitude_independence([(p.freq_hz, p.amplitude_ratio, p.ftf, p.gain_ci95, p.phase_ci95_rad, p.coverage)
                                    for p in pts], alpha=alpha)
    return AmplitudeTest(tuple(sorted({p.amplitude_ratio for p in pts})), tuple(comps), alpha)


def runs_amplitude_test(runs: list[Any], good_only: bool = False) -> AmplitudeTest:
    """The test over the pooled points of ``runs`` (an FDF run, or FTF runs of one operating point)."""
    require_same_operating_point(runs)
    return amplitude_test([p for run in runs for p in run_points(run)], good_only)
