"""Simulated amplitude-versus-radius datasets: device family, compact JSON file, loader.

The size-scaling panel shows quantile bands of the h/e and h/2e rms amplitudes computed from
disorder ensembles of simulated rings (issue 13, point 5). :class:`SizeFamily` describes the
rings of one such dataset (material, width, field mode, T, L_phi, flux window, radii);
:func:`size_dataset_from_result` turns the output of
:func:`ringkit.transport.amplitude_size.amplitude_vs_radius` into a small JSON-able dict, and
:func:`load_size_dataset` reads and checks it. The shipped dataset
``ringkit/data/amplitude_size_gaas.json`` is computed by ``benchmarks/bench_amplitude_size.py``
(docs/amplitude-model.md, "Size dataset"). No kwant here.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from ringkit._validation import ParameterError

__all__ = [
    "SizeFamily",
    "SIZE_DATASET_PATH",
    "SIZE_DATASET_FORMAT",
    "size_dataset_from_result",
    "load_size_dataset",
]

SIZE_DATASET_PATH = Path(__file__).resolve().parent.parent / "data" / "amplitude_size_gaas.json"
"""The shipped dataset (package data)."""

SIZE_DATASET_FORMAT = "ringkit-amplitude-size/1"

_BANDS = ("q16", "median", "q84")


@dataclass(frozen=True)
class SizeFamily:
    """Rings of one amplitude-versus-radius dataset (SI units).

    Parameters
    ----------
    material : str
        Material preset name (``ringkit.device.Material.preset``), its density and mobility.
    mean_free_path : float or None
        Elastic mean free path in m overriding the preset's mobility (None: preset).
    width : float
        Arm width in m.
    radii : tuple of float
        Mean radii in m.
    temperature : float
        K.
    l_phi : float
        Requested phase-coherence length in m (dephasing probes, analytic coupling).
    field_mode : str
        ``"flux_tube"`` (flux through the hole only) or ``"uniform"``.
    periods, points_per_period : int
        Flux window: ``periods`` h/e periods, ``points_per_period`` points each.
    calibrate_l_phi : bool
        Probe coupling calibrated on each ring so that it realises ``l_phi`` (ringkit's
        default), or the analytic estimate (False; the realised L_phi is then only known from
        the law fit through the bands).
    """

    material: str = "GaAs"
    mean_free_path: float | None = None
    width: float = 120e-9
    radii: tuple = (0.3e-6, 0.4e-6, 0.5e-6, 0.7e-6, 1.0e-6)
    temperature: float = 0.0
    l_phi: float = 2e-6
    field_mode: str = "flux_tube"
    periods: int = 5
    points_per_period: int = 12
    calibrate_l_phi: bool = True

    def material_obj(self):
        """The :class:`ringkit.device.Material` preset."""
        from ringkit.device import Material

        if self.mean_free_path is None:
            return Material.preset(self.material)
        return Material.preset(self.material, mean_free_path=self.mean_free_path)

    def device(self, radius: float):
        """:class:`ringkit.device.RingDevice` of mean radius ``radius`` (m)."""
        from ringkit.device import RingDevice, RingGeometry

        geo = RingGeometry.from_mean_radius(radius, self.width)
        return RingDevice(self.material_obj(), geo, field_mode=self.field_mode)

    def fluxes(self) -> np.ndarray:
        """Flux values in Wb (``periods`` h/e periods)."""
        from ringkit.units import PHI0

        n = self.periods * self.points_per_period
        return np.arange(n) / self.points_per_period * PHI0

    def n_modes(self) -> int:
        """Open transverse modes of one arm, floor(kF w/pi)."""
        return max(1, int(self.material_obj().fermi_wavevector * self.width / math.pi))

    def model_kwargs(self) -> dict:
        """Keywords of :func:`ringkit.analysis.scaling.predict_amplitudes` for this family."""
        mat = self.material_obj()
        return {
            "l_phi": self.l_phi,
            "temperature": self.temperature,
            "mean_free_path": mat.elastic_mean_free_path,
            "fermi_velocity": mat.fermi_velocity,
            "n_modes": self.n_modes(),
        }

    def fit_kwargs(self) -> dict:
        """Keywords of the law fit in ``amplitude_vs_radius`` (model + effective L_phi free)."""
        return {**self.model_kwargs(), "fit_l_phi": True, "conductance": None}

    def key(self) -> dict:
        """Parameters that identify the family (compared with the panel's settings)."""
        mat = self.material_obj()
        return {
            "material": self.material,
            "density_m2": float(mat.density) if mat.density is not None else None,
            "mobility_m2_per_Vs": float(mat.mobility) if mat.mobility is not None else None,
            "mean_free_path_m": float(mat.elastic_mean_free_path),
            "width_m": float(self.width),
            "temperature_K": float(self.temperature),
            "l_phi_m": float(self.l_phi),
            "field_mode": self.field_mode,
            "probe_coupling": "calibrated" if self.calibrate_l_phi else "analytic",
        }

    def describe(self) -> str:
        """One line: material, density, mobility, width, T, L_phi, radii, field mode."""
        k = self.key()
        dens = "?" if k["density_m2"] is None else f"{k['density_m2'] * 1e-4:.3g} cm^-2"
        mob = "?" if k["mobility_m2_per_Vs"] is None else f"{k['mobility_m2_per_Vs']:.3g} m^2/(V s)"
        radii = ", ".join(f"{r * 1e6:.2g}" for r in self.radii)
        return (
            f"{self.material} ({dens}, mobility {mob}, l = {k['mean_free_path_m'] * 1e6:.3g} um), "
            f"arms {self.width * 1e9:.0f} nm, T = {self.temperature:g} K, "
            f"dephasing probes ({k['probe_coupling']} coupling) set for L_phi = "
            f"{self.l_phi * 1e6:g} um, radii {radii} um, "
            f"{self.field_mode} field"
        )


def size_dataset_from_result(result: dict, family: SizeFamily, *, versions=None) -> dict:
    """Compact JSON-able dict of an :func:`amplitude_vs_radius` result for ``family``."""
    arrays = {"radius_m": result["radius"]}
    for name in ("he", "h2e"):
        for lab in _BANDS:
            arrays[f"{name}_{lab}"] = result[f"{name}_{lab}"]
            arrays[f"{name}_{lab}_err"] = result[f"{name}_{lab}_err"]
    arrays["mean_g_median"] = result["mean_g_median"]
    stats = result.get("statistics") or []
    out = {
        "format": SIZE_DATASET_FORMAT,
        "units": "m (radius), e^2/h (amplitudes rms, G)",
        "family": {**asdict(family), "radii": list(family.radii)},
        "device": family.key(),
        "description": family.describe(),
        **{k: [float(x) for x in np.asarray(v, dtype=float)] for k, v in arrays.items()},
        "n_realizations": [int(x) for x in result["n_realizations"]],
        "stop_reason": list(result["stop_reason"]),
        "seed0": [int(s.info.get("seed0", 0)) for s in stats],
        "wall_time_s": [float(s.info.get("wall_time_s", float("nan"))) for s in stats],
        "n_energies_median": [float(s.info.get("n_energies_median", 1)) for s in stats],
        # realised L_phi of calibrated probes per radius (median over realizations; NaN -> null
        # when the coupling was not calibrated)
        "l_phi_realised_median_m": _jsonable(
            [float(s.info.get("l_phi_realised_median_m", float("nan"))) for s in stats]
        ),
        "l_phi_status": [str(s.info.get("l_phi_status", "not recorded")) for s in stats],
        "fit": _jsonable(result.get("fit")),
        "fit_error": result.get("fit_error"),
        "versions": versions or {},
        "regenerate": "OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_amplitude_size.py",
    }
    return out


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, np.ndarray)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        return None if not math.isfinite(float(obj)) else float(obj)
    if isinstance(obj, (np.integer, int)) and not isinstance(obj, bool):
        return int(obj)
    return obj


