"""A complete ring device: material + geometry + gate + numerical (discretisation) choices.

API
---
RingDevice
    Frozen, validated device; ``spacing`` (resolved lattice spacing), ``hopping``,
    ``site_estimate()``, ``check_size()``.
SiteEstimate
    Site count and memory estimate known before building.
DiscretisationWarning, DeviceTooLargeError
    Coarse lattice warning; refusal of a build above ``max_sites``.

Discretisation
--------------
The square lattice (spacing a, hopping ``t = hbar^2/(2 m* a^2)``, band [0, 8t]; chain: [0, 4t])
reproduces the parabolic band with relative error ``1 - 2(1 - cos ka)/(ka)^2 ~ (ka)^2/12``
along the axes (half that along diagonals); at the default bound ``kF a <= 0.5`` this is
2.07 % (see docs/physics.md §3). With ``lattice_spacing=None`` the spacing is
``a = min(max_kfa/kF, narrowest arm/3, r_in/3)`` (so that arms are at least 3 sites wide); a
user spacing with ``kF a > max_kfa`` triggers a :class:`DiscretisationWarning` stating the error.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import KW_ONLY, dataclass
from typing import Any, Literal

from ringkit._validation import ParameterError, check_choice, check_positive, check_range
from ringkit.device.gate import ArmGate
from ringkit.device.geometry import RingGeometry
from ringkit.device.material import Material
from ringkit.units import hopping_energy

__all__ = [
    "RingDevice",
    "SiteEstimate",
    "DiscretisationWarning",
    "DeviceTooLargeError",
    "FIELD_MODES",
    "dispersion_error",
]

FIELD_MODES: tuple[str, ...] = ("uniform", "flux_tube")

# Memory model (docs/engine.md §2.2, 30 010-site ring: Builder ~12 MiB + finalized ~5 MiB,
# i.e. ~590 B per site; MUMPS LU with AMD ordering 27 MB for nnz(LU) = 1.06e6, ~26 B per entry;
# nnz(LU) ~ 0.2 N^1.5 for these quasi-1D rings). An estimate, good to a factor ~2.
_BYTES_PER_SITE = 590.0
_LU_BYTES_PER_ENTRY = 26.0
_LU_FILL_COEFF = 0.2
_BASE_PROCESS_BYTES = 105 * 2**20  # interpreter + numpy/scipy/kwant imports


class DiscretisationWarning(UserWarning):
    """The lattice is coarse: the dispersion error at the Fermi energy exceeds the bound."""


class DeviceTooLargeError(ParameterError):
    """The tight-binding model would exceed ``max_sites`` (message gives the estimate)."""


def dispersion_error(ka: float) -> float:
    """Relative error ``1 - 2(1 - cos ka)/(ka)^2`` of the lattice band along an axis."""
    ka = float(ka)
    if ka == 0:
        return 0.0
    return 1.0 - 2.0 * (1.0 - math.cos(ka)) / ka**2


@dataclass(frozen=True)
class SiteEstimate:
    """Size of the tight-binding model, known before building.

    Attributes
    ----------
    n_sites : int
        Estimated number of lattice sites in the scattering region (ring + lead stubs).
    memory_bytes : float
        Estimated peak memory of a transport calculation in bytes (process baseline included).
    lattice_spacing : float
        Lattice spacing a in m.
    """

    n_sites: int
    memory_bytes: float
    lattice_spacing: float

    def __str__(self) -> str:
        return (
            f"~{self.n_sites:,} sites at a = {self.lattice_spacing:.4g} m, "
            f"estimated memory ~{self.memory_bytes / 2**20:,.0f} MiB"
        )


@dataclass(frozen=True)
class RingDevice:
    """A ring device in SI units together with its discretisation choices.

    Parameters
    ----------
    material : Material
    geometry : RingGeometry
    gate : ArmGate, optional
        Potential on one arm (a kwant parameter ``gate`` of the built system, so gate sweeps
        need no rebuild).
    field_mode : {"uniform", "flux_tube"}
        ``"uniform"``: perpendicular field B [T] on the whole scattering region (Landau gauge,
        field-free leads); ``"flux_tube"``: flux [Wb] through the hole only (branch cut).
    lattice_spacing : float, optional
        Lattice spacing in m; ``None`` chooses it automatically (see module docstring). For a
        chain the spacing is the arc length between sites.
    max_kfa : float
        Bound on ``kF a`` (default 0.5, dispersion error 2.07 %).
    max_sites : int
        Builds above this many sites are refused with the size/memory estimate.
    cut_angle : float
        Polar angle (rad) of the branch cut in flux-tube mode; must avoid the leads.
    lead_stub : int
        Number of lattice columns of each lead kept inside the scattering region (>= 1).

    Raises
    ------
    ParameterError
        Invalid values; Fermi energy outside the lattice band; arms narrower than a lattice
        spacing.
    """

    material: Material
    geometry: RingGeometry
    _: KW_ONLY
    gate: ArmGate | None = None
    field_mode: Literal["uniform", "flux_tube"] = "uniform"
    lattice_spacing: float | None = None
    max_kfa: float = 0.5
    max_sites: int = 200_000
    cut_angle: float = math.pi / 2
    lead_stub: int = 2

    def __post_init__(self) -> None:
        if not isinstance(self.material, Material):
            raise ParameterError("material", self.material, "must be a ringkit Material")
        if not isinstance(self.geometry, RingGeometry):
            raise ParameterError("geometry", self.geometry, "must be a ringkit RingGeometry")
        if self.gate is not None and not isinstance(self.gate, ArmGate):
            raise ParameterError("gate", self.gate, "must be an ArmGate or None")
        check_choice("field_mode", self.field_mode, FIELD_MODES)
        object.__setattr__(self, "max_kfa", check_positive("max_kfa", self.max_kfa))
        if int(self.max_sites) != self.max_sites or self.max_sites < 1:
            raise ParameterError("max_sites", self.max_sites, "must be an integer >= 1")
        if int(self.lead_stub) != self.lead_stub or self.lead_stub < 1:
            raise ParameterError("lead_stub", self.lead_stub, "must be an integer >= 1")
        object.__setattr__(self, "cut_angle", check_range("cut_angle", self.cut_angle, unit="rad"))
        if self.lattice_spacing is not None:
            object.__setattr__(
                self,
                "lattice_spacing",
                check_positive("lattice_spacing", self.lattice_spacing, "m"),
            )
        geo = self.geometry
        if geo.shape == "chain" and geo.n_sites is not None and self.lattice_spacing is not None:
            raise ParameterError(
                "lattice_spacing",
                self.lattice_spacing,
                "must be None when the chain's n_sites is given (give one of them)",
                "m",
            )
        a = self.spacing
        if geo.shape != "chain":
            if geo.min_arm_width < a * (1 - 1e-9):
                raise ParameterError(
                    "lattice_spacing",
                    a,
                    f"must be <= the narrowest arm width {geo.min_arm_width:.4g} m",
                    "m",
                )
            if geo.r_in < a:
                raise ParameterError(
                    "lattice_spacing", a, f"must be <= r_in = {geo.r_in:.4g} m", "m"
                )
        e_f = self.material.fermi_energy_J
        if not e_f < self.band_top:
            raise ParameterError(
                "fermi_energy",
                e_f,
                f"must lie inside the lattice band (0, {self.band_top:.6g}) J for a = {a:.4g} m "
                f"(t = {self.hopping:.6g} J); use a smaller lattice_spacing",
                "J",
            )
        kfa = self.kfa
        user_spacing = self.lattice_spacing is not None or geo.n_sites is not None
        if user_spacing and kfa > self.max_kfa * (1 + 1e-9):
            warnings.warn(
                f"coarse lattice: kF*a = {kfa:.3g} > {self.max_kfa:g}; the lattice band deviates "
                f"from the parabolic one by {100 * dispersion_error(kfa):.2g} % at E_F "
                f"(a = {a:.4g} m, kF = {self.material.fermi_wavevector:.4g} 1/m)",
                DiscretisationWarning,
                stacklevel=3,
            )

    # ---------------------------------------------------------------- discretisation
    @property
    def spacing(self) -> float:
        """Resolved lattice spacing a in m (given or automatic).

        For a chain the spacing is the arc length ``2 pi R/N`` with N from ``n_sites``, from
        ``lattice_spacing`` (rounded to a whole number of sites) or from ``max_kfa``.
        """
        geo = self.geometry
        if geo.shape == "chain":
            circumference = 2 * math.pi * geo.r_in
            if geo.n_sites is not None:
                n = geo.n_sites
            elif self.lattice_spacing is not None:
                n = max(4, round(circumference / self.lattice_spacing))
            else:
                n = max(4, math.ceil(circumference * self.material.fermi_wavevector / self.max_kfa))
            return circumference / n
        if self.lattice_spacing is not None:
            return float(self.lattice_spacing)
        a = self.max_kfa / self.material.fermi_wavevector
        return min(a, geo.min_arm_width / 3, geo.r_in / 3)

    @property
    def n_chain_sites(self) -> int | None:
        """Number of chain sites (None for 2D rings)."""
        geo = self.geometry
        if geo.shape != "chain":
            return None
        if geo.n_sites is not None:
            return geo.n_sites
        return round(2 * math.pi * geo.r_in / self.spacing)

    @property
    def hopping(self) -> float:
        """Hopping ``t = hbar^2/(2 m* a^2)`` in J."""
        return hopping_energy(self.material.effective_mass, self.spacing)

    @property
    def band_top(self) -> float:
        """Top of the lattice band in J (8t for 2D, 4t for a chain)."""
        return (4.0 if self.geometry.shape == "chain" else 8.0) * self.hopping

    @property
    def kfa(self) -> float:
        """``kF a`` (continuum kF of the material)."""
        return self.material.fermi_wavevector * self.spacing

    @property
    def dispersion_error(self) -> float:
        """Relative lattice dispersion error at E_F along a lattice axis."""
        return dispersion_error(self.kfa)

    # ---------------------------------------------------------------- size estimate
    def site_estimate(self) -> SiteEstimate:
        """Number of sites and memory, estimated from areas (no lattice is built)."""
        a = self.spacing
        geo = self.geometry
        stub = self.lead_stub
        if geo.shape == "chain":
            n = self.n_chain_sites + geo.n_leads * stub
        else:
            n = (geo.area_outer - geo.area_inner) / a**2
            xo = geo.outer_extent
            for idx in range(geo.n_leads):  # every lead's stub (docs/multiterminal.md)
                lw = float(geo.lead_width_of(idx))
                yc = abs(geo.lead_center(idx))
                inner_x = math.sqrt(max(xo**2 - (yc + lw / 2) ** 2, 0.0))
                n += (lw / a + 1) * (stub * a + (xo - inner_x)) / a
        n = int(math.ceil(n))
        mem = (
            _BASE_PROCESS_BYTES
            + _BYTES_PER_SITE * n
            + _LU_BYTES_PER_ENTRY * _LU_FILL_COEFF * n**1.5
        )
        return SiteEstimate(n_sites=n, memory_bytes=float(mem), lattice_spacing=a)

    def check_size(self) -> SiteEstimate:
        """Return the estimate, or raise :class:`DeviceTooLargeError` above ``max_sites``."""
        est = self.site_estimate()
        if est.n_sites > self.max_sites:
            raise DeviceTooLargeError(
                "n_sites",
                est.n_sites,
                f"must be <= max_sites = {self.max_sites:,}; {est}. Increase lattice_spacing "
                "(coarser, see max_kfa), shrink the ring, or raise max_sites",
            )
        return est

    # ---------------------------------------------------------------- I/O
    def to_dict(self) -> dict[str, Any]:
        """Nested plain dict of all parameters (JSON-serialisable)."""
        d = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "_"}
        d["material"] = self.material.to_dict()
        d["geometry"] = self.geometry.to_dict()
        d["gate"] = None if self.gate is None else dataclasses.asdict(self.gate)
        return d

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> RingDevice:
        """Inverse of :meth:`to_dict`."""
        data = dict(data)
        data["material"] = Material.from_dict(data["material"])
        data["geometry"] = RingGeometry.from_dict(data["geometry"])
        if data.get("gate") is not None:
            data["gate"] = ArmGate(**data["gate"])
        return cls(**data)
