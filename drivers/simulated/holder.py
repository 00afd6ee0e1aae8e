"""Calibration-holder mode of the simulated burner: every pressure sensor at one plane.

For the relative calibration of the pressure sensors (common-plane method) the sensors
are mounted side by side at one axial plane of the sensor duct, so that below the duct's
first transverse cut-on they all see the same pressure. In this mode the simulated rig
has no flame (the light channel reads its dark offset), the loudspeaker forces the duct
as usual, and each sensor shows the scenario's TRUE sensor errors (gain and phase, see
``model.true_sensor_errors``) plus its own noise. The errors are what a calibration must
recover; their true relative factors are exposed only by ``truth.true_relative_factors``.

Imports: numpy and this package only. Never the core's estimators.
"""

from __future__ import annotations

import numpy as np

from app.rig import Rig

from .model import BurnerModel


def holder_plane_m(rig: Rig, plane_m: float | None = None) -> float:
    """The axial plane of the holder: as given, else the most upstream sensor's position.

    It must lie inside the sensor duct (a plane outside it has no pressure to measure)."""
    duct = rig.duct
    plane = min(s.position for s in rig.pressure_sensors) if plane_m is None else float(plane_m)
    if not (np.isfinite(plane) and duct.upstream_end <= plane <= duct.reference_plane):
        raise ValueError(f"calibration holder plane {plane!r} m lies outside the sensor duct "
                         f"({duct.upstream_end:g} m to {duct.reference_plane:g} m)")
    return plane


def mount(model: BurnerModel, plane_m: float) -> None:
    """Put every sensor of ``model`` at the axial plane ``plane_m`` (their errors stay their own)."""
    model.sensor_positions_m = np.full(len(model.sensor_positions_m), float(plane_m))
    # networks and responses were cached for the sensors' rig positions (stability, excitation)
    model._networks.clear()
    model._responses.clear()
