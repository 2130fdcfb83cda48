"""Büttiker probes along both arms of a ring: dephasing probes and voltage probes.

Model
-----
Each probe is a wide-band reservoir attached to one site: a self-energy ``-i eta/2`` on that
site (distributed-probe model of D'Amato and Pastawski, Phys. Rev. B 41, 7411 (1990); Büttiker,
Phys. Rev. B 33, 3020 (1986)). No sites are added; the escape rate into one probe is
``eta/hbar`` times the probability on its site. A probe is *floating*: no net current flows
into it, so the electrons it absorbs re-enter the ring with a random phase. The two-terminal
conductance follows by eliminating the probe voltages from the conductance matrix (Kron
reduction, :func:`effective_conductance`).

Probe types at finite temperature (:data:`PROBE_TYPES`, :func:`thermal_probe_conductance`)
------------------------------------------------------------------------------------------
* ``"dephasing"`` (energy-conserving dephasing probes, the default everywhere in ringkit): the
  current into every probe vanishes *at each energy*; the Kron reduction is done at every
  energy and the resulting ``G_eff(E)`` is thermally averaged.
* ``"voltage"`` (voltage probes, zero *total* current): only the energy-integrated current
  vanishes; the conductance matrix is thermally averaged first (weights ``-df/dE``) and then
  Kron-reduced. The probe then also relaxes energy (inelastic).
The two agree when ``k_B T`` is small compared with the correlation energy on which the
conductance matrix changes, and differ once ``k_B T`` approaches it (tests/test_probes.py,
docs/probes.md "Probe types").

Coupling from a dephasing length
--------------------------------
Convention (:mod:`ringkit.conventions`): the h/e amplitude is damped as ``exp(-L/L_phi)``
with ``L = path_length(r, 1) = pi r``.

* :func:`coupling_from_l_phi` is the *analytic estimate*: a channel with group velocity v passes
  a site of coupling eta coherently with amplitude ``1/(1 + eta/(2 hbar v/a))`` (exact for a
  single-channel chain), which with probes every ``d`` sites gives
  ``eta = 2 hbar v/a (exp(d/(2 L_phi)) - 1)``, i.e. the rate picture ``1/tau_phi = eta f/hbar``,
  ``L_phi = v tau_phi`` (ballistic) or ``L_phi^2 = D tau_phi`` (diffusive) for ``d << L_phi``.
  :func:`attach_probes` uses it with the probability fraction ``f`` on the probe sites (zero-
  field LDOS) and, on square lattices, the start factor :data:`ANALYTIC_LATTICE_FACTOR`. It is
  NOT a calibration: on disordered multi-channel rings the L_phi it realises scatters between
  0.7x and 2.1x the requested value from device to device (issue 15). Its ``info`` says so
  (``l_phi_realised`` is None).
* :func:`ringkit.transport.probe_calibration.calibrate_probes` measures the realised L_phi on
  the device itself (h/e damping over an energy window, bootstrap error) and adjusts eta by
  secant steps; its probes carry ``l_phi_realised`` and ``l_phi_realised_err``.
  ``attach_probes(..., calibrate=True)`` calls it (flux-tube systems). ringkit's sweeps,
  studies and ensembles calibrate by default (:func:`ringkit.transport.sweep.ring_probes`,
  cached per device: :mod:`ringkit.transport.realised_l_phi`).

Public API
----------
DephasingProbes, ring_probe_sites, attach_probes, coupling_from_l_phi, l_phi_from_coupling,
lead_velocity, local_dos, effective_conductance, conductance_matrix_from_transmission,
thermal_probe_conductance, policy_probe_conductance, PROBE_TYPES, ANALYTIC_LATTICE_FACTOR
"""

from __future__ import annotations

from dataclasses import dataclass, field

import kwant
import numpy as np
import scipy.sparse as sp

from ringkit._validation import ParameterError, check_positive
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY
from ringkit.transport.fastsweep import kron_reduce
from ringkit.transport.probe_types import (  # the probe types, re-exported here
    PROBE_TYPES,
    policy_probe_conductance,
    thermal_probe_conductance,
)

