"""Multi-terminal rings: the conductance matrix G_ij(B) and four-terminal resistances R_mn,kl(B).

API
---
conductance_matrices(ring, fields, *, energy=None, gate=None, temperature=0.0, l_phi=None,
                     n_probes=100) -> (G, info)
    G (n_fields, N, N) in e^2/h (spin-degenerate) between the N real leads.
conductance_matrix_sweep(ring, fields, **options) -> xarray.Dataset
    The same as a labelled dataset ``G`` (field x i x j) with units and provenance.
gate_conductance_sweep(ring, gates, fields, **options) -> xarray.Dataset
    ``G`` (gate x field x i x j): the input of the electric AB effect (arm-gate sweeps).
resistance_sweep(ds, contacts, *, allow_shared=False) -> xarray.Dataset
    R_mn,kl in h/e^2 (``R``) and in ohm (``R_ohm``) for one or several configurations.
resistance_field_sweep(ring, fields, contacts, *, allow_shared=False, **options)
    Both steps in one call: ``R``/``R_ohm`` (field x config) and the matrices ``G``.
ConductanceMatrixTask, ensemble_conductance_matrices(device, fields, seeds, ...)
    Disorder ensembles on any executor (:func:`ringkit.transport.ensemble.run_ensemble`).
reduce_to_leads(C, n_leads)
    Kron reduction of floating probe terminals.

Physics (docs/multiterminal.md)
-------------------------------
Büttiker's multi-terminal formula (M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986)):
``I_i = sum_j G_ij V_j`` with ``G_ij = -(e^2/h) g_s T_ij`` (i != j) and ``G_jj`` fixed by
current conservation, so rows and columns sum to zero; g_s = 2 (spin degeneracy). The
transmissions come from the fast engines: :class:`ringkit.transport.fastsweep.FieldSweeper`
(uniform field) or :class:`ringkit.transport.lowrank.FluxTubeSweeper` (flux tube). Dephasing
probes (:func:`ringkit.transport.probes.attach_probes`) are floating terminals; their
voltages are eliminated at each energy (Kron reduction), which leaves a conductance matrix
between the real leads that still conserves current. At finite temperature the reduced matrix
is averaged over -df/dE with the one thermal policy (:func:`ringkit.thermal_policy.
energy_average`, adaptive and error-controlled on every matrix element, as ``field_sweep``
does for two terminals); one set of energies and weights serves all elements, so the average
still conserves current and obeys reciprocity. Resistances follow from the averaged matrix,
as measured currents do.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import xarray as xr

from ringkit._validation import ParameterError, check_positive
from ringkit.contacts import Contacts, resistance_from_conductance
from ringkit.thermal_policy import DEFAULT_TOL, energy_average
from ringkit.tightbinding.builder import TightBindingRing
from ringkit.transport.dataset import COORD_META, ring_attrs
from ringkit.transport.fastsweep import FieldSweeper
from ringkit.transport.lowrank import FluxTubeSweeper
from ringkit.transport.sweep import realised_l_phi_info, ring_probes, transmission_bound
from ringkit.units import E2H, K_B

__all__ = [
    "conductance_matrices",
    "conductance_matrix_sweep",
    "gate_conductance_sweep",
    "resistance_sweep",
    "resistance_field_sweep",
    "reduce_to_leads",
    "ConductanceMatrixTask",
    "ensemble_conductance_matrices",
    "OHM_PER_H_E2",
]

OHM_PER_H_E2 = 1.0 / E2H
"""One h/e^2 in ohm (25 812.807... ohm, CODATA via scipy.constants)."""

_TERMINAL_META = {
    "i": {"long_name": "terminal receiving the current I_i (I_i = sum_j G_ij V_j)"},
    "j": {"long_name": "terminal whose voltage V_j drives the current"},
}


def reduce_to_leads(cmat: np.ndarray, n_leads: int) -> np.ndarray:
    """Conductance matrix between the first ``n_leads`` terminals, the others floating.

    ``C_LL - C_LP C_PP^-1 C_PL`` (Schur complement; Büttiker 1986). Terminals with an all-zero
    row and column (uncoupled probes) are dropped first.
    """
    c = np.asarray(cmat, dtype=float)
    n = c.shape[-1]
    if n == n_leads:
        return c.copy()
    flat = c.reshape(-1, n, n)
    coupled = np.any(flat != 0, axis=(0, 2)) | np.any(flat != 0, axis=(0, 1))
    p = [k for k in range(n_leads, n) if coupled[k]]
    lead = list(range(n_leads))
    c_ll = c[..., lead, :][..., :, lead]
    if not p:
        return c_ll
    c_lp = c[..., lead, :][..., :, p]
    c_pl = c[..., p, :][..., :, lead]
    c_pp = c[..., p, :][..., :, p]
    return c_ll - c_lp @ np.linalg.solve(c_pp, c_pl)


def _check_ring(ring: object) -> TightBindingRing:
    if not isinstance(ring, TightBindingRing):
        raise ParameterError(
            "ring", type(ring).__name__, "must be a TightBindingRing (call build_ring(device))"
        )
    return ring


def _sweeper(ring: TightBindingRing, e_t: float, params: dict, probes):
    if ring.field_param == "flux":
        return FluxTubeSweeper(ring.fsyst, energy=e_t, params=params, probes=probes)
    return FieldSweeper(
        ring.fsyst, field_param=ring.field_param, params=params, energy=e_t, probes=probes
    )


def conductance_matrices(
    ring: TightBindingRing,
    fields,
    *,
    energy: float | None = None,
    gate: float | None = None,
    temperature: float = 0.0,
    l_phi: float | None = None,
    n_probes: int = 100,
    thermal_tol: float = DEFAULT_TOL,
    thermal_method: str = "adaptive",
    calibrate_l_phi: bool = True,
) -> tuple[np.ndarray, dict]:
    """Conductance matrices between the real leads over a field sweep.

    Parameters
    ----------
    ring : TightBindingRing
        Built ring with 2 to 4 leads.
    fields : array_like
        B in T (uniform mode) or flux through the hole in Wb (flux-tube mode).
    energy : float, optional
        Fermi energy in J (default: the material's).
    gate : float, optional
        Arm-gate potential in J (default: the device's gate).
    temperature : float
        K; 0 gives one energy.
    l_phi : float, optional
        Phase-coherence length in m (floating dephasing probes along the arms, coupling
        calibrated on the device; ``info`` holds the realised ``l_phi_realised_m`` ±
        ``l_phi_realised_err_m`` and ``l_phi_status``, docs/probes.md "Realised L_phi").
    n_probes : int
        Number of probes when ``l_phi`` is finite.
    thermal_tol : float
        Absolute error goal of every thermally averaged element in e^2/h (default 1e-4).
    thermal_method : {"adaptive", "grid"}
        Rule of :func:`ringkit.thermal_policy.energy_average` ("grid": dense reference).
    calibrate_l_phi : bool
        False: analytic probe coupling (faster; the realised L_phi is "not measured").

    Returns
    -------
    G : ndarray (n_fields, N, N)
        e^2/h, spin-degenerate; rows and columns sum to zero.
    info : dict
        ``solver``, ``n_energies``, ``thermal_error_estimate`` (e^2/h, largest element),
        ``thermal_tol``, ``thermal_method``, ``n_probes``, ``probe_eta``, ``temperature_K``,
        ``l_phi_m``, ``energy_J``.
    """
    ring = _check_ring(ring)
    temperature = check_positive("temperature", temperature, "K", allow_zero=True)
    values = np.atleast_1d(np.asarray(fields, dtype=float))
    if values.ndim != 1 or not np.all(np.isfinite(values)):
        raise ParameterError(ring.field_param, fields, "must be finite numbers (1D)")
    if ring.field_mode == "uniform" and values.size:
        ring.check_field(float(np.abs(values).max()), stacklevel=3)
    e_j = ring.fermi_energy if energy is None else float(energy)
    e_t = ring.to_lattice_energy(e_j)
    params = ring.params(gate=gate)
    # two leads: the default centre (as field_sweep); more leads: the ring's centre, since
    # the interfaces of leads 0 and 1 may sit at any height
    center = None if ring.n_leads == 2 else (0.0, 0.0)
    probes = ring_probes(
        ring, l_phi, e_t, params, n_probes, center=center, calibrate=calibrate_l_phi
    )
    sweeper = _sweeper(ring, e_t, params, probes)
    n_leads = ring.n_leads
    shape = (values.size, n_leads, n_leads)

    def matrices(e: float) -> np.ndarray:
        sw = sweeper if e == e_t else sweeper.at_energy(float(e))
        return reduce_to_leads(sw.conductance_matrix(values), n_leads).ravel()

    kt = K_B * temperature / ring.hopping
    # per spin: G = 2 C, so the tolerance of C is half the tolerance of G
    res = energy_average(
        matrices,
        e_t,
        kt,
        tol=0.5 * thermal_tol,
        method=thermal_method,
        bound=transmission_bound(ring, e_t, temperature, thermal_tol, params) if kt else 1.0,
    )
    total = np.asarray(res.value).reshape(shape)
    info = {
        "solver": type(sweeper).__name__,
        "n_energies": int(res.n_energies),
        "thermal_error_estimate": 2.0 * float(np.max(res.errors, initial=0.0)),
        "thermal_tol": float(thermal_tol),
        "thermal_method": thermal_method if kt else "single energy (T = 0)",
        "temperature_K": temperature,
        "l_phi_m": float("inf") if probes is None else float(l_phi),
        "n_probes": 0 if probes is None else int(np.size(probes.sites)),
        "probe_eta": 0.0 if probes is None else float(np.mean(probes.eta)),
        "energy_J": e_j,
        **realised_l_phi_info(probes),  # the L_phi the probes realise (docs/probes.md)
    }
    return 2.0 * total, info


def _dataset(ring, dims_coords: list, g: np.ndarray, info: dict, extra: dict) -> xr.Dataset:
    n = g.shape[-1]
    coords = {name: (name, vals, meta) for name, vals, meta in dims_coords}
    coords["i"] = ("i", np.arange(n), _TERMINAL_META["i"])
    coords["j"] = ("j", np.arange(n), _TERMINAL_META["j"])
    dims = tuple(name for name, _, _ in dims_coords) + ("i", "j")
    g_attrs = {
        "units": "e^2/h",
        "long_name": "conductance matrix G_ij (both spins), I_i = sum_j G_ij V_j",
    }
    attrs = ring_attrs(ring)
    attrs["title"] = "ringkit multi-terminal conductance matrix"
    attrs["n_terminals"] = int(n)
    attrs["convention"] = "Buttiker, PRL 57, 1761 (1986); docs/multiterminal.md"
    for k, v in {**info, **extra}.items():
        attrs[k] = v if isinstance(v, (int, float, str)) else str(v)
    return xr.Dataset({"G": (dims, g, g_attrs)}, coords=coords, attrs=attrs)


def conductance_matrix_sweep(ring: TightBindingRing, fields, **options) -> xr.Dataset:
    """Labelled conductance matrices over a field sweep (options: :func:`conductance_matrices`).

    Returns a dataset with ``G`` [e^2/h] on (field, i, j), the field coordinate named ``B``
    [T] or ``flux`` [Wb] after the ring's field mode, and the ring's full provenance attrs.
    """
    g, info = conductance_matrices(ring, fields, **options)
    name = ring.field_param
    values = np.atleast_1d(np.asarray(fields, dtype=float))
    return _dataset(ring, [(name, values, dict(COORD_META[name]))], g, info, {})


def gate_conductance_sweep(ring: TightBindingRing, gates, fields, **options) -> xr.Dataset:
    """Conductance matrices over arm-gate potentials [J] and fields: ``G`` (gate, field, i, j).

    The ring's device needs an :class:`ringkit.device.ArmGate`; other options as for
    :func:`conductance_matrices`.
    """
    ring = _check_ring(ring)
    if ring.device.gate is None:
        raise ParameterError("ring.device.gate", None, "must be an ArmGate for a gate sweep")
    if "gate" in options:
        raise ParameterError("gate", options["gate"], "is swept: pass the values as gates")
    vg = np.atleast_1d(np.asarray(gates, dtype=float))
    out, info = [], {}
    for v in vg:
        g, info = conductance_matrices(ring, fields, gate=float(v), **options)
        out.append(g)
    name = ring.field_param
    values = np.atleast_1d(np.asarray(fields, dtype=float))
    dims = [("gate", vg, dict(COORD_META["gate"])), (name, values, dict(COORD_META[name]))]
    return _dataset(ring, dims, np.stack(out), info, {})


def resistance_sweep(
    ds: xr.Dataset, contacts: Contacts | str | Sequence, *, allow_shared: bool = False
) -> xr.Dataset:
    """Four-terminal resistances R_mn,kl from a conductance-matrix dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        From :func:`conductance_matrix_sweep`, :func:`gate_conductance_sweep` or
        :func:`ensemble_conductance_matrices` (``G`` with dims ..., i, j in e^2/h).
    contacts : Contacts, str or list of them
        One or several configurations (``"0,1,2,3"``: current 0 -> 1, voltage V_2 - V_3).
    allow_shared : bool
        Allow two/three-terminal configurations (a voltage contact equal to a current one).

    Returns
    -------
    xarray.Dataset
        ``R`` [h/e^2] and ``R_ohm`` [ohm] with the dims of ``G`` minus (i, j) plus
        ``config`` (labels ``"m,n,k,l"``); attrs of ``ds``.
    """
    if not isinstance(ds, xr.Dataset) or "G" not in ds or ds["G"].dims[-2:] != ("i", "j"):
        raise ParameterError("ds", type(ds).__name__, "must be a dataset with G(..., i, j)")
    if isinstance(contacts, (Contacts, str)) or (
        isinstance(contacts, tuple) and len(contacts) == 4 and not isinstance(contacts[0], str)
    ):
        contacts = [contacts]
    configs = [Contacts.parse(c) for c in contacts]
    g = ds["G"].values
    r = np.stack(
        [resistance_from_conductance(g, c, allow_shared=allow_shared) for c in configs], axis=-1
    )
    dims = ds["G"].dims[:-2] + ("config",)
    coords = {d: ds.coords[d] for d in ds["G"].dims[:-2]}
    coords["config"] = ("config", [str(c) for c in configs], {"long_name": "m,n,k,l"})
    r_attrs = {
        "units": "h/e^2",
        "long_name": "four-terminal resistance R_mn,kl = (V_k - V_l)/I, current m -> n",
    }
    ohm_attrs = {"units": "ohm", "long_name": r_attrs["long_name"]}
    attrs = dict(ds.attrs)
    attrs["ohm_per_h_e2"] = OHM_PER_H_E2
    return xr.Dataset(
        {"R": (dims, r, r_attrs), "R_ohm": (dims, r * OHM_PER_H_E2, ohm_attrs)},
        coords=coords,
        attrs=attrs,
    )


def resistance_field_sweep(
    ring: TightBindingRing,
    fields,
    contacts: Contacts | str | Sequence,
    *,
    allow_shared: bool = False,
    **options,
) -> xr.Dataset:
    """R_mn,kl(B) of one or several configurations over a field sweep, in one call.

    ``options`` as for :func:`conductance_matrices`; the result holds ``R`` [h/e^2],
    ``R_ohm`` [ohm] on (field, config) and the conductance matrices ``G`` (field, i, j).
    Contacts are checked before anything is computed.
    """
    configs = contacts if isinstance(contacts, (list, tuple)) else [contacts]
    if isinstance(contacts, tuple) and len(contacts) == 4 and not isinstance(contacts[0], str):
        configs = [contacts]
    for c in configs:
        Contacts.parse(c).check(_check_ring(ring).n_leads, allow_shared=allow_shared)
    ds = conductance_matrix_sweep(ring, fields, **options)
    return resistance_sweep(ds, configs, allow_shared=allow_shared).assign(G=ds["G"])


@dataclass(frozen=True, eq=False)
class ConductanceMatrixTask:
    """One disorder realization: ``build_ring(device, seed)`` -> G (n_fields, N, N) [e^2/h].

    Picklable; ``options`` are those of :func:`conductance_matrices` (energy, gate,
    temperature, l_phi, n_probes).
    """

    device: object
    values: tuple
    options: tuple = ()

    def __post_init__(self) -> None:
        vals = np.atleast_1d(np.asarray(self.values, dtype=float))
        if vals.ndim != 1 or not np.all(np.isfinite(vals)):
            raise ParameterError("values", self.values, "must be a 1D sequence of finite numbers")
        object.__setattr__(self, "values", tuple(vals.tolist()))
        object.__setattr__(self, "options", tuple(sorted(dict(self.options).items())))

    def __call__(self, seed: int) -> np.ndarray:
        from ringkit.tightbinding import build_ring

        ring = build_ring(self.device, seed=seed)
        g, _ = conductance_matrices(ring, np.asarray(self.values), **dict(self.options))
        return g

    def describe(self) -> dict:
        return {
            "task": "ringkit.transport.multiterminal.ConductanceMatrixTask",
            "device": repr(self.device.to_dict()),
            "values": [repr(v) for v in self.values],
            "options": {k: repr(v) for k, v in self.options},
        }


def ensemble_conductance_matrices(
    device, fields, seeds, *, executor=None, checkpoint=None, progress: bool = False, **options
) -> xr.Dataset:
    """Conductance matrices of a disorder ensemble: ``G`` (seed, field, i, j) [e^2/h].

    Runs :class:`ConductanceMatrixTask` with :func:`ringkit.transport.ensemble.run_ensemble`
    (any executor, incremental checkpoint). Average ``G`` over ``seed`` before forming
    resistances of the ensemble mean; :func:`resistance_sweep` also works per seed.
    """
    from ringkit.tightbinding import build_ring
    from ringkit.transport.ensemble import run_ensemble

    task = ConductanceMatrixTask(device, tuple(np.atleast_1d(fields)), tuple(options.items()))
    res = run_ensemble(task, seeds, executor=executor, checkpoint=checkpoint, progress=progress)
    ring = build_ring(device, seed=int(res.seeds[0]))
    name = ring.field_param
    values = np.asarray(task.values)
    dims = [
        ("seed", np.asarray(res.seeds), {"long_name": "disorder seed"}),
        (name, values, dict(COORD_META[name])),
    ]
    info = {"n_realizations": int(len(res.seeds))}
    info.update({k: v for k, v in options.items() if isinstance(v, (int, float, str))})
    return _dataset(ring, dims, np.asarray(res.values), info, {})
