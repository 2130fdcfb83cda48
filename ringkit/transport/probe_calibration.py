"""Per-device calibration of dephasing probes: the L_phi a probe coupling actually realises.

Why per device
--------------
The analytic mapping of :func:`ringkit.transport.probes.coupling_from_lphi` (escape rate
``eta f/hbar`` per unit time, ``L_phi = v tau_phi``; Buttiker, Phys. Rev. B 33, 3020 (1986);
D'Amato and Pastawski, Phys. Rev. B 41, 7411 (1990)) is exact for one channel, but in a
multi-channel disordered arm the velocity, the dwell time and the weight of the probe sites
differ from device to device: the L_phi realised by the mapped coupling scatters between
0.7x and 2.1x the requested value (issue 15). Here the coupling is instead *measured and
adjusted on the device itself*.

Measured quantity (the definition of the realised L_phi)
--------------------------------------------------------
With the convention of :mod:`ringkit.conventions` the h/e amplitude is damped as
``exp(-L/L_phi)``, ``L = path_length(r, 1) = pi r``. On the device, at a set of energies
``E_k`` around the working energy, the h/e Fourier amplitude ``a_k(eta)`` of
``G_eff(flux)`` over one flux period (first harmonic, ``n_flux`` points) is computed with the
probes at coupling ``eta`` and without probes, and

    rho(eta) = sqrt(sum_k a_k(eta)^2 / sum_k a_k(0)^2),     L_phi,realised = -L / ln rho(eta).

The uncertainty is the bootstrap standard deviation over the energies (resampling ``E_k``
with replacement): the sample-specific h/e amplitude varies randomly with energy, so a finite
set of energies determines ``rho`` only to that accuracy.

Calibration
-----------
Starting from the analytic coupling, ``eta`` is adjusted by secant steps on
``ln(-ln rho)`` versus ``ln eta`` (slope 1 in the rate picture) until the realised value is
within ``tol`` of the requested one (typically 1-3 steps). Each step costs only dense solves:
per energy, ONE sparse factorization of ``E - H - Sigma_leads`` (no probes) gives the exact
block of the Green's function on the "keep" orbitals (cut bonds, lead interfaces, probe
sites); any flux and any probe coupling then follow exactly from the Dyson equation in that
block, ``G'_KK = (1 + G_KK D)^-1 G_KK`` (``D`` = change of the cut hoppings plus the probe
self-energies ``-i eta/2``). The tests compare with :class:`FluxTubeSweeper` to 1e-10.

Validated range: ``pi r / L_phi`` in :data:`VALIDATED_DAMPING` (h/e damping factors
0.05-0.78). Weaker dephasing is calibrated at the lower bound and extrapolated linearly in
``eta`` (rate picture: ``1/L_phi`` proportional to ``eta`` at weak coupling); stronger
dephasing is calibrated directly. Both issue a :class:`CalibrationRangeWarning` naming the
range. See docs/probes.md.

Public API
----------
ProbeFluxSolver, calibrate_probes, calibrate_ring_probes (ringkit rings, SI, either field
mode), measure_realised_lphi, he_amplitudes, default_calibration_energies,
CalibrationRangeWarning, VALIDATED_DAMPING
"""

from __future__ import annotations

import contextlib
import math
import warnings
from collections.abc import Sequence

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.conventions import LPHI_CONVENTION, LPHI_CONVENTION_KEY, path_length
from ringkit.transport._lowrank_linalg import (
    Factorization,
    SparsePattern,
    gamma_factor,
    lead_self_energies,
)
from ringkit.transport.fastsweep import kron_reduce
from ringkit.transport.probes import (
    ANALYTIC_LATTICE_FACTOR,
    DephasingProbes,
    coupling_from_lphi,
    ring_probe_sites,
)

__all__ = [
    "VALIDATED_DAMPING",
    "CalibrationRangeWarning",
    "ProbeFluxSolver",
    "default_calibration_energies",
    "he_amplitudes",
    "measure_realised_lphi",
    "calibrate_probes",
    "calibrate_ring_probes",
]

VALIDATED_DAMPING = (0.25, 3.0)
"""Range of ``pi r / L_phi`` on which the calibration is validated (tests/test_probes.py,
benchmarks/bench_lphi_calibration.py)."""