__all__ = [
    "ANALYTIC_LATTICE_FACTOR",
    "CALIBRATION",
    "PROBE_TYPES",
    "DephasingProbes",
    "ring_probe_sites",
    "attach_probes",
    "coupling_from_l_phi",
    "l_phi_from_coupling",
    "lead_velocity",
    "local_dos",
    "conductance_matrix_from_transmission",
    "effective_conductance",
    "thermal_probe_conductance",
    "policy_probe_conductance",
]

CALIBRATION = 1.0
"""Multiplier of the mapped coupling for single-channel networks (exact per probe)."""

ANALYTIC_LATTICE_FACTOR = 0.66
"""Start factor of the analytic estimate on square lattices (mean over narrow test rings of the
old fit; per device the realised L_phi still varies 0.7-2.1x): a first guess for
:func:`ringkit.transport.probe_calibration.calibrate_probes`, not a calibration."""


@dataclass(frozen=True, eq=False)
class DephasingProbes:
    """A set of wide-band self-energy probes on sites of a finalized kwant system.

    Attributes
    ----------
    sites : ndarray of int
        Site indices (kwant order of ``fsyst.sites``).
    eta : float or ndarray
        Coupling Gamma of each probe in the energy units of the Hamiltonian (self-energy
        ``-i eta/2`` on each orbital of the site).
    l_phi : float or None
        Dephasing length the coupling was mapped from (m), for the record.
    info : dict
        Inputs of the mapping (velocity, probe fraction, energy, ...).
    """

    sites: np.ndarray
    eta: float | np.ndarray
    l_phi: float | None = None
    info: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        sites = np.asarray(self.sites, dtype=np.int64)
        object.__setattr__(self, "sites", sites)
        eta = np.asarray(self.eta, dtype=float)
        if np.any(~np.isfinite(eta)) or np.any(eta < 0):
            raise ParameterError("eta", self.eta, "must be >= 0 and finite (energy units of H)")
        if eta.ndim and eta.shape != sites.shape:
            raise ParameterError("eta", self.eta, "scalar or one value per probe site")

    @property
    def n(self) -> int:
        """Number of probes."""
        return len(self.sites)

    def with_eta(self, eta: float | np.ndarray) -> DephasingProbes:
        """The same sites with another coupling."""
        return DephasingProbes(self.sites, eta, None, dict(self.info))


def _positions(fsyst) -> np.ndarray:
    pos = np.array([np.asarray(s.pos, dtype=float) for s in fsyst.sites])
    if pos.ndim != 2 or pos.shape[1] < 2:
        raise ParameterError("fsyst", "system", "sites must have 2D positions")
    return pos[:, :2]


