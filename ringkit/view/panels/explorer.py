"""Device explorer: quick 1D-network preview plus on-demand full tight-binding G(B).

Compute functions (no widgets; tested on their own)
---------------------------------------------------
ExplorerParams
    Frozen dataclass of every control value in SI units, with ``material()``,
    ``geometry()``, ``device()`` and ``network_ring()`` builders (validation happens there).
explorer_preview(params) -> PreviewResult
    Exact single-channel scattering-network ring (:class:`ringkit.analysis.network1d.NetworkRing`)
    with the device's mean radius, arm lengths, Fermi energy, mean free path, L_phi,
    temperature and arm gate; its G(B), spectrum, h/e period and bands. ~0.1-0.3 s.
explorer_full(params, *, report=None) -> FullResult
    Full tight-binding computation (in :mod:`ringkit.view.panels._explorer_full`).

Widget shell
------------
DeviceExplorer
    Controls + one figure (ring, G(B), spectrum). The preview follows every control change;
    "Run tight-binding" starts the full computation in a background thread with a progress
    bar and a Cancel button; both results are drawn together.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace
from typing import Any, Literal

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive, check_range
from ringkit.analysis.network1d import NetworkRing
from ringkit.analysis.spectrum import OscillationSpectrum, ab_bands, oscillation_spectrum
from ringkit.units import PHI0

__all__ = [
    "ExplorerParams",
    "PreviewResult",
    "explorer_preview",
    "preview_field_grid",
    "N_PROBES",
    "DENSITY_RANGE",
    "MOBILITY_RANGE",
]

MATERIALS = ("GaAs", "InAs", "Au")
DENSITY_RANGE = (1e13, 1e19)
"""Accepted sheet density in m^-2 (1e9 to 1e15 cm^-2: depleted to metallic 2D films)."""
MOBILITY_RANGE = (1e-4, 1e3)
"""Accepted mobility in m^2/(V s) (1 to 1e7 cm^2/(V s)); ``inf`` means clean."""
N_PROBES = 40
"""Dephasing probes of the full computation when L_phi is set (also drawn in the sketch)."""


@dataclass(frozen=True)
class ExplorerParams:
    """All device-explorer settings in SI units.

    Parameters
    ----------
    material : {"GaAs", "InAs", "Au"}
        Material preset (:meth:`ringkit.device.Material.preset`).
    radius : float
        Mean ring radius in m.
    width : float
        Width of the upper arm in m.
    width_ratio : float
        Lower-arm width / upper-arm width (> 0).
    lead_angle : float
        Polar angle of the left lead in rad, in (pi/2, 3 pi/2); the right lead sits at 0, so
        the upper arm is ``lead_angle/(2 pi)`` of the circumference (arm length asymmetry).
    fermi_energy : float or None
        Fermi energy in J; None keeps the preset's density. Give this or ``density``.
    density : float or None
        Sheet electron density in m^-2 of the spin-degenerate 2DEG (sets
        ``E_F = pi hbar^2 n/m*``); in (1e13, 1e19) m^-2 (1e9 to 1e15 cm^-2).
    mobility : float or None
        Mobility in m^2/(V s) (sets the elastic mean free path); None = preset value,
        ``inf`` = clean (no disorder).
    l_phi : float or None
        L_phi in m; None = fully coherent.
    temperature : float
        Temperature in K.
    field_min, field_max : float
        Field window in T.
    gate_potential : float
        Potential energy in J on the gated arm.
    gate_arm : {"upper", "lower"}
    coupling : float
        Junction coupling epsilon of the 1D preview, in (0, 1/2].
    lattice_spacing : float or None
        Lattice spacing in m of the full computation (None: the device's default).
    field_mode : {"uniform", "flux_tube"}
        Full computation: uniform field B (flux through arms too) or AB flux tube through
        the hole only (fast low-rank sweep).
    n_field : int or None
        Field points; None chooses ~24 points per h/e period (201..2001).
    seed : int
        Disorder realisation of the full computation.

    Notes
    -----
    The quick preview is a single-channel ring: it uses the mean radius, the arm lengths
    (lead angle), E_F, the mean free path, L_phi, T, the gate and ``coupling``; the arm widths
    (``width``, ``width_ratio``), ``lattice_spacing``, ``field_mode`` and ``seed`` only enter
    the full tight-binding computation.
    """

    material: str = "GaAs"
    radius: float = 0.5e-6
    width: float = 0.1e-6
    width_ratio: float = 1.0
    lead_angle: float = math.pi
    fermi_energy: float | None = None
    density: float | None = None
    mobility: float | None = None
    l_phi: float | None = 2e-6
    temperature: float = 0.1
    field_min: float = -0.02
    field_max: float = 0.02
    gate_potential: float = 0.0
    gate_arm: Literal["upper", "lower"] = "upper"
    coupling: float = 0.5
    lattice_spacing: float | None = None
    field_mode: Literal["uniform", "flux_tube"] = "flux_tube"
    n_field: int | None = None
    seed: int = 0

    def __post_init__(self) -> None:
        check_choice("material", self.material, MATERIALS)
        check_choice("gate_arm", self.gate_arm, ("upper", "lower"))
        check_choice("field_mode", self.field_mode, ("uniform", "flux_tube"))
        check_positive("width_ratio", self.width_ratio)
        if self.density is not None:
            if self.fermi_energy is not None:
                raise ParameterError(
                    "density", self.density, "give fermi_energy or density, not both", "m^-2"
                )
            check_range("density", self.density, *DENSITY_RANGE, unit="m^-2")
        if self.mobility is not None and not math.isinf(self.mobility):
            check_range("mobility", self.mobility, *MOBILITY_RANGE, unit="m^2/(V s)")
        check_range("field_min", self.field_min, unit="T")
        check_range("field_max", self.field_max, unit="T")
        if not self.field_max > self.field_min:
            raise ParameterError(
                "field_max", self.field_max, f"must be > field_min = {self.field_min:g} T", "T"
            )
        check_range("coupling", self.coupling, 0.0, 0.5, inclusive=(False, True))
        if self.n_field is not None and not (int(self.n_field) == self.n_field >= 16):
            raise ParameterError("n_field", self.n_field, "must be an integer >= 16")

    def updated(self, **changes: Any) -> ExplorerParams:
        """Copy with some fields replaced (validated)."""
        return replace(self, **changes)

    # ------------------------------------------------------------------ builders
    def material_obj(self):
        """The :class:`ringkit.device.Material` these settings describe."""
        from ringkit.device.material import Material

        over: dict[str, Any] = {"temperature": self.temperature}
        if self.density is not None:
            over["density"] = self.density
        elif self.fermi_energy is not None:
            over["fermi_energy"] = self.fermi_energy
        if self.mobility is not None:
            over["mobility"] = None if math.isinf(self.mobility) else self.mobility
        if self.l_phi is not None:
            over["l_phi"] = self.l_phi
        mat = Material.preset(self.material, **over)
        if self.l_phi is None and mat.l_phi is not None:
            mat = replace(mat, l_phi=None)
        return mat

    def geometry(self):
        """The :class:`ringkit.device.RingGeometry` (circular ring) of these settings."""
        from ringkit.device.geometry import RingGeometry

        radius = check_positive("radius", self.radius, "m")
        w_up = check_positive("width", self.width, "m")
        w_lo = w_up * self.width_ratio
        w_max = max(w_up, w_lo)
        if not w_max < 2 * radius:
            name, val = ("width", w_up) if w_up >= w_lo else ("width_ratio", self.width_ratio)
            raise ParameterError(
                name, val, f"the wider arm ({w_max:g} m) must be < 2 * radius = {2 * radius:g} m"
            )
        return RingGeometry.circular(
            radius - w_max / 2,
            radius + w_max / 2,
            width_upper=w_up,
            width_lower=w_lo,
            lead_angles=(self.lead_angle, 0.0),
            lead_width=min(w_up, w_lo),
        )

    def network_ring(self) -> NetworkRing:
        """The single-channel network ring used by the quick preview."""
        mat = self.material_obj()
        geo = self.geometry()
        return NetworkRing(
            radius=geo.mean_radius,
            effective_mass=mat.effective_mass,
            fermi_energy=mat.fermi_energy_J,
            arm_fraction=geo.arm_angles[0] / (2 * math.pi),
            coupling=self.coupling,
            gate_potential=self.gate_potential,
            gate_arm=self.gate_arm,
            mean_free_path=mat.elastic_mean_free_path,
            temperature=self.temperature,
            l_phi=self.l_phi,
        )


@dataclass(frozen=True)
class PreviewResult:
    """Quick-preview result.

    Attributes
    ----------
    field : ndarray
        Field in T.
    conductance : ndarray
        G(B) of the 1D network ring in e^2/h.
    spectrum : OscillationSpectrum
        Spectrum of G(B) (Hann window, zero-padded x4 for a smoother line; band rms unchanged).
    period : float
        h/e period ``(h/e)/(pi r_m^2)`` in T.
    bands : dict
        h/e and h/2e frequency bands (1/T) of the finite-width ring.
    amplitude_he : float
        rms of the h/e band content in e^2/h.
    amplitude_h2e : float
        rms of the h/2e band content in e^2/h.
    ring : NetworkRing
    elapsed : float
        Compute time in s.
    notes : tuple of str
        Warnings raised by the computation (e.g. an unconverged thermal average), recorded
        instead of emitted so that the panel can show them.
    """

    field: np.ndarray
    conductance: np.ndarray
    spectrum: OscillationSpectrum
    period: float
    bands: dict[int, tuple[float, float]]
    amplitude_he: float
    amplitude_h2e: float
    ring: NetworkRing
    elapsed: float
    notes: tuple[str, ...] = ()


def preview_field_grid(params: ExplorerParams, period: float) -> np.ndarray:
    """Field grid (T) with ~24 points per h/e period, 201..2001 points (or ``n_field``)."""
    span = params.field_max - params.field_min
    n = params.n_field or int(np.clip(math.ceil(24 * span / period), 201, 2001))
    return np.linspace(params.field_min, params.field_max, int(n))


def _band_rms(spec: OscillationSpectrum, band: tuple[float, float]) -> float:
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # undersampled band -> NaN, shown as "n/a"
        return spec.band_rms(band)


def explorer_preview(params: ExplorerParams) -> PreviewResult:
    """Quick preview: G(B) of the exact single-channel network ring for these settings.

    Raises
    ------
    ParameterError
        Any invalid setting (message names the parameter).
    """
    t0 = time.perf_counter()
    geo = params.geometry()
    ring = params.network_ring()
    period = PHI0 / ring.area
    field = preview_field_grid(params, period)
    import warnings

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        g = ring.conductance(field)
    notes = tuple(dict.fromkeys(f"{w.category.__name__}: {w.message}" for w in caught))
    spec = oscillation_spectrum(field, g, window="hann", pad=4)
    r_in = math.sqrt(geo.area_inner / math.pi)
    r_out = math.sqrt(geo.area_outer / math.pi)
    bands = ab_bands(r_in, r_out)
    return PreviewResult(
        field=field,
        conductance=g,
        spectrum=spec,
        period=period,
        bands=bands,
        amplitude_he=_band_rms(spec, bands[1]),
        amplitude_h2e=_band_rms(spec, bands[2]),
        ring=ring,
        elapsed=time.perf_counter() - t0,
        notes=notes,
    )
