"""Two-terminal Landauer conductance of a built ring, versus field, Fermi energy and gate.

API
---
transmission(ring, *, B=0.0, flux=0.0, energy=None, gate=None) -> float
    Spinless transmission T = Tr(t^dagger t) from lead 0 to lead 1.
conductance(ring, *, B=0.0, flux=0.0, energy=None, gate=None, spin_resolved=False, zeeman=False)
    G in units of e^2/h: spin-degenerate ``G = 2T`` by default; ``G = T_up + T_down`` with
    ``zeeman=True``; the pair ``[G_up, G_down]`` with ``spin_resolved=True``.
field_sweep(ring, *, fields=B_in_T | fluxes=flux_in_Wb, energy=None, gate=None, temperature=0.0,
            l_phi=None, calibrate_l_phi=True, ...)
    ``fields=`` (T) for uniform-field rings, ``fluxes=`` (Wb) for flux-tube rings; the old
    positional form ``field_sweep(ring, values)`` takes the ring's field unit (checked).
energy_sweep(ring, energies, *, B=0.0, flux=0.0, gate=None, spin_resolved=False, zeeman=False)
gate_sweep(ring, potentials, *, B=0.0, flux=0.0, energy=None, spin_resolved=False, zeeman=False)
    Labelled datasets (data variable ``G`` [e^2/h], SI coordinates, full parameter attrs).

Physics
-------
Landauer formula ``G = (e^2/h) sum_sigma T_sigma`` (R. Landauer, Phil. Mag. 21, 863 (1970));
T from kwant's scattering matrix (MUMPS with AMD ordering, docs/engine.md §2.2), at zero
temperature (thermal averaging: :mod:`ringkit.transport.thermal`). Without spin-orbit coupling
the spins are independent and, by default, degenerate: ``G = 2T``. With ``zeeman=True`` the
Zeeman energy ``-sigma g mu_B B/2`` (uniform mode, g from the material) shifts each spin's band
rigidly, so ``T_sigma(E, B) = T(E + sigma g mu_B B/2, B)``; the shift acts on the whole sample
including the leads, as a real field does. In flux-tube mode the arms are field-free, so there
is no Zeeman term. Energies are in J above the band bottom; ``energy=None`` is the material's
Fermi energy.
"""

from __future__ import annotations

from collections.abc import Sequence

import kwant
import kwant.solvers.mumps
import numpy as np
import xarray as xr

from ringkit._validation import ParameterError, check_choice, check_range
from ringkit.tightbinding.builder import TightBindingRing
from ringkit.transport.dataset import make_dataset

__all__ = [
    "transmission",
    "conductance",
    "field_sweep",
    "field_values",
    "energy_sweep",
    "gate_sweep",
]

_SOLVER = kwant.solvers.mumps.Solver()
_SOLVER.options(ordering="amd")
_SPINS = (1, -1)


def _check_ring(ring: object) -> TightBindingRing:
    if not isinstance(ring, TightBindingRing):
        raise ParameterError(
            "ring", type(ring).__name__, "must be a TightBindingRing (call build_ring(device))"
        )
    return ring


def _t_lattice(fsyst, energy_t: float, params: dict) -> float:
    smat = _SOLVER.smatrix(fsyst, energy_t, params=params, in_leads=[0], out_leads=[1])
    return float(smat.transmission(1, 0))


def _spin_energies(ring: TightBindingRing, energy: float, field: float, spin_resolved, zeeman):
    """Energies [J] at which each spin is evaluated (Zeeman shift), and their multiplicity."""
    mat = ring.device.material
    if zeeman and ring.field_mode == "uniform" and mat.g_factor != 0 and field != 0:
        return [energy - mat.zeeman_energy(field, s) for s in _SPINS], [1, 1]
    if spin_resolved:
        return [energy, energy], [1, 1]
    return [energy], [2]


def _energy_or_default(ring: TightBindingRing, energy: float | None) -> float:
    return ring.fermi_energy if energy is None else float(energy)


class _Evaluator:
    """Transmission at many (energy, params) points; leads precalculated per energy."""

    def __init__(self, ring: TightBindingRing, precalc: bool) -> None:
        self.ring = ring
        self.precalc = precalc
        self._cache: dict[float, object] = {}

    def __call__(self, energy_j: float, params: dict) -> float:
        e_t = self.ring.to_lattice_energy(energy_j)
        fsyst = self.ring.fsyst
        if self.precalc:
            if e_t not in self._cache:
                if len(self._cache) > 8:
                    self._cache.clear()
                self._cache[e_t] = fsyst.precalculate(e_t)
            fsyst = self._cache[e_t]
        return _t_lattice(fsyst, e_t, params)