def ring_probe_sites(
    fsyst,
    n_probes: int,
    *,
    center: tuple[float, float] | None = None,
    positions: np.ndarray | None = None,
    across: bool = False,
):
    """Pick ``n_probes`` sites spread evenly along both arms of a two-lead ring.

    The arms are the two angular sectors between the angles of the lead-0 and lead-1
    interfaces (seen from ``center``; default: midpoint of the two interfaces). Each arm gets
    a share of probes proportional to its angular extent; probes sit at the centres of equal
    angular sub-intervals (never at a junction), each on the site nearest to the middle radius
    of its sub-interval. Lead-interface sites are never used.

    With ``across=True`` the radius of probe k is instead ``r_min + (r_max - r_min) u_k`` with
    ``u_k`` the golden-ratio sequence ``(k + 1/2) * 0.618... mod 1``, so that the probes also
    sample the cross-section of wide arms (used by the realised-L_phi calibration: probes only
    on the middle line of a wide arm are avoided by the electrons at strong coupling).

    ``positions`` (n_sites, 2), in kwant's site order and position units, may be given when
    already known (the same numbers as ``site.pos``); otherwise they are read from the sites.

    Returns
    -------
    ndarray of int
        Site indices, ordered counter-clockwise starting after lead 0.
    """
    n_probes = int(n_probes)
    if n_probes < 1:
        raise ParameterError("n_probes", n_probes, "must be >= 1")
    if len(fsyst.lead_interfaces) < 2:
        raise ParameterError("fsyst", "system", "needs two leads to define the arms")
    if positions is None:
        pos = _positions(fsyst)
    else:
        pos = np.asarray(positions, dtype=float)
        if pos.ndim != 2 or pos.shape[0] != len(fsyst.sites) or pos.shape[1] < 2:
            raise ParameterError("positions", pos.shape, f"must be ({len(fsyst.sites)}, 2)")
        pos = pos[:, :2]
    iface0 = np.asarray(fsyst.lead_interfaces[0])
    iface1 = np.asarray(fsyst.lead_interfaces[1])
    if center is None:
        c = 0.5 * (pos[iface0].mean(axis=0) + pos[iface1].mean(axis=0))
    else:
        c = np.asarray(center, dtype=float)
    rel = pos - c
    ang = np.arctan2(rel[:, 1], rel[:, 0])
    rad = np.hypot(rel[:, 0], rel[:, 1])
    a0 = np.arctan2(*(pos[iface0].mean(axis=0) - c)[::-1])
    a1 = np.arctan2(*(pos[iface1].mean(axis=0) - c)[::-1])
    span_a = (a1 - a0) % (2 * np.pi)  # counter-clockwise from lead 0 to lead 1
    n_a = int(round(n_probes * span_a / (2 * np.pi)))
    n_a = min(max(n_a, 1 if n_probes > 1 else 0), n_probes)
    targets = [a0 + span_a * (k + 0.5) / n_a for k in range(n_a)]
    n_b = n_probes - n_a
    span_b = 2 * np.pi - span_a
    targets += [a1 + span_b * (k + 0.5) / n_b for k in range(n_b)]
    half = [span_a / n_a / 2] * n_a + [span_b / max(n_b, 1) / 2] * n_b
    banned = np.zeros(len(pos), bool)
    for iface in fsyst.lead_interfaces:
        banned[np.asarray(iface)] = True
    chosen = []
    golden = (np.sqrt(5.0) - 1.0) / 2.0
    for k, (target, hw) in enumerate(zip(targets, half, strict=True)):
        d = np.abs((ang - target + np.pi) % (2 * np.pi) - np.pi)
        cand = np.flatnonzero((d <= hw) & ~banned)
        if len(cand) == 0:
            raise ParameterError(
                "n_probes", n_probes, "too many probes for this ring (an arm sector is empty)"
            )
        r_mid = 0.5 * (rad[cand].min() + rad[cand].max())
        if across:
            u = ((k + 0.5) * golden) % 1.0
            r_mid = rad[cand].min() + u * (rad[cand].max() - rad[cand].min())
        point = c + r_mid * np.array([np.cos(target), np.sin(target)])
        best = int(cand[np.argmin(np.hypot(*(pos[cand] - point).T))])
        chosen.append(best)
        banned[best] = True
    return np.array(chosen, dtype=np.int64)


def lead_velocity(fsyst, energy: float, params: dict | None = None, lead: int = 0) -> float:
    """Mean longitudinal group velocity of the open channels of ``lead`` at ``energy``.

    In kwant units (lattice spacing x energy unit / hbar): for a chain with hopping t at
    k a = pi/2 this is 2 t a/hbar.
    """
    prop, _ = fsyst.leads[lead].modes(energy, params=dict(params or {}))
    v = np.abs(np.asarray(prop.velocities, dtype=float))
    if v.size == 0:
        raise ParameterError("energy", energy, f"lead {lead} has no open channel there")
    return float(v.mean())


