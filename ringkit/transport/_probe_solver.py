"""Exact conductance matrices of a flux-tube device for any probe coupling and flux.

Used by :mod:`ringkit.transport.probe_calibration` (module docstring there): per energy ONE
sparse factorization of ``E - H - Sigma_leads`` and the block of its inverse on the cut,
lead-interface and probe orbitals; probes are folded in by a dense Dyson solve, the flux by the
Woodbury update of :class:`ringkit.transport.lowrank.FluxTubeSweeper`. The block comes from one
MUMPS Schur complement onto those orbitals (:mod:`ringkit.transport._lowrank_schur`; pivoting
LU and selected inverse when that elimination meets a null pivot). Also the realised-L_phi
measurement (h/e damping with a bootstrap error over the energies).
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Sequence

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY, path_length
from ringkit.transport._lowrank_linalg import (
    Factorization,
    SparsePattern,
    gamma_factor,
    lead_self_energies,
)
from ringkit.transport._lowrank_schur import (
    MAX_UNITARITY_RESIDUAL,
    SchurInverse,
    unitarity_residual,
)
from ringkit.transport.fastsweep import kron_reduce

__all__ = ["BlockPool", "ProbeFluxSolver", "he_amplitudes", "measure_realised_l_phi"]


_CONTROLLER: list = []  # lazily created threadpoolctl controller (None: not installed)


def _one_blas_thread():
    """Small dense blocks: one BLAS thread (threads only contend here); no-op without
    threadpoolctl. The library scan is done once per process (it costs ~7 ms)."""
    if not _CONTROLLER:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:  # pragma: no cover - optional dependency
            _CONTROLLER.append(None)
        else:
            _CONTROLLER.append(ThreadpoolController())
    if _CONTROLLER[0] is None:  # pragma: no cover - optional dependency
        return contextlib.nullcontext()
    return _CONTROLLER[0].limit(limits=1, user_api="blas")


# (solver, then) a forked block worker evaluates; set by the parent right before the fork
_TASK: list = []


def _block_of(solver, then, energy: float) -> tuple:
    with _one_blas_thread():
        block = solver.block(energy)
        return block, (None if then is None else then(block))


def _block_task(energy: float) -> tuple:
    return _block_of(*_TASK[0], energy)  # in a forked worker


class BlockPool:
    """``pool(energies) -> [(block, then(block)), ...]``: :meth:`ProbeFluxSolver.block` per
    energy, in forked worker processes when worth it.

    As :class:`ringkit.transport.energy_pool.EnergyPool` (same worker count
    :func:`~ringkit.transport.energy_pool.thermal_workers`, same rule: workers only when the
    first energy, evaluated here, took longer than ``MIN_SECONDS_PER_ENERGY``): the workers
    inherit the solver (pattern, symbolic analysis) by ``fork`` and run the same code with one
    BLAS thread, so the blocks equal the serial ones. ``then(block)`` (optional) is evaluated
    with each block where it was computed (e.g. the conductance at the current coupling); the
    workers keep the ``solver`` and ``then`` of their start for the life of the pool.
    """

    def __init__(self, solver, then=None, *, workers: int | None = None) -> None:
        from ringkit.transport.energy_pool import thermal_workers

        self.solver, self.then = solver, then
        self.workers = thermal_workers(workers)
        self.used_workers = 1
        self.seconds_per_energy = float("nan")
        self._pool = None

    def __enter__(self) -> BlockPool:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Stop the workers (if any were started)."""
        if self._pool is not None:
            self._pool.terminate()
            self._pool.join()
            self._pool = None
            _TASK.clear()

    def __call__(self, energies: Sequence[float]) -> list:
        import multiprocessing
        import time

        from ringkit.transport import energy_pool

        energies = [float(e) for e in energies]
        out = []
        if energies and self._pool is None and self.seconds_per_energy != self.seconds_per_energy:
            t0 = time.perf_counter()
            out.append(_block_of(self.solver, self.then, energies[0]))
            self.seconds_per_energy = time.perf_counter() - t0
            energies = energies[1:]
        fast = not self.seconds_per_energy > energy_pool.MIN_SECONDS_PER_ENERGY
        if self.workers < 2 or len(energies) < 2 or (fast and self._pool is None):
            return out + [_block_of(self.solver, self.then, e) for e in energies]
        if self._pool is None:
            _TASK[:] = [(self.solver, self.then)]  # inherited by the forked workers
            self._pool = multiprocessing.get_context("fork").Pool(self.workers)
            self.used_workers = self.workers
        return out + self._pool.map(_block_task, energies, chunksize=1)