def _point(ev: _Evaluator, energy: float, B: float, flux: float, gate, spin_resolved, zeeman):
    ring = ev.ring
    params = ring.params(B=B, flux=flux, gate=gate)
    energies, mult = _spin_energies(ring, energy, B, spin_resolved, zeeman)
    values = [ev(e, params) for e in energies]
    if spin_resolved:
        return np.array([values[0], values[-1]])
    return float(sum(m * v for m, v in zip(mult, values, strict=True)))


def transmission(
    ring: TightBindingRing,
    *,
    B: float = 0.0,
    flux: float = 0.0,
    energy: float | None = None,
    gate: float | None = None,
) -> float:
    """Spinless transmission T (lead 0 -> lead 1) at ``energy`` [J], field B [T] or flux [Wb].

    Zeeman splitting is not included here (see :func:`conductance`).
    """
    ring = _check_ring(ring)
    e = _energy_or_default(ring, energy)
    return _Evaluator(ring, precalc=False)(e, ring.params(B=B, flux=flux, gate=gate))


def conductance(
    ring: TightBindingRing,
    *,
    B: float = 0.0,
    flux: float = 0.0,
    energy: float | None = None,
    gate: float | None = None,
    spin_resolved: bool = False,
    zeeman: bool = False,
    check_field: bool = True,
) -> float | np.ndarray:
    """Two-terminal conductance in units of e^2/h.

    Parameters
    ----------
    ring : TightBindingRing
    B : float
        Perpendicular field in T (uniform mode).
    flux : float
        Flux through the hole in Wb (flux-tube mode).
    energy : float, optional
        Energy in J above the band bottom (default: Fermi energy of the material).
    gate : float, optional
        Arm-gate potential in J (default: the device's ArmGate).
    spin_resolved : bool
        Return ``[G_up, G_down]`` (each ``(e^2/h) T_sigma``) instead of their sum.
    zeeman : bool
        Include the Zeeman splitting with the material's g factor (uniform mode only).
    check_field : bool
        Warn (FieldRegimeWarning) about lattice artefacts or cyclotron orbits at this B.

    Returns
    -------
    float or ndarray of shape (2,)
    """
    ring = _check_ring(ring)
    B = check_range("B", B, unit="T")
    flux = check_range("flux", flux, unit="Wb")
    if check_field:
        ring.check_field(B, stacklevel=2)
    e = _energy_or_default(ring, energy)
    return _point(_Evaluator(ring, precalc=False), e, B, flux, gate, spin_resolved, zeeman)


def _sweep(ring, name, values, point, spin_resolved, extra_attrs) -> xr.Dataset:
    values = np.asarray(values, dtype=float)
    if values.ndim != 1 or values.size == 0 or not np.all(np.isfinite(values)):
        raise ParameterError(name, values.shape, "must be a non-empty 1D array of finite values")
    ev = _Evaluator(ring, precalc=values.size > 2)
    out = np.array([point(ev, v) for v in values])
    return make_dataset(ring, name, values, out, spin_resolved=spin_resolved, attrs=extra_attrs)


def field_values(ring: TightBindingRing, values=None, *, fields=None, fluxes=None) -> np.ndarray:
    """The sweep values of ``ring``'s field parameter, from exactly one of three spellings.

    Parameters
    ----------
    ring : TightBindingRing
    values : array_like, optional
        Positional form: in the unit of the ring's field mode (T for ``"uniform"``, Wb for
        ``"flux_tube"``). Values that cannot be meant in that unit (a flux-tube sweep beyond
        1e-6 Wb, i.e. 2.4e8 flux quanta, or a uniform sweep whose largest nonzero |B| is below
        1e-9 T) raise :class:`ParameterError`.
    fields : array_like, optional
        Magnetic field B in T; only for ``field_mode="uniform"``.
    fluxes : array_like, optional
        Flux through the hole in Wb; only for ``field_mode="flux_tube"``.

    Returns
    -------
    ndarray
        1-D array in the unit of the ring's field parameter (``ring.field_param``).
    """
    given = [
        n for n, v in (("values", values), ("fields", fields), ("fluxes", fluxes)) if v is not None
    ]
    if len(given) != 1:
        raise ParameterError(
            "fields/fluxes",
            ", ".join(given) or "none",
            "give exactly one: fields= (T, uniform mode), fluxes= (Wb, flux-tube mode) or the "
            "values positionally in the ring's field unit",
        )
    mode = ring.field_mode
    if fields is not None and mode != "uniform":
        raise ParameterError(
            "fields",
            "B in T",
            f"applies to field_mode 'uniform'; this ring is in field_mode '{mode}': "
            "pass the flux through the hole as fluxes= (Wb)",
        )
    if fluxes is not None and mode != "flux_tube":
        raise ParameterError(
            "fluxes",
            "flux in Wb",
            f"applies to field_mode 'flux_tube'; this ring is in field_mode '{mode}': "
            "pass the magnetic field as fields= (T)",
        )
    name = given[0] if given[0] != "values" else ring.field_param
    arr = np.asarray(next(v for v in (values, fields, fluxes) if v is not None), dtype=float)
    if arr.ndim != 1 or arr.size == 0 or not np.all(np.isfinite(arr)):
        raise ParameterError(name, arr.shape, "must be a non-empty 1D array of finite values")
    peak = float(np.max(np.abs(arr)))
    if mode == "flux_tube" and peak > 1e-6:
        raise ParameterError(
            name, peak, "is a flux in Wb in field_mode 'flux_tube' (|flux| <= 1e-6 Wb); "
            "tesla values belong to a uniform-field ring (fields=)", "Wb",
        )  # fmt: skip
    if mode == "uniform" and 0 < peak < 1e-9:
        raise ParameterError(
            name, peak, "is a field B in T in field_mode 'uniform' (largest |B| >= 1e-9 T "
            "or all zero); fluxes in Wb belong to a flux-tube ring (fluxes=)", "T",
        )  # fmt: skip
    return arr