def load_size_dataset(path=None) -> dict:
    """Read and check a size dataset (default: the shipped one).

    Returns the dict with arrays as numpy arrays and ``family`` as a :class:`SizeFamily`.
    Raises ParameterError naming the file when it is not a size dataset or is inconsistent.
    """
    p = SIZE_DATASET_PATH if path is None else Path(path)
    try:
        data = json.loads(p.read_text())
    except (OSError, ValueError) as exc:
        raise ParameterError(
            "size dataset", str(p), f"must be a readable JSON file ({exc})"
        ) from None
    if data.get("format") != SIZE_DATASET_FORMAT:
        raise ParameterError("size dataset", str(p), f"must have format {SIZE_DATASET_FORMAT}")
    fam = dict(data["family"])
    fam["radii"] = tuple(fam["radii"])
    data["family"] = SizeFamily(**fam)
    n = len(data["radius_m"])
    keys = ["radius_m", "mean_g_median"] + [
        f"{name}_{lab}{e}" for name in ("he", "h2e") for lab in _BANDS for e in ("", "_err")
    ]
    for k in keys:
        arr = np.asarray(data[k], dtype=float)
        if arr.shape != (n,):
            raise ParameterError("size dataset", str(p), f"'{k}' must have {n} values")
        data[k] = arr
    if data["family"].key() != data["device"]:
        raise ParameterError(
            "size dataset", str(p), "device description does not match its family (edited?)"
        )
    return data
