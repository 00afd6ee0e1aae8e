"""The FTF point's uncertainty: invariances and cross-checks of the error budget.

Convention throughout: x(t) = Re{x̂ e^{+iωt}}, so a delay gives a falling phase.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from app.core.response import evaluate_point
from app.rig import load_rig, rig_from_dict

from synth import make_record, n_tau

DEMO_RIG = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"


def rig_variant(shift_m: float = 0.0, sensors: tuple[int, ...] | None = None, **gas):
    """The demo rig with every axial position (reference plane and duct end included) moved by
    ``shift_m``, optionally only the sensors numbered in ``sensors``, and gas fields replaced."""
    data = load_rig(DEMO_RIG).model_dump()
    data.pop("source_path")
    duct = data["duct"]
    duct["reference_plane"] += shift_m
    duct["upstream_end"] += shift_m
    chosen = [s for i, s in enumerate(data["pressure_sensors"]) if sensors is None or i in sensors]
    for s in chosen:
        s["position"] += shift_m
    data["pressure_sensors"] = chosen
    data["gas"].update(gas)
    return rig_from_dict(data, "variant")


def _reported(pt) -> np.ndarray:
    v = pt.velocity
    return np.array([v.velocity_ref.real, v.velocity_ref.imag, v.var_velocity_ref, v.sigma_ratio, pt.gain,
                     pt.phase_rad, pt.gain_ci95, pt.phase_ci95_rad, pt.quality["relative_uncertainty"],
                     pt.quality["relative_uncertainty_systematic"]])


@pytest.mark.parametrize("sensors", [(0, 2), (0, 1, 2, 3)], ids=["2 sensors", "4 sensors"])
@pytest.mark.parametrize("freq_hz", [130.0, 470.0])
def test_shifting_the_axis_origin_changes_no_reported_value(sensors, freq_hz):
    # A physical result cannot depend on where the axis origin is (common practice; with
    # û = gᵀa, E|δû|² = gᵀ Cov(a) ḡ is origin-invariant, JCGM 102:2011 §6 for complex outputs).
    # The record is the same (the generator works relative to the reference plane); only the
    # coordinates in the rig file move.
    base = rig_variant(0.0, sensors)
    rec = make_record(base, freq_hz, n_tau(0.9, 2.1e-3), duration_s=1.0, noise_pa=1.0, light_noise_v=0.04,
                      rng=np.random.default_rng(5))
    ref = _reported(evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, freq_hz, base))
    assert np.all(np.isfinite(ref)) and ref[2] > 0 and ref[-1] > 0
    for shift in (0.3, 0.9, -1.7):
        moved = rig_variant(shift, sensors)
        rec_m = make_record(moved, freq_hz, n_tau(0.9, 2.1e-3), duration_s=1.0, noise_pa=1.0, light_noise_v=0.04,
                            rng=np.random.default_rng(5))
        np.testing.assert_allclose(rec_m.data, rec.data, rtol=0, atol=1e-9)   # same record to rounding
        got = _reported(evaluate_point(rec_m.data, rec_m.channels, rec_m.sample_rate_hz, freq_hz, moved))
        np.testing.assert_allclose(got, ref, rtol=1e-6, atol=1e-12, err_msg=f"shift {shift} m")