def field_sweep(
    ring: TightBindingRing,
    values: Sequence[float] | np.ndarray | None = None,
    /,
    *,
    fields: Sequence[float] | np.ndarray | None = None,
    fluxes: Sequence[float] | np.ndarray | None = None,
    energy: float | None = None,
    gate: float | None = None,
    spin_resolved: bool = False,
    zeeman: bool = False,
    temperature: float = 0.0,
    l_phi: float | None = None,
    n_probes: int = 100,
    method: str = "auto",
    thermal_tol: float = 1e-4,
    thermal_method: str = "adaptive",
    calibrate_l_phi: bool = True,
    thermal_engine: str = "auto",
) -> xr.Dataset:
    """Conductance versus field: coordinate ``B`` [T] (uniform) or ``flux`` [Wb] (flux tube).

    Parameters
    ----------
    ring : TightBindingRing
    values : array_like, optional
        Positional form, in the unit of the ring's field mode: T for a uniform-field device,
        Wb (flux through the hole) for a flux-tube device (checked by :func:`field_values`).
        Prefer the explicit keywords.
    fields : array_like, optional
        Magnetic field B in T (``field_mode="uniform"`` only; a flux-tube ring raises
        :class:`ParameterError` naming ``fields``).
    fluxes : array_like, optional
        Flux through the hole in Wb (``field_mode="flux_tube"`` only; a uniform-field ring
        raises :class:`ParameterError` naming ``fluxes``).
    energy : float, optional
        Fermi energy in J above the band bottom (default: the material's).
    gate : float, optional
        Arm-gate potential in J (default: the device's ArmGate).
    spin_resolved, zeeman : bool
        See :func:`conductance` (these use the plain kwant path, coherent and at T = 0).
    temperature : float
        Temperature in K; ``G(B, T) = integral G(E, B)(-df/dE) dE`` by the thermal policy
        (:mod:`ringkit.thermal_policy`): energies are added until the estimated error of G at
        every field point is below ``thermal_tol``. The attrs hold ``n_energies``,
        ``thermal_error_estimate``, ``thermal_tol`` and ``thermal_method``.
    l_phi : float, optional
        Phase-coherence length in m, realised by ``n_probes`` floating Büttiker probes along
        both arms (None: fully coherent). The attrs hold the L_phi the probes realise on this
        device, ``l_phi_realised_m`` ± ``l_phi_realised_err_m``, and ``l_phi_status``.
    n_probes : int
        Number of dephasing probes when ``l_phi`` is given.
    method : {"auto", "fast", "kwant"}
        "auto"/"fast": the fast solvers of :mod:`ringkit.transport.sweep` (fixed-pattern MUMPS
        sweep in uniform field, exact low-rank update in flux-tube mode); "kwant": one
        ``kwant.smatrix`` per point (reference path). "auto" uses "kwant" only for
        ``zeeman``/``spin_resolved``.
    thermal_tol : float
        Absolute error goal of the thermal average in e^2/h (default 1e-4).
    thermal_method : {"adaptive", "grid"}
        Rule of the thermal average ("grid": the dense uniform reference).
    calibrate_l_phi : bool
        Default True: calibrate the probe coupling on the device (cached per process; see
        :func:`ringkit.transport.sweep.fast_field_conductance`). False: analytic coupling,
        faster, and the attrs say the realised L_phi is "not measured".
    thermal_engine : {"auto", "spectral", "direct"}
        Finite-temperature engine (see :func:`ringkit.transport.sweep.fast_field_conductance`):
        "auto" uses the spectral engine (:mod:`ringkit.transport.spectral`: one factorization
        per distinct field point, or one for every flux in flux-tube mode, serves all energies)
        at T > 0 without probes, and with at most ``AUTO_MAX_PROBES`` (48) probes in a
        uniform field. The attrs hold ``n_factorizations``.

    Warns once for the largest |B| (see :func:`conductance`).
    """
    ring = _check_ring(ring)
    fields = field_values(ring, values, fields=fields, fluxes=fluxes)
    e = _energy_or_default(ring, energy)
    uniform = ring.field_mode == "uniform"
    check_choice("method", method, ("auto", "fast", "kwant"))
    if uniform:
        ring.check_field(float(np.max(np.abs(fields))), stacklevel=2)
    from ringkit.transport.sweep import check_l_phi

    l_phi = check_l_phi(l_phi, ring.lattice_spacing)
    special = bool(zeeman or spin_resolved)
    extended = bool(temperature) or l_phi is not None
    if method == "auto":
        method = "kwant" if special else "fast"
    if special and method == "fast":
        raise ParameterError("method", "fast", "zeeman/spin_resolved need method='kwant'")
    if method == "kwant" and extended:
        raise ParameterError(
            "method", "kwant", "temperature and l_phi need the fast path (method='auto')"
        )
    attrs = {"energy_J": e, "zeeman": int(zeeman), **_gate_attr(ring, gate)}
    if method == "fast":
        from ringkit.transport.sweep import fast_field_conductance

        res = fast_field_conductance(
            ring,
            fields,
            energy=e,
            gate=gate,
            temperature=temperature,
            l_phi=l_phi,
            n_probes=n_probes,
            thermal_tol=thermal_tol,
            thermal_method=thermal_method,
            calibrate_l_phi=calibrate_l_phi,
            thermal_engine=thermal_engine,
        )
        info = dict(res.info)
        attrs.update(
            temperature_K=info.pop("temperature_K"),
            l_phi_m=info.pop("l_phi_m"),
            solver=info.pop("solver"),
            **info,
        )
        return make_dataset(ring, ring.field_param, fields, res.conductance, attrs=attrs)

    def point(ev, v):
        b, f = (v, 0.0) if uniform else (0.0, v)
        return _point(ev, e, b, f, gate, spin_resolved, zeeman)

    return _sweep(ring, ring.field_param, fields, point, spin_resolved, attrs)