class ProbeFluxSolver:
    """Exact conductance matrices of a flux-tube device for any probe coupling and flux.

    Parameters
    ----------
    model : ringkit.transport.lowrank.FluxTubeModel
        The device WITHOUT probes (its probes, if any, are ignored).
    probe_sites : sequence of int
        Site indices of the probes (kwant order).
    energies : sequence of float or None
        Energies (Hamiltonian units); one sparse factorization each. None: no energy yet (use
        :meth:`block` per energy, as the explorer's live view does).
    workers : int, optional
        Processes for the blocks of ``energies`` (:class:`BlockPool`; default 1: serial,
        None: :func:`ringkit.transport.energy_pool.thermal_workers`). Same values either way.

    Notes
    -----
    Terminals are ordered as in :class:`FluxTubeSweeper`: kwant leads first, then the probes.
    """

    def __init__(self, model, probe_sites: Sequence[int], energies: Sequence[float] | None,
                 *, workers: int | None = 1) -> None:  # fmt: skip
        self.model = model
        self.probe_sites = np.asarray(probe_sites, dtype=np.int64)
        lazy = energies is None
        self.energies = np.atleast_1d(np.asarray([] if lazy else energies, dtype=float))
        if self.energies.ndim != 1 or (self.energies.size == 0 and not lazy):
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
        self._schur = SchurInverse(self._pattern.rows, self._pattern.cols, n, keep)
        self._cache: dict = {}
        self._classes_of: tuple | None = None  # (fluxes, representatives, inverse)
        with BlockPool(self, workers=workers) as pool:
            self._blocks = [b for b, _ in pool(list(self.energies))]
            self.workers_used = pool.used_workers

    def block(self, energy: float) -> tuple:
        """The flux- and coupling-independent data of one energy (one sparse factorization):
        ``(reference flux, G block on the keep orbitals, lead Gamma factors)``; use with
        :meth:`block_matrices` / :meth:`block_effective`."""
        return self._factor(energy)

    def _factor(self, energy: float) -> tuple:
        m, n = self.model, self.model.h0.shape[0]
        sig = lead_self_energies(m.fsyst.leads, m.params, float(energy), self._cache)
        factors = [gamma_factor(s) for s in sig]
        zero = m.cut.entries(0.0)
        for c in (0.2113, 0.4367, 0.0791):
            ref = c * m.flux_period
            vals = [-m.h0.data, -(m.cut.entries(ref) - zero), np.full(n, float(energy))]
            vals += [-s.ravel() for s in sig]
            data = self._pattern.fill(vals)
            # the block from one Schur complement onto ``keep``, unless a guard of
            # _lowrank_schur fires (energy on an eigenvalue of the closed interior): then LU
            g = self._schur.inverse_block(data)
            if g is not None and self._unitarity(g, factors) <= MAX_UNITARITY_RESIDUAL:
                break
            if self._lu.factor(self._pattern.matrix(data)):
                g = self._lu.inverse_block(self.keep)
                break
        else:
            raise ParameterError("energies", energy, "E - H - Sigma is singular there")
        return ref, g, factors

    def _unitarity(self, g: np.ndarray, factors: list[np.ndarray]) -> float:
        """:func:`unitarity_residual` of the lead-channel amplitudes of the block ``g`` (no
        probes attached here, so the leads are every terminal)."""
        rows = np.concatenate(self._kt[: len(factors)])
        lmat = np.zeros((rows.size, sum(f.shape[1] for f in factors)), dtype=complex)
        r0 = c0 = 0
        for f in factors:
            lmat[r0 : r0 + f.shape[0], c0 : c0 + f.shape[1]] = f
            r0, c0 = r0 + f.shape[0], c0 + f.shape[1]
        return float(unitarity_residual(lmat.conj().T @ g[np.ix_(rows, rows)] @ lmat))

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
        return self.block_matrices(self._blocks[ie], eta, f)

    def block_matrices(self, block: tuple, eta, f: np.ndarray, active=None) -> np.ndarray:
        """Conductance matrices (e^2/h per spin), shape ``(n_flux, n, n)``, of one :meth:`block`.

        ``active`` (indices into ``probe_sites``, default all) selects the probes attached with
        couplings ``eta`` (one per active probe, energy units); the other probe sites stay plain
        lattice sites. Terminals: the kwant leads, then the active probes in ``active`` order.
        """
        ref, g, lead_l = block
        nl = len(lead_l)
        act = np.arange(len(self.probe_sites)) if active is None else np.asarray(active, int)
        eta = np.broadcast_to(np.asarray(eta, dtype=float), (act.size,))
        kts = self._kt[:nl] + [self._kt[nl + i] for i in act]
        nt, nk = nl + act.size, self.keep.size
        ls = lead_l + [math.sqrt(e) * np.eye(kt.size) for e, kt in zip(eta, kts[nl:], strict=True)]
        nch = [x.shape[1] for x in ls]
        lmat = np.zeros((nk, sum(nch)), dtype=complex)
        c0 = 0
        for kt, x in zip(kts, ls, strict=True):
            lmat[kt, c0 : c0 + x.shape[1]] = x
            c0 += x.shape[1]
        # 1) probes (flux-independent): A_p = A + E d E^T with d = i eta/2 on the probe
        #    orbitals E; Woodbury: G_p = G - G E (d^-1 + E^T G E)^-1 E^T G (a solve of the
        #    probe block only, per energy and eta; probes with eta = 0 change nothing)
        dp = np.zeros(nk, dtype=complex)
        for e, kt in zip(eta, kts[nl:], strict=True):
            dp[kt] += 0.5j * e
        sel = np.flatnonzero(dp)
        if sel.size:
            small = g[np.ix_(sel, sel)]
            small[np.arange(sel.size), np.arange(sel.size)] += 1.0 / dp[sel]
            gp = g - g[:, sel] @ np.linalg.solve(small, g[sel, :])
        else:
            gp = g
        # 2) flux (Woodbury on the cut entries, as in FluxTubeSweeper): A' = A_p - dH,
        #    L^+ G' L = base + left diag(v) (1 - Q diag(v))^-1 right
        rc, cc = self._kc
        v = self.model.cut.entries(f) - self.model.cut.entries(ref)
        tr = np.unique(np.concatenate(kts))  # the only nonzero rows of lmat
        lt = lmat[tr]
        lh = lt.conj().T
        base = lh @ gp[np.ix_(tr, tr)] @ lt
        left, right, q = lh @ gp[np.ix_(tr, rc)], gp[np.ix_(cc, tr)] @ lt, gp[np.ix_(cc, rc)]
        mat = np.eye(rc.size)[None] - q[None] * v[:, None, :]
        y = np.linalg.solve(mat, np.broadcast_to(right, (f.size,) + right.shape))
        z = (v[:, :, None] * y).transpose(1, 0, 2).reshape(rc.size, -1)
        amp = (left @ z).reshape(left.shape[0], f.size, -1).transpose(1, 0, 2) + base[None]
        t2 = amp.real**2 + amp.imag**2
        tm = np.zeros((f.size, nt, nt))
        live = np.flatnonzero(np.asarray(nch) > 0)
        if all(x == 1 for x in nch):
            tm = t2
        elif live.size:
            st = np.r_[0, np.cumsum(nch)][live]
            tm[:, live[:, None], live[None, :]] = np.add.reduceat(
                np.add.reduceat(t2, st, axis=1), st, axis=2
            )
        idx = np.arange(nt)
        tm[:, idx, idx] = 0.0
        c = -tm
        c[:, idx, idx] = tm.sum(axis=1)
        return c

    def block_effective(self, block: tuple, eta, fluxes, active=None, *, source: int = 0,
                        drain: int = 1) -> np.ndarray:  # fmt: skip
        """:meth:`effective_conductance` at one :meth:`block` with the probes ``active``
        (see :meth:`block_matrices`), shape ``(n_flux,)``, e^2/h per spin."""
        reps, inverse = self._classes(fluxes)
        with _one_blas_thread():
            cm = self.block_matrices(block, eta, reps, active)
            return kron_reduce(cm, source, drain)[inverse]

    def _classes(self, fluxes) -> tuple[np.ndarray, np.ndarray]:
        from ringkit.transport.flux_symmetry import flux_classes

        f = np.atleast_1d(np.asarray(fluxes, dtype=float))
        if self._classes_of is None or not np.array_equal(self._classes_of[0], f):
            self._classes_of = (f.copy(), *flux_classes(self.model, f))
        return self._classes_of[1], self._classes_of[2]

    def effective_conductance(self, eta, fluxes, *, source: int = 0, drain: int = 1):
        """Energy-conserving (dephasing-probe) G_eff per energy, shape (n_energies, n_flux).

        G_eff is h/e-periodic and, for a reciprocal model, even in the flux: each distinct
        point is computed once (:func:`ringkit.transport.flux_symmetry.flux_classes`).
        """
        reps, inverse = self._classes(fluxes)
        cm = self.conductance_matrices(eta, reps)
        with _one_blas_thread():
            return kron_reduce(cm, source, drain)[:, inverse]


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


def measure_realised_l_phi(
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
    l_phi = length / -lr if lr < 0 else float("inf")
    err = l_phi * lr_err / abs(lr) if lr < 0 else float("inf")
    return {
        "l_phi_realised": float(l_phi),
        "l_phi_realised_err": float(err),
        "log_ratio": lr,
        "log_ratio_err": lr_err,
        "path_length": float(length),
        "n_energies": int(a0.size),
        L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
    }