def _one_blas_thread():
    """Small dense blocks: one BLAS thread (threads only contend here); no-op without
    threadpoolctl."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - optional dependency
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


class CalibrationRangeWarning(UserWarning):
    """The requested L_phi lies outside the validated range of the calibration."""


class ProbeFluxSolver:
    """Exact conductance matrices of a flux-tube device for any probe coupling and flux.

    Parameters
    ----------
    model : ringkit.transport.lowrank.FluxTubeModel
        The device WITHOUT probes (its probes, if any, are ignored).
    probe_sites : sequence of int
        Site indices of the probes (kwant order).
    energies : sequence of float
        Energies (Hamiltonian units); one sparse factorization each.

    Notes
    -----
    Terminals are ordered as in :class:`FluxTubeSweeper`: kwant leads first, then the probes.
    """

    def __init__(self, model, probe_sites: Sequence[int], energies: Sequence[float]) -> None:
        self.model = model
        self.probe_sites = np.asarray(probe_sites, dtype=np.int64)
        self.energies = np.atleast_1d(np.asarray(energies, dtype=float))
        if self.energies.ndim != 1 or self.energies.size == 0:
            raise ParameterError("energies", energies, "must be a non-empty 1-D sequence")
        h0, cut, off = model.h0, model.cut, model.offsets
        n = h0.shape[0]
        self.probe_orbitals = [np.arange(off[s], off[s + 1]) for s in self.probe_sites]
        leads = list(model.lead_orbitals)
        sources = [(h0.row, h0.col), (cut.rows, cut.cols), (np.arange(n), np.arange(n))]
        sources += [(np.repeat(o, o.size), np.tile(o, o.size)) for o in leads]
        self._pattern = SparsePattern(n, sources)
        allt = leads + self.probe_orbitals
        keep = np.unique(np.concatenate([cut.rows, cut.cols] + allt))
        self.keep = keep
        self._kc = (np.searchsorted(keep, cut.rows), np.searchsorted(keep, cut.cols))
        self._kt = [np.searchsorted(keep, o) for o in allt]
        self._lu = Factorization()
        self._cache: dict = {}
        self._blocks = [self._factor(e) for e in self.energies]

    def _factor(self, energy: float) -> tuple:
        m, n = self.model, self.model.h0.shape[0]
        sig = lead_self_energies(m.fsyst.leads, m.params, float(energy), self._cache)
        zero = m.cut.entries(0.0)
        for c in (0.2113, 0.4367, 0.0791):
            ref = c * m.flux_period
            vals = [-m.h0.data, -(m.cut.entries(ref) - zero), np.full(n, float(energy))]
            vals += [-s.ravel() for s in sig]
            if self._lu.factor(self._pattern.matrix(self._pattern.fill(vals))):
                break
        else:
            raise ParameterError("energies", energy, "E - H - Sigma is singular there")
        g = self._lu.inverse_block(self.keep)
        return ref, g, [gamma_factor(s) for s in sig]

    @property
    def n_terminals(self) -> int:
        return len(self.model.lead_orbitals) + len(self.probe_sites)

    def conductance_matrices(self, eta, fluxes) -> np.ndarray:
        """Büttiker conductance matrices, shape ``(n_energies, n_flux, n, n)`` (e^2/h per spin).

        ``eta`` is a scalar or one value per probe (energy units); ``fluxes`` in the model's
        flux unit. ``C_ij = -T_ij`` (i != j), ``C_jj = sum_{i != j} T_ij``.
        """
        f = np.atleast_1d(np.asarray(fluxes, dtype=float))
        np_ = len(self.probe_sites)
        eta = np.broadcast_to(np.asarray(eta, dtype=float), (np_,))
        if np.any(~np.isfinite(eta)) or np.any(eta < 0):
            raise ParameterError("eta", eta, "must be finite and >= 0 (energy units)")
        nt = self.n_terminals
        out = np.empty((self.energies.size, f.size, nt, nt))
        with _one_blas_thread():
            for ie in range(self.energies.size):
                out[ie] = self._matrices_at(ie, eta, f)
        return out

    def _matrices_at(self, ie: int, eta: np.ndarray, f: np.ndarray) -> np.ndarray:
        nt, nk = self.n_terminals, self.keep.size
        ref, g, lead_l = self._blocks[ie]
        ls = lead_l + [
            math.sqrt(e) * np.eye(o.size) for e, o in zip(eta, self.probe_orbitals, strict=True)
        ]
        nch = [x.shape[1] for x in ls]
        lmat = np.zeros((nk, sum(nch)), dtype=complex)
        c0 = 0
        for kt, x in zip(self._kt, ls, strict=True):
            lmat[kt, c0 : c0 + x.shape[1]] = x
            c0 += x.shape[1]
        # 1) probes (flux-independent): A_p = A + i eta/2 on the probe orbitals,
        #    G_p = (1 + G D_p)^-1 G  (one dense solve of the keep block per energy and eta)
        dp = np.zeros(nk, dtype=complex)
        for e, kt in zip(eta, self._kt[len(lead_l) :], strict=True):
            dp[kt] += 0.5j * e
        gp = np.linalg.solve(np.eye(nk) + g * dp[None, :], g)
        # 2) flux (Woodbury on the cut entries, as in FluxTubeSweeper): A' = A_p - dH,
        #    L^+ G' L = base + left diag(v) (1 - Q diag(v))^-1 right
        rc, cc = self._kc
        v = self.model.cut.entries(f) - self.model.cut.entries(ref)
        lh = lmat.conj().T
        base = lh @ gp @ lmat
        left, right, q = lh @ gp[:, rc], gp[cc, :] @ lmat, gp[np.ix_(cc, rc)]
        mat = np.eye(rc.size)[None] - q[None] * v[:, None, :]
        y = np.linalg.solve(mat, np.broadcast_to(right, (f.size,) + right.shape))
        z = (v[:, :, None] * y).transpose(1, 0, 2).reshape(rc.size, -1)
        amp = (left @ z).reshape(left.shape[0], f.size, -1).transpose(1, 0, 2) + base[None]
        t2 = np.abs(amp) ** 2
        tm = np.zeros((f.size, nt, nt))
        live = np.flatnonzero(np.asarray(nch) > 0)
        if live.size:
            st = np.r_[0, np.cumsum(nch)][live]
            tm[:, live[:, None], live[None, :]] = np.add.reduceat(
                np.add.reduceat(t2, st, axis=1), st, axis=2
            )
        idx = np.arange(nt)
        tm[:, idx, idx] = 0.0
        c = -tm
        c[:, idx, idx] = tm.sum(axis=1)
        return c

    def effective_conductance(self, eta, fluxes, *, source: int = 0, drain: int = 1):
        """Energy-conserving (dephasing-probe) G_eff per energy, shape (n_energies, n_flux)."""
        cm = self.conductance_matrices(eta, fluxes)
        with _one_blas_thread():
            return kron_reduce(cm, source, drain)


def he_amplitudes(solver: ProbeFluxSolver, eta, n_flux: int = 16) -> np.ndarray:
    """h/e amplitude (first flux harmonic of G_eff, e^2/h per spin) at each solver energy."""
    period = solver.model.flux_period
    flux = np.arange(int(n_flux)) * period / int(n_flux)
    g = solver.effective_conductance(eta, flux)
    return 2.0 * np.abs(np.fft.rfft(g, axis=-1)[:, 1]) / int(n_flux)


def _log_ratio(a_eta: np.ndarray, a0: np.ndarray) -> float:
    return 0.5 * float(np.log(np.sum(a_eta**2) / np.sum(a0**2)))


def _bootstrap(a_eta: np.ndarray, a0: np.ndarray, n_boot: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, a0.size, size=(n_boot, a0.size))
    num, den = (a_eta[idx] ** 2).sum(axis=1), (a0[idx] ** 2).sum(axis=1)
    return 0.5 * np.log(num / den)


def measure_realised_lphi(
    solver: ProbeFluxSolver,
    eta,
    *,
    radius: float,
    n_flux: int = 16,
    n_boot: int = 400,
    seed: int = 0,
    a0: np.ndarray | None = None,
) -> dict:
    """Realised L_phi of probes at coupling ``eta`` on the solver's device (module docstring).

    Parameters
    ----------
    solver : ProbeFluxSolver
    eta : float or array
        Probe coupling(s), energy units.
    radius : float
        Mean ring radius in position units; the path length is
        ``ringkit.conventions.path_length(radius, 1)`` (``pi r``).
    n_flux : int
        Flux points per period for the h/e harmonic.
    n_boot : int
        Bootstrap resamples over the energies.
    a0 : ndarray, optional
        Probe-free amplitudes if already known.

    Returns
    -------
    dict
        ``l_phi_realised``, ``l_phi_realised_err`` (position units), ``log_ratio`` (ln rho),
        ``log_ratio_err``, ``path_length``, ``n_energies`` and the convention text.
    """
    length = path_length(check_positive("radius", radius, "position units"), 1)
    if a0 is None:
        a0 = he_amplitudes(solver, 0.0, n_flux)
    a1 = he_amplitudes(solver, eta, n_flux)
    lr = _log_ratio(a1, a0)
    boots = _bootstrap(a1, a0, n_boot, seed)
    lr_err = float(np.std(boots, ddof=1)) if a0.size > 1 else float("inf")
    lphi = length / -lr if lr < 0 else float("inf")
    err = lphi * lr_err / abs(lr) if lr < 0 else float("inf")
    return {
        "l_phi_realised": float(lphi),
        "l_phi_realised_err": float(err),
        "log_ratio": lr,
        "log_ratio_err": lr_err,
        "path_length": float(length),
        "n_energies": int(a0.size),
        LPHI_CONVENTION_KEY: LPHI_CONVENTION,
    }


def default_calibration_energies(
    energy: float, velocity: float, radius: float, n: int = 16
) -> np.ndarray:
    """``n`` energies around ``energy`` spaced by the loop correlation energy ``v/(2 pi r)``.

    Lattice units (hbar = 1, lengths in lattice spacings): the sample-specific h/e amplitude
    decorrelates over ``hbar v/(2 pi r)``, so the energies are roughly independent samples.
    """
    e_c = float(velocity) / (2.0 * np.pi * float(radius))
    return float(energy) + e_c * (np.arange(int(n)) - 0.5 * (int(n) - 1))


def _estimate_radius(fsyst) -> float:
    pos = np.array([np.asarray(s.pos, dtype=float)[:2] for s in fsyst.sites])
    i0, i1 = (np.asarray(fsyst.lead_interfaces[k]) for k in (0, 1))
    c = 0.5 * (pos[i0].mean(axis=0) + pos[i1].mean(axis=0))
    return float(np.mean(np.hypot(*(pos - c).T)))


def calibrate_probes(
    model,
    l_phi: float,
    energy: float,
    *,
    n_probes: int = 100,
    radius: float | None = None,
    energies: Sequence[float] | None = None,
    n_energies: int = 16,
    tol: float = 0.03,
    max_steps: int = 4,
    n_flux: int = 16,
    seed: int = 0,
) -> DephasingProbes:
    """Probes whose realised L_phi on this device equals ``l_phi`` (module docstring).

    Parameters
    ----------
    model : FluxTubeModel or kwant.system.FiniteSystem
        The flux-tube device (two leads, flux parameter ``"flux"`` for a system).
    l_phi : float
        Requested dephasing length in position units (lattice spacings for ringkit systems),
        convention :data:`ringkit.conventions.LPHI_CONVENTION` (h/e damped by exp(-pi r/L_phi)).
    energy : float
        Working energy (Hamiltonian units).
    n_probes : int
        Probes along both arms (:func:`ring_probe_sites`).
    radius : float, optional
        Mean ring radius (position units); default: mean distance of the sites from the
        midpoint of the lead interfaces.
    energies : sequence, optional
        Calibration energies; default :func:`default_calibration_energies` (``n_energies``).
    tol : float
        Stop when ``|realised/requested - 1| <= tol``.
    max_steps : int
        Maximum number of coupling updates after the analytic start.

    Returns
    -------
    DephasingProbes
        ``info`` holds ``l_phi_requested``, ``l_phi_realised``, ``l_phi_realised_err``,
        ``path_length``, ``calibration_energies``, ``eta_history``, ``lphi_convention``.
    """
    from ringkit.transport.lowrank import FluxTubeModel

    if not isinstance(model, FluxTubeModel):
        model = FluxTubeModel(model)
    if model.n_terminals != 2 or len(model.probe_sites):
        model = model.with_probes(None)
    if not (isinstance(l_phi, (int, float, np.floating)) and l_phi == math.inf):
        l_phi = check_positive("l_phi", l_phi, "position units")
    fsyst = model.fsyst
    r = _estimate_radius(fsyst) if radius is None else check_positive("radius", radius)
    length = path_length(r, 1)
    sites = ring_probe_sites(fsyst, n_probes, across=True)
    prop, _ = fsyst.leads[0].modes(float(energy), params=model.params)
    v = float(np.mean(np.abs(prop.velocities)))
    if energies is None:
        energies = default_calibration_energies(energy, v, r, n_energies)
    info = {
        "l_phi_requested": float(l_phi),
        "path_length": float(length),
        "radius": float(r),
        "energy": float(energy),
        "calibration_energies": [float(e) for e in np.atleast_1d(energies)],
        LPHI_CONVENTION_KEY: LPHI_CONVENTION,
        "method": "per-device h/e damping, secant on the probe coupling (probe_calibration)",
    }
    if math.isinf(l_phi):
        return DephasingProbes(sites, 0.0, l_phi, {**info, "l_phi_realised": math.inf})
    target = length / l_phi
    lo, hi = VALIDATED_DAMPING
    if not lo <= target <= hi:
        warnings.warn(
            f"l_phi = {l_phi:g} gives pi r/L_phi = {target:.3g}, outside the calibration's "
            f"validated range {lo} <= pi r/L_phi <= {hi} (L_phi between {length / hi:.4g} and "
            f"{length / lo:.4g} position units); "
            + ("calibrated at the bound and extrapolated linearly in eta" if target < lo else "")
            + ("calibrated directly, unvalidated" if target > hi else ""),
            CalibrationRangeWarning,
            stacklevel=2,
        )
    aim = max(target, lo)
    solver = ProbeFluxSolver(model, sites, energies)
    a0 = he_amplitudes(solver, 0.0, n_flux)
    f_uniform = len(sites) / model.h0.shape[0]
    lattice = fsyst.graph.num_edges / fsyst.graph.num_nodes >= 2.5
    eta = coupling_from_lphi(
        length / aim,
        velocity=v,
        probe_fraction=f_uniform,
        calibration=ANALYTIC_LATTICE_FACTOR if lattice else 1.0,
    )
    hist: list[tuple[float, float]] = []  # (ln eta, ln(-ln rho)) of damped points
    best = None  # (|ln(-ln rho) - ln aim|, eta, measurement)
    for _ in range(int(max_steps) + 1):
        meas = measure_realised_lphi(solver, eta, radius=r, n_flux=n_flux, seed=seed, a0=a0)
        lr = meas["log_ratio"]
        if lr >= 0:  # no measurable damping: much stronger coupling
            eta *= 4.0
            continue
        miss = abs(math.log(-lr / aim))
        if best is None or miss < best[0]:
            best = (miss, eta, meas)
        hist.append((math.log(eta), math.log(-lr)))
        if abs(-lr / aim - 1.0) <= tol:
            break
        slope = 1.0
        if len(hist) >= 2 and abs(hist[-1][0] - hist[-2][0]) > 1e-12:
            (x0, y0), (x1, y1) = hist[-2], hist[-1]
            slope = (y1 - y0) / (x1 - x0)
            if slope <= 0.05:  # past the maximum damping (strong probes are avoided)
                eta = math.exp(0.5 * (x0 + x1)) if y1 < y0 else math.exp(x1 + 0.5)
                continue
            slope = min(slope, 3.0)
        step = (math.log(aim) - hist[-1][1]) / slope
        eta = math.exp(hist[-1][0] + max(min(step, 2.5), -2.5))
    if best is None:
        raise ParameterError(
            "l_phi", l_phi, "the probes do not damp the h/e amplitude on this device"
        )
    _, eta_meas, meas = best
    if best[0] > math.log1p(max(tol, 3 * meas["log_ratio_err"] / abs(meas["log_ratio"]))):
        warnings.warn(
            f"requested l_phi = {l_phi:g} not reached: the closest coupling realises "
            f"{length / -meas['log_ratio']:.4g} (pi r/L_phi = {-meas['log_ratio']:.3g}); "
            f"validated range {lo} <= pi r/L_phi <= {hi}; more probes (n_probes) damp more",
            CalibrationRangeWarning,
            stacklevel=2,
        )
    lr, lr_err = meas["log_ratio"], meas["log_ratio_err"]
    scale = target / aim
    eta_final = eta_meas * scale
    realised = length / (-lr * scale) if lr < 0 else math.inf
    err = realised * lr_err / abs(lr) if lr < 0 else math.inf
    info.update(
        {
            "l_phi_realised": float(realised),
            "l_phi_realised_err": float(err),
            "log_ratio_at_calibration": float(lr),
            "eta_history": [math.exp(x) for x, _ in hist],
            "n_steps": len(hist),
            "extrapolated": bool(scale != 1.0),
            "velocity": v,
        }
    )
    return DephasingProbes(sites, float(eta_final), float(l_phi), info)


def calibrate_ring_probes(
    ring,
    l_phi: float,
    energy: float,
    *,
    gate: float | None = None,
    n_probes: int = 100,
    **kwargs,
) -> DephasingProbes:
    """:func:`calibrate_probes` for a ringkit ring, SI in and out, either field mode.

    Parameters
    ----------
    ring : ringkit.tightbinding.TightBindingRing
        From :func:`ringkit.tightbinding.build_ring`. A uniform-field ring is calibrated on its
        flux-tube twin (same device and seed, ``field_mode="flux_tube"``: the same sites,
        disorder and hoppings apart from the Peierls phases); the probe sites are mapped back
        by their lattice tags. The realised L_phi is the zero-field value.
    l_phi : float
        Requested L_phi in m (convention :data:`ringkit.conventions.LPHI_CONVENTION`).
    energy : float
        Fermi energy in J above the band bottom.
    gate : float, optional
        Arm-gate potential in J.
    **kwargs
        Passed to :func:`calibrate_probes` (``n_energies``, ``tol``, ...).

    Returns
    -------
    DephasingProbes
        Sites of ``ring.fsyst``; ``info`` lengths in m (``l_phi_realised``,
        ``l_phi_realised_err``, ``path_length``, ``radius``, ``l_phi_requested``).
    """
    import dataclasses

    from ringkit.tightbinding import build_ring
    from ringkit.transport.lowrank import FluxTubeModel

    a = ring.lattice_spacing
    twin = ring
    if ring.field_mode != "flux_tube":
        twin = build_ring(dataclasses.replace(ring.device, field_mode="flux_tube"), seed=ring.seed)
    model = FluxTubeModel(twin.fsyst, params=twin.params(gate=gate))
    l_lat = l_phi if math.isinf(l_phi) else check_positive("l_phi", l_phi, "m") / a
    pr = calibrate_probes(
        model,
        l_lat,
        ring.to_lattice_energy(energy),
        n_probes=n_probes,
        radius=ring.device.geometry.mean_radius / a,
        **kwargs,
    )
    sites = pr.sites
    if twin is not ring:
        index = {tuple(t): i for i, t in enumerate(np.asarray(ring.tags).tolist())}
        try:
            sites = np.array([index[tuple(twin.tags[s].tolist())] for s in pr.sites])
        except KeyError:
            raise ParameterError(
                "ring", "uniform-field ring", "its flux-tube twin has other sites"
            ) from None
    info = dict(pr.info)
    for key in ("l_phi_requested", "l_phi_realised", "l_phi_realised_err", "path_length", "radius"):
        if key in info and info[key] is not None:
            info[key] = float(info[key]) * a
    info["lattice_spacing"] = a
    info["calibrated_on"] = "flux-tube twin" if twin is not ring else "this ring"
    return DephasingProbes(sites, pr.eta, float(l_phi), info)