def local_dos(fsyst, energy: float, params: dict | None = None, *, hamiltonian=None) -> np.ndarray:
    """Local density of states of the scattering region per orbital (same values as kwant.ldos).

    ``ldos_i = (G Gamma G^dagger)_ii / (2 pi)`` with ``G = (E - H - Sigma)^-1`` and
    ``Gamma = i (Sigma - Sigma^dagger)`` summed over the leads: the scattering states of all
    lead channels, which is what ``kwant.ldos`` sums. Computed from one sparse LU (MUMPS, AMD
    ordering) and one solve with the ``Gamma`` factors of the lead interfaces as right-hand
    sides, without kwant's wave-function machinery (tests/test_probes.py compares with
    ``kwant.ldos`` to 1e-10).

    Parameters
    ----------
    fsyst : kwant.system.FiniteSystem
        System with leads (not precalculated).
    energy : float
        Energy in Hamiltonian units.
    params : dict, optional
        kwant parameters.
    hamiltonian : scipy.sparse matrix, optional
        ``fsyst.hamiltonian_submatrix(sparse=True, params=params)`` if already evaluated (e.g.
        ``FluxTubeModel.h0``); it must belong to the same ``params``.

    Returns
    -------
    ndarray
        LDOS per orbital in units of 1/(energy unit).
    """
    from ringkit.transport._lowrank_linalg import (
        Factorization,
        gamma_factor,
        lead_self_energies,
    )

    params = dict(params or {})
    if hamiltonian is None:
        hamiltonian = fsyst.hamiltonian_submatrix(sparse=True, params=params)
    h = sp.coo_matrix(hamiltonian, dtype=complex)
    n = h.shape[0]
    rows, cols, data = [h.row, np.arange(n)], [h.col, np.arange(n)], [-h.data]
    data.append(np.full(n, float(energy), dtype=complex))
    offs = np.r_[0, np.cumsum([s.family.norbs or 1 for s in fsyst.sites])]
    sigmas = lead_self_energies(fsyst.leads, params, float(energy), {})
    orbs = []
    for iface, sig in zip(fsyst.lead_interfaces, sigmas, strict=True):
        o = np.concatenate([np.arange(offs[s], offs[s + 1]) for s in iface]).astype(np.int64)
        orbs.append(o)
        rows.append(np.repeat(o, o.size))
        cols.append(np.tile(o, o.size))
        data.append(-np.asarray(sig).ravel())
    a = sp.coo_matrix(
        (np.concatenate(data), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
    )
    a.sum_duplicates()
    factors = [gamma_factor(s) for s in sigmas]
    rhs = np.zeros((n, sum(f.shape[1] for f in factors)), dtype=complex)
    c = 0
    for o, f in zip(orbs, factors, strict=True):
        rhs[o, c : c + f.shape[1]] = f
        c += f.shape[1]
    if rhs.shape[1] == 0:
        return np.zeros(n)
    lu = Factorization()
    if not lu.factor(a):
        raise ParameterError("energy", energy, "E - H - Sigma is singular there (bound state)")
    psi = lu.solve(rhs)
    return (np.abs(psi) ** 2).sum(axis=1) / (2.0 * np.pi)


def coupling_from_l_phi(
    l_phi: float,
    *,
    velocity: float,
    probe_fraction: float,
    diffusion_constant: float | None = None,
    calibration: float = CALIBRATION,
) -> float:
    """Probe coupling eta (energy units, hbar = 1) for a dephasing length.

    Parameters
    ----------
    l_phi : float
        Dephasing length in lattice spacings (intensity convention, module docstring).
    velocity : float
        Mean longitudinal velocity in lattice units (``lead_velocity``).
    probe_fraction : float
        Probe sites per site of the scattering region, 0 < f <= 1.
    diffusion_constant : float, optional
        D in lattice units (a^2 t/hbar); selects the diffusive law ``L_phi^2 = D tau_phi``.
    calibration : float
        Multiplier (default :data:`CALIBRATION`).

    Returns
    -------
    float
        eta such that ``1/tau_phi = eta f/hbar`` reproduces ``l_phi`` (exact single-channel
        form ``eta = 2 v (exp(1/(2 f L_phi)) - 1)`` in the ballistic case).
    """
    l_phi = check_positive("l_phi", l_phi, "lattice spacings")
    v = check_positive("velocity", velocity, "a t/hbar")
    f = check_positive("probe_fraction", probe_fraction)
    if f > 1:
        raise ParameterError("probe_fraction", probe_fraction, "must be <= 1")
    if diffusion_constant is None:
        eta = 2.0 * v * np.expm1(1.0 / (2.0 * f * l_phi))
    else:
        d = check_positive("diffusion_constant", diffusion_constant, "a^2 t/hbar")
        eta = d / (f * l_phi**2)
    return float(calibration * eta)


def l_phi_from_coupling(
    eta: float,
    *,
    velocity: float,
    probe_fraction: float,
    diffusion_constant: float | None = None,
    calibration: float = CALIBRATION,
) -> float:
    """Inverse of :func:`coupling_from_l_phi` (lattice spacings); ``inf`` for eta = 0."""
    eta = check_positive("eta", eta, allow_zero=True) / calibration
    if eta == 0:
        return float("inf")
    f = float(probe_fraction)
    if diffusion_constant is None:
        return float(1.0 / (2.0 * f * np.log1p(eta / (2.0 * float(velocity)))))
    return float(np.sqrt(float(diffusion_constant) / (f * eta)))


def attach_probes(
    fsyst,
    *,
    l_phi: float,
    energy: float,
    n_probes: int = 100,
    lattice_spacing: float = 1.0,
    params: dict | None = None,
    zero_field: dict | None = None,
    diffusion_constant: float | None = None,
    center: tuple[float, float] | None = None,
    calibration: float | str = "auto",
    hamiltonian=None,
    ldos: np.ndarray | None = None,
    positions: np.ndarray | None = None,
    calibrate: bool = False,
    radius: float | None = None,
) -> DephasingProbes:
    """Dephasing probes along both arms of a two-lead ring, coupled for a given ``l_phi``.

    Parameters
    ----------
    fsyst : kwant.system.FiniteSystem
        Two-lead ring; site positions in units of ``lattice_spacing``.
    l_phi : float
        Dephasing length in m (``inf`` gives zero coupling); convention in the module
        docstring (h/e amplitude ~ exp(-L_arm/L_phi)).
    energy : float
        Energy in Hamiltonian units (sets the channel velocity and the LDOS weights).
    n_probes : int
        Number of probes (placed by :func:`ring_probe_sites`).
    lattice_spacing : float
        Length of one position unit in m (the lattice spacing of a ringkit ring). With the
        default 1.0, ``l_phi`` is simply in position units.
    params : dict, optional
        Other kwant parameters (for lead modes and the LDOS).
    zero_field : dict, optional
        The field parameter at zero, e.g. ``{"B": 0.0}`` (needed for the LDOS).
    diffusion_constant : float, optional
        D in lattice units (a^2 t/hbar) for diffusive arms.
    center : (float, float), optional
        Ring centre in position units (default: between the lead interfaces).
    calibration : float or "auto"
        Multiplier of eta; "auto": 1 for single-channel networks, else
        :data:`ANALYTIC_LATTICE_FACTOR` (analytic estimate; ignored with ``calibrate``).
    hamiltonian : scipy.sparse matrix, optional
        The zero-field Hamiltonian (kwant's ``hamiltonian_submatrix`` at ``params`` and
        ``zero_field``) if already evaluated, e.g. ``FluxTubeModel.h0``; saves one evaluation.
    ldos : ndarray, optional
        The zero-field LDOS per orbital if already computed (:func:`local_dos`, or
        ``FluxTubeModel.local_dos`` of the probe-free model); then ``hamiltonian`` is not used.
    positions : ndarray, optional
        Site positions (n_sites, 2) in position units, as :func:`ring_probe_sites` takes them.
    calibrate : bool
        Measure and adjust the realised L_phi on this device
        (:func:`ringkit.transport.probe_calibration.calibrate_probes`; flux-tube systems with
        the flux in Wb as kwant parameter ``"flux"``). Default False: analytic estimate only.
    radius : float, optional
        Mean ring radius in m for the path length ``pi r`` of the calibration (default:
        estimated from the site positions).

    Returns
    -------
    DephasingProbes
        ``info`` holds velocity, probe fraction, calibration factor, energy, the path-length
        convention (``l_phi_convention``) and ``l_phi_realised``/``l_phi_realised_err`` in m
        (None for the analytic estimate, which is not measured on the device).
    """
    if not isinstance(fsyst, kwant.system.FiniteSystem):
        raise ParameterError("fsyst", type(fsyst).__name__, "must be a finalized kwant system")
    a = check_positive("lattice_spacing", lattice_spacing, "m")
    l_phi = check_positive("l_phi", l_phi, "m")
    if calibrate:
        return _calibrated(fsyst, l_phi, energy, n_probes, a, params, radius)
    sites = ring_probe_sites(fsyst, n_probes, center=center, positions=positions)
    full = {**dict(params or {}), **dict(zero_field or {})}
    # probability weight on the probe sites (zero-field LDOS); uniform -> n_probes/n_sites
    if ldos is None:
        ldos = local_dos(fsyst, energy, full, hamiltonian=hamiltonian)
    ldos = np.asarray(ldos, dtype=float)
    offs = np.r_[0, np.cumsum([s.family.norbs or 1 for s in fsyst.sites])]
    f = float(sum(ldos[offs[s] : offs[s + 1]].sum() for s in sites) / ldos.sum())
    v = lead_velocity(fsyst, energy, full)
    if calibration == "auto":
        mean_degree = fsyst.graph.num_edges / fsyst.graph.num_nodes
        calibration = CALIBRATION if mean_degree < 2.5 else ANALYTIC_LATTICE_FACTOR
    calibration = check_positive("calibration", calibration)
    if np.isinf(l_phi):
        eta = 0.0
    else:
        eta = coupling_from_l_phi(
            l_phi / a,
            velocity=v,
            probe_fraction=f,
            diffusion_constant=diffusion_constant,
            calibration=calibration,
        )
    info = {
        "velocity": v,
        "probe_fraction": f,
        "energy": float(energy),
        "lattice_spacing": a,
        "diffusion_constant": diffusion_constant,
        "calibration": calibration,
        L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
        "l_phi_realised": None,
        "l_phi_realised_err": None,
        "l_phi_status": "analytic estimate, not measured on this device (calibrate=True)",
    }
    return DephasingProbes(sites, eta, l_phi, info)


def _calibrated(fsyst, l_phi, energy, n_probes, a, params, radius) -> DephasingProbes:
    """:func:`attach_probes` with ``calibrate=True``: SI in and out, lattice units inside."""
    from ringkit.transport.lowrank import FluxTubeModel
    from ringkit.transport.probe_calibration import calibrate_probes

    model = FluxTubeModel(fsyst, params={k: v for k, v in (params or {}).items()})
    r = None if radius is None else check_positive("radius", radius, "m") / a
    pr = calibrate_probes(model, l_phi / a, energy, n_probes=n_probes, radius=r)
    info = dict(pr.info)
    for key in ("l_phi_requested", "l_phi_realised", "l_phi_realised_err", "path_length", "radius"):
        info[key] = float(info[key]) * a  # lattice spacings -> m
    info["lattice_spacing"] = a
    return DephasingProbes(pr.sites, pr.eta, l_phi, info)


def conductance_matrix_from_transmission(t_matrix: np.ndarray) -> np.ndarray:
    """Conductance matrix (…, n, n) from transmissions ``T[i, j]`` (from j into i).

    ``C_ij = -T_ij`` for i != j and ``C_jj = sum_{i != j} T_ij`` (only off-diagonal T enter);
    units e^2/h per spin. Rows then sum to zero only if the transmissions conserve current.
    """
    t = np.asarray(t_matrix, dtype=float)
    if t.ndim < 2 or t.shape[-1] != t.shape[-2]:
        raise ParameterError("t_matrix", t.shape, "must be square in its last two axes")
    n = t.shape[-1]
    idx = np.arange(n)
    c = -t.copy()
    c[..., idx, idx] = 0.0
    c[..., idx, idx] = -c.sum(axis=-2)
    return c


def effective_conductance(t_matrix: np.ndarray, source: int = 0, drain: int = 1) -> np.ndarray:
    """Two-terminal conductance with all other terminals floating (zero net current).

    Parameters
    ----------
    t_matrix : ndarray (…, n, n)
        Transmissions ``T[i, j]`` from terminal j into terminal i (e^2/h per spin).
    source, drain : int
        The two current-carrying terminals.

    Returns
    -------
    ndarray
        ``G_eff = C_ss + C_sp V_p`` with ``C_pp V_p = -C_ps`` (Buttiker, Phys. Rev. Lett. 57,
        1761 (1986); docs/probes.md "Kron reduction"), in e^2/h per spin.
    """
    return kron_reduce(conductance_matrix_from_transmission(t_matrix), source, drain)
