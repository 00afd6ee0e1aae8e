"""A run's FTF/FDF points (and fitted flame models) as a file that network-model codes read:
MATLAB ``.mat`` (scipy.io) or HDF5 (``.h5``/``.hdf5``), chosen by the file's suffix.

Contents, in SI units and named so:

* ``freq_hz``, ``amplitude_ratio`` (target |u'|/ū, the FDF axis), ``amplitude_ratio_achieved``,
  ``point`` (numbered from 1) and ``attempt`` (the attempt each point uses), ``flags``;
* ``ftf_real``/``ftf_imag`` (and ``ftf`` as a complex array in HDF5), ``gain``, ``gain_ci95``,
  ``phase_rad`` (unwrapped along frequency per amplitude), ``phase_ci95_rad``;
* ``covariance``: per point the 2×2 covariance of (Re F, Im F). A point's error is taken as
  independent in gain and phase with σ_g = gain_ci95/k, σ_φ = phase_ci95/k (k its coverage
  factor, 1.96 if the run did not store one), so with R the rotation by the phase
  cov = R diag(σ_g², g²σ_φ²) Rᵀ (first order, derived);
* ``time_convention``: "exp(+i*omega*t)" (flamebode's) or, with ``convention="minus"``,
  "exp(-i*omega*t)": then F and the phase are conjugated (F → F*, φ → -φ, Im F → -Im F, the
  covariance's off-diagonal terms change sign), as codes written with e^{-iωt} expect;
* ``run``: the run folder, the plan's name, the rig file's text (the operating point: flows,
  temperatures, geometry) and the back-end;
* ``models`` (optional): each fitted model's name, parameters, their covariance (widened by the
  reduced χ² where the fit widened its printed intervals: ``covariance_widened_by``), reduced χ²,
  AIC, and the model evaluated on a dense frequency grid (same convention); a rational model
  also its state-space matrices A, B, C, D and delay ``tau_s`` (in flamebode's e^{+iωt}
  convention: a real system does not change with the convention, only the sign of ω does).

Imports: numpy, scipy.io, h5py and ``app.storage`` only. Must not import Qt or drivers.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import FlamebodeError
from ..outputs import output_target, write_whole
from .export import point_rows
from .reader import open_run

CONVENTIONS = {"plus": "exp(+i*omega*t)", "minus": "exp(-i*omega*t)"}
Z95 = 1.959963984540054


def _points(run: Any) -> dict[str, np.ndarray]:
    rows = [r for r in point_rows(run) if r["gain"] is not None and r["phase_rad"] is not None]
    coverage = {}
    for i, a in run.accepted().items():
        coverage[i + 1] = float((a.get("analysis") or {}).get("coverage_factor_gain") or Z95)

    def col(key: str) -> np.ndarray:
        return np.array([math.nan if r[key] is None else float(r[key]) for r in rows], dtype=float)

    g, ph = col("gain"), col("phase_rad")
    k = np.array([coverage.get(r["point"], Z95) for r in rows], dtype=float)
    sg, sp = col("gain_ci95") / k, col("phase_ci95_rad") / k
    c, s = np.cos(ph), np.sin(ph)
    a, b = sg ** 2, (g * sp) ** 2
    cov = np.stack([np.stack([c * c * a + s * s * b, c * s * (a - b)], -1),
                    np.stack([c * s * (a - b), s * s * a + c * c * b], -1)], -2) if rows else np.zeros((0, 2, 2))
    F = g * np.exp(1j * ph)
    return {"point": np.array([r["point"] for r in rows], dtype=np.int64),
            "attempt": np.array([r["attempt"] or 0 for r in rows], dtype=np.int64),
            "freq_hz": col("freq_hz"), "amplitude_ratio": col("amplitude_ratio_target"),
            "amplitude_ratio_achieved": col("amplitude_ratio_achieved"),
            "gain": g, "gain_ci95": col("gain_ci95"), "phase_rad": ph, "phase_ci95_rad": col("phase_ci95_rad"),
            "ftf": F, "covariance": cov, "flags": np.array([r["flags"] for r in rows], dtype=object)}


def _is_interchange(p: Path) -> bool:
    """An existing file this command wrote (so it may be replaced): our HDF5 format, or a .mat with
    our time-convention variable."""
    if p.stat().st_size == 0:
        return True
    if p.suffix.lower() == ".mat":
        from scipy.io import whosmat

        return any(name == "time_convention" for name, *_ in whosmat(str(p)))
    import h5py

    with h5py.File(p, "r") as f:
        return f.attrs.get("format") in ("flamebode-ftf-interchange", b"flamebode-ftf-interchange")


def _plan_name(run: Any) -> str:
    from ..configfile import read_toml

    try:
        return str(read_toml(run.plan_path).get("name", ""))
    except (FlamebodeError, OSError):
        return ""


def _conjugate(points: dict[str, np.ndarray]) -> None:
    points["ftf"] = np.conj(points["ftf"])
    points["phase_rad"] = -points["phase_rad"]
    cov = points["covariance"].copy()
    cov[:, 0, 1] *= -1.0
    cov[:, 1, 0] *= -1.0
    points["covariance"] = cov


def write_interchange(run_dir: str | Path, path: str | Path, convention: str = "plus",
                      models: list[tuple[float, Any]] | None = None, grid_hz: np.ndarray | None = None) -> Path:
    """Write the run's points (and ``models``: (amplitude ratio, app.core.fits.FitResult) pairs)
    to ``path``; returns it."""
    if convention not in CONVENTIONS:
        raise FlamebodeError(f"time convention {convention!r}: use 'plus' (e^+iwt) or 'minus' (e^-iwt)")
    out = Path(path)
    suffix = out.suffix.lower()
    if suffix not in (".mat", ".h5", ".hdf5"):
        raise FlamebodeError(f"{out}: write a .mat or an .h5/.hdf5 file (the suffix chooses the format)")
    out = output_target(out, "points file written by flamebode", _is_interchange)
    run = open_run(run_dir, verify=False)
    pts = _points(run)
    if convention == "minus":
        _conjugate(pts)
    info = {"run_dir": str(run.run_dir), "plan_name": _plan_name(run),
            "backend": str(run.info.get("backend", "")),
            "rig_toml": run.rig_path.read_text(encoding="utf-8") if run.rig_path.is_file() else ""}
    grid = np.asarray(grid_hz if grid_hz is not None else
                      np.linspace(max(1.0, float(np.nanmin(pts["freq_hz"]))) if pts["freq_hz"].size else 1.0,
                                  float(np.nanmax(pts["freq_hz"])) if pts["freq_hz"].size else 1.0, 400), dtype=float)
    fitted = []
    for amp, m in models or []:
        values = m.evaluate(grid)
        fitted.append({"model": m.model, "amplitude_ratio": float(amp),
                       "names": list(m.names), "values": np.asarray(m.values, dtype=float),
                       # the covariance the printed intervals use: widened by the reduced χ² where the fit was
                       "covariance": np.asarray(m.covariance, dtype=float) * (float(m.reduced_chi2) if getattr(
                           m, "widened", False) else 1.0),
                       "covariance_widened_by": float(m.reduced_chi2) if getattr(m, "widened", False) else 1.0,
                       "reduced_chi2": float(m.reduced_chi2),
                       "aic": float(m.aic), "grid_hz": grid,
                       "grid_ftf": np.conj(values) if convention == "minus" else values})
        if hasattr(m, "state_space"):          # the rational model: (A, B, C, D) and the delay
            A, B, C, D, tau = m.state_space()
            fitted[-1].update(A=A, B=B, C=C, D=D, tau_s=float(tau))
    writer = _write_mat if suffix == ".mat" else _write_h5
    return write_whole(out, lambda tmp: writer(tmp, pts, info, fitted, CONVENTIONS[convention]))   # whole or not at all


def _write_mat(path: Path, pts, info, fitted, convention: str) -> None:
    from scipy.io import savemat

    data = {k: v for k, v in pts.items() if k not in ("ftf", "flags")}
    data.update(ftf_real=pts["ftf"].real, ftf_imag=pts["ftf"].imag, ftf=pts["ftf"],
                flags=np.array(list(pts["flags"]), dtype=object), time_convention=convention, run=info)
    data["models"] = np.array([{k: v for k, v in m.items()} for m in fitted], dtype=object) if fitted else np.zeros(0)
    with open(path, "wb") as fh:
        savemat(fh, data, do_compression=True, oned_as="column")


def _write_h5(path: Path, pts, info, fitted, convention: str) -> None:
    import h5py

    with h5py.File(path, "w") as f:
        f.attrs["format"] = "flamebode-ftf-interchange"
        f.attrs["format_version"] = 1
        f.attrs["time_convention"] = convention
        for k, v in pts.items():
            if k == "flags":
                f.create_dataset(k, data=np.array([str(x) for x in v], dtype=h5py.string_dtype()))
            else:
                f.create_dataset(k, data=v)
        f.create_dataset("ftf_real", data=pts["ftf"].real)
        f.create_dataset("ftf_imag", data=pts["ftf"].imag)
        g = f.create_group("run")
        for k, v in info.items():
            g.attrs[k] = v
        models = f.create_group("models")
        for j, m in enumerate(fitted):
            mg = models.create_group(f"{j + 1}")
            mg.attrs["model"] = m["model"]
            mg.attrs["names"] = np.array(m["names"], dtype=h5py.string_dtype())
            mg.attrs["reduced_chi2"] = m["reduced_chi2"]
            mg.attrs["aic"] = m["aic"]
            mg.attrs["amplitude_ratio"] = m["amplitude_ratio"]
            mg.attrs["covariance_widened_by"] = m["covariance_widened_by"]
            for key in ("values", "covariance", "grid_hz", "grid_ftf", "A", "B", "C", "D"):
                if key in m:
                    mg.create_dataset(key, data=m[key])
            if "tau_s" in m:
                mg.attrs["tau_s"] = m["tau_s"]