def energy_sweep(
    ring: TightBindingRing,
    energies: Sequence[float] | np.ndarray,
    *,
    B: float = 0.0,
    flux: float = 0.0,
    gate: float | None = None,
    spin_resolved: bool = False,
    zeeman: bool = False,
) -> xr.Dataset:
    """Conductance versus energy [J above the band bottom]: coordinate ``energy``."""
    ring = _check_ring(ring)
    ring.check_field(B, stacklevel=2)

    def point(ev, v):
        return _point(ev, v, B, flux, gate, spin_resolved, zeeman)

    attrs = {_field_attr(ring): B or flux, "zeeman": int(zeeman), **_gate_attr(ring, gate)}
    return _sweep(ring, "energy", energies, point, spin_resolved, attrs)


def gate_sweep(
    ring: TightBindingRing,
    potentials: Sequence[float] | np.ndarray,
    *,
    B: float = 0.0,
    flux: float = 0.0,
    energy: float | None = None,
    spin_resolved: bool = False,
    zeeman: bool = False,
) -> xr.Dataset:
    """Conductance versus arm-gate potential [J]: coordinate ``gate`` (needs an ArmGate)."""
    ring = _check_ring(ring)
    if ring.device.gate is None:
        raise ParameterError("device.gate", None, "must be an ArmGate for a gate sweep")
    ring.check_field(B, stacklevel=2)
    e = _energy_or_default(ring, energy)

    def point(ev, v):
        return _point(ev, e, B, flux, v, spin_resolved, zeeman)

    attrs = {"energy_J": e, _field_attr(ring): B or flux, "zeeman": int(zeeman)}
    return _sweep(ring, "gate", potentials, point, spin_resolved, attrs)


def _field_attr(ring: TightBindingRing) -> str:
    return "B_T" if ring.field_param == "B" else "flux_Wb"


def _gate_attr(ring: TightBindingRing, gate: float | None) -> dict:
    if ring.device.gate is None:
        return {}
    return {"gate_J": ring.device.gate.potential if gate is None else float(gate)}
