"""Spectral energy engine: every energy of a thermal window from one factorization per field.

The direct path factorizes the scattering system once per (energy, field) point, so a thermal
average over a window of a few hundred energies costs a few hundred factorizations per field
point. Here one factorization per field point gives the conductance at *every* energy of the
window, exactly up to a measured error:

1. The clean leads are written in their transverse-mode basis (:mod:`._spectral_leads`). The
   modes whose self-energy matters across the window (propagating, or slowly decaying
   evanescent) stay energy-dependent terminals; the others are frozen at their window-centre
   value after ``L`` clean lead cells appended to the scattering region, which attenuates the
   neglected change by ``exp(-36)``. The terminal block is then ~14 vectors for a 5-mode ring
   instead of the 66 interface orbitals.
2. The extended region is closed (Hermitian, energy-independent). Block Lanczos on its shifted
   inverse, started from the terminal block, gives the projected resolvent
   ``g(E) = X^dag (E - H)^-1 X`` in pole-residue form for all E (:mod:`._spectral_lanczos`).
3. At each energy, ``G = (1 - g Sigma(E))^-1 g`` on the terminals with the closed-form mode
   self-energies, and the Fisher-Lee/Landauer transmission ``T = sum_mn Gamma_m Gamma_n |G_mn|^2``
   between the open modes of the two leads.

The number of Lanczos steps is chosen per field point: steps are added until the transmission
changes by less than ``model_tol`` between successive checks, on a grid of spacing ``k_B T/4``
across the window plus the model's own poles inside it (where narrow resonances sit). The
measured change is returned as the model error and added to the thermal error estimate.

Scope: two-terminal conductance, leads clean and field-free (every ringkit ring in a uniform
field), no dephasing probes (those are terminals on the ring and stay on the direct path). See
docs/engine.md §7 for the derivation, the error budget and the measured cost.

Public API
----------
SpectralSweeper(fsyst, *, field_param, params, mu, half_width, ...)
    ``.models(values)`` (one reduced model per field value, in worker processes),
    ``.transmission(energies)`` (n_E x n_fields), ``.model_error``.
spectral_eligible(fsyst, field_param, params, probes) -> str | None
    ``None`` if the spectral path applies, else the reason.
spectral_thermal_transmission(fsyst, values, *, field_param, params, mu, kt, tol, ...)
    The thermal average by the one policy on the spectral engine.
policy_half_width(kt, tol, bound, method, spacing) -> float
    The energy window the policy can sample (what a sweeper must cover).
"""

from __future__ import annotations

import math
import multiprocessing
import warnings

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from ringkit._validation import ParameterError, check_positive
from ringkit.transport._engine_model import build_peierls_model, lead_depends_on
from ringkit.transport._engine_threads import blas_limit
from ringkit.transport._spectral_lanczos import BlockLanczos, ReducedResolvent
from ringkit.transport._spectral_leads import ModeLead, mode_lead

__all__ = [
    "SpectralSweeper",
    "SpectralModelWarning",
    "spectral_eligible",
    "spectral_thermal_transmission",
    "policy_half_width",
    "MODEL_TOL",
]

MODEL_TOL = 1e-9
"""Default bound on the change of the transmission (per spin) between successive checks."""
_MIN_STEPS = 6
_CHECK_GROWTH = 0.15  # checks every max(2, 15 %) steps
_MAX_STEPS = 400

_TASK: list = []


class SpectralModelWarning(RuntimeWarning):
    """A field point whose reduced model did not reach ``model_tol`` (error stored)."""


def spectral_eligible(fsyst, field_param: str, params: dict, probes=None) -> str | None:
    """Why the spectral engine cannot serve this system (``None``: it can)."""
    if probes is not None:
        return "dephasing probes are terminals on the ring (direct path)"
    if len(fsyst.leads) != 2:
        return "two-terminal systems only"
    for i, lead in enumerate(fsyst.leads):
        if lead_depends_on(lead, field_param, params, (1.0, -0.37)):
            return f"lead {i} carries the field"
        v = np.asarray(lead.inter_cell_hopping(params={**params, field_param: 0.0}))
        if v.shape[0] != v.shape[1] or not np.allclose(v, v[0, 0] * np.eye(len(v)), atol=0):
            return f"lead {i} is not a clean separable lead"
    return None


class SpectralSweeper:
    """Two-terminal transmission at all energies of a window, per field value.

    Parameters
    ----------
    fsyst : kwant.system.FiniteSystem
        Two clean, field-free leads (``v * identity`` hopping between cells).
    field_param : str
        kwant parameter of the field (Peierls phases linear in it).
    params : dict
        All other kwant parameters.
    mu : float
        Window centre (units of the Hamiltonian, e.g. lattice units of t).
    half_width : float
        Half-width of the energy window (same units), e.g. the thermal window.
    model_tol : float
        Bound on the measured change of the transmission between checks (default 1e-9;
        allowed 1e-13 to 1e-4).
    workers : int, optional
        Processes for the field points (default: :func:`ringkit.transport.energy_pool.
        thermal_workers`).
    """

    def __init__(
        self,
        fsyst,
        *,
        field_param: str,
        params: dict | None = None,
        mu: float,
        half_width: float,
        model_tol: float = MODEL_TOL,
        workers: int | None = None,
    ):
        params = {k: v for k, v in dict(params or {}).items() if k != field_param}
        why = spectral_eligible(fsyst, field_param, params)
        if why is not None:
            raise ParameterError("fsyst", "system", f"not for the spectral engine: {why}")
        self.mu = float(mu)
        self.half_width = check_positive("half_width", half_width)
        if not 1e-13 <= float(model_tol) <= 1e-4:
            raise ParameterError("model_tol", model_tol, "must lie in [1e-13, 1e-4]")
        self.model_tol = float(model_tol)
        self.field_param, self.params, self.workers = field_param, params, workers
        self.model = build_peierls_model(fsyst, field_param, params)
        p0 = {**params, field_param: 0.0}
        self.leads: list[ModeLead] = [
            mode_lead(lead, p0, self.mu, self.half_width, name=f"fsyst.leads[{i}]")
            for i, lead in enumerate(fsyst.leads)
        ]
        self._assemble(fsyst)
        self.values: np.ndarray | None = None
        self.reduced: list[ReducedResolvent] = []
        self.errors = np.zeros(0)
        self.steps = np.zeros(0, dtype=int)

    # ------------------------------------------------------------------ extended system
    def _assemble(self, fsyst) -> None:
        m = self.model
        offs = m.orb_offsets
        n = m.shape
        rows, cols, vals = [], [], []
        blocks = []  # (first orbital of the far cell, lead)
        pos = n
        for i, ld in enumerate(self.leads):
            sites = fsyst.lead_interfaces[i]
            iface = np.concatenate([np.arange(offs[s], offs[s + 1]) for s in sites])
            w = ld.width
            if len(iface) != w:
                raise ParameterError(f"fsyst.leads[{i}]", "lead", "interface/cell size mismatch")
            prev = iface
            cr, cc = np.nonzero(ld.cell)
            for _ in range(ld.chunk_cells):
                cell = np.arange(pos, pos + w)
                rows += [cell[cr], cell, prev]
                cols += [cell[cc], prev, cell]
                vals += [ld.cell[cr, cc], np.full(w, ld.hop, complex), np.full(w, ld.hop, complex)]
                prev, pos = cell, pos + w
            rr, ccc = np.meshgrid(prev, prev, indexing="ij")
            rows.append(rr.ravel())
            cols.append(ccc.ravel())
            vals.append(ld.frozen_sigma.ravel())
            blocks.append(prev)
        self.n_ext = pos
        self._fixed = (
            np.concatenate(rows) if rows else np.zeros(0, int),
            np.concatenate(cols) if cols else np.zeros(0, int),
            np.concatenate(vals) if vals else np.zeros(0, complex),
        )
        nb = [ld.n_active for ld in self.leads]
        self.n_terminal = int(sum(nb))
        p = np.zeros((pos, self.n_terminal), dtype=complex)
        k = 0
        for ld, far in zip(self.leads, blocks, strict=True):
            p[far, k : k + ld.n_active] = ld.modes[:, ld.active]
            k += ld.n_active
        self._p = p
        self._split = nb[0]

    def hamiltonian(self, value: float) -> sp.csc_matrix:
        """Extended Hamiltonian (ring + lead chunks + frozen far-end modes) at field ``value``."""
        m = self.model
        r, c, v = self._fixed
        data = np.concatenate([m.values(value), v])
        h = sp.coo_matrix(
            (data, (np.concatenate([m.rows, r]), np.concatenate([m.cols, c]))),
            shape=(self.n_ext, self.n_ext),
        )
        return h.tocsc()

    # ------------------------------------------------------------------ one field point
    def _check_energies(self, red: ReducedResolvent | None) -> np.ndarray:
        grid = np.linspace(self.mu - self.half_width, self.mu + self.half_width, 97)
        if red is None:
            return grid
        # next to the model's poles inside the window: narrow resonances sit there
        inside = red.poles[np.abs(red.poles - self.mu) <= self.half_width]
        near = np.concatenate([inside - 1e-3 * self.half_width, inside + 1e-3 * self.half_width])
        near = near[np.abs(near - self.mu) <= self.half_width]
        return np.concatenate([grid, near])

    def reduce(self, value: float) -> tuple[ReducedResolvent, float]:
        """Reduced model at field ``value`` and its measured error (transmission per spin)."""
        if self.n_terminal == 0:
            return ReducedResolvent(np.zeros(0), np.zeros((0, 0), complex), 0), 0.0
        h = self.hamiltonian(value)
        eye = sp.identity(self.n_ext, format="csc")
        lu, shift = None, self.mu
        for frac in (0.0, 0.137, -0.213, 0.311):
            shift = self.mu + frac * self.half_width
            try:
                lu = sla.splu((h - shift * eye).tocsc())
                break
            except RuntimeError:  # exactly singular: the shift sits on an eigenvalue
                continue
        if lu is None:
            raise RuntimeError("no usable shift for the spectral engine")
        lz = BlockLanczos(lambda b: lu.solve(np.asfortranarray(b)), self._p, shift)
        # checks on a geometric schedule (each costs an eigendecomposition of the reduced
        # matrix); the error is the change since the previous check, a conservative measure
        prev, red, err, next_check = None, None, np.inf, _MIN_STEPS
        while lz.steps < _MAX_STEPS:
            lz.step()
            if lz.steps < next_check and not lz.exhausted:
                continue
            next_check = lz.steps + max(2, int(np.ceil(_CHECK_GROWTH * lz.steps)))
            red = lz.model()
            if lz.exhausted:
                err = 0.0
                break
            if prev is not None:
                energies = self._check_energies(red)
                err = float(
                    np.max(
                        np.abs(
                            self.transmission_of(red, energies)
                            - self.transmission_of(prev, energies)
                        )
                    )
                )
                if err <= self.model_tol:
                    break
            prev = red
        return red, err

    # ------------------------------------------------------------------ per energy
    def transmission_of(self, red: ReducedResolvent, energies) -> np.ndarray:
        """Transmission lead 0 -> lead 1 (per spin) of one reduced model at ``energies``."""
        energies = np.atleast_1d(np.asarray(energies, dtype=float))
        if self.n_terminal == 0 or red.weights.shape[0] == 0:
            return np.zeros(len(energies))
        g = red.resolvent(energies)  # (n_E, b, b)
        sig = np.concatenate([ld.sigma(energies) for ld in self.leads], axis=1)  # (n_E, b)
        b = self.n_terminal
        lhs = np.eye(b)[None] - g * sig[:, None, :]
        gfull = np.linalg.solve(lhs, g)
        gam = -2.0 * sig.imag  # Gamma of each mode: > 0 for open modes only
        k = self._split
        blk = gfull[:, k:, :k]
        return np.einsum("em,en,emn->e", gam[:, k:], gam[:, :k], blk.real**2 + blk.imag**2)

    # ------------------------------------------------------------------ the sweep
    def models(self, values) -> SpectralSweeper:
        """Build the reduced model of every field value (in ``workers`` processes)."""
        from ringkit.transport.energy_pool import thermal_workers

        values = np.atleast_1d(np.asarray(values, dtype=float))
        if not np.all(np.isfinite(values)):
            raise ParameterError("values", values, "must be finite")
        nw = min(thermal_workers(self.workers), len(values))
        if nw > 1:
            _TASK[:] = [self]
            try:
                with multiprocessing.get_context("fork").Pool(nw) as pool:
                    out = pool.map(_reduce_one, list(values), chunksize=1)
            finally:
                _TASK.clear()
        else:
            with blas_limit():
                out = [self.reduce(v) for v in values]
        self.values = values
        self.reduced = [o[0] for o in out]
        self.errors = np.array([o[1] for o in out], dtype=float)
        self.steps = np.array([o[0].steps for o in out], dtype=int)
        bad = int(np.sum(~(self.errors <= self.model_tol)))
        if bad:
            warnings.warn(
                f"{bad} of {len(values)} field points: reduced model above model_tol = "
                f"{self.model_tol:g} after {_MAX_STEPS} steps (max error "
                f"{np.max(self.errors):.3g}, stored and added to the error estimate)",
                SpectralModelWarning,
                stacklevel=2,
            )
        return self

    @property
    def model_error(self) -> float:
        """Largest measured model error over the field points (transmission per spin)."""
        return float(np.max(self.errors, initial=0.0))

    def transmission(self, energies) -> np.ndarray:
        """Transmission per spin, shape ``(n_E, n_fields)`` (after :meth:`models`)."""
        if self.values is None:
            raise RuntimeError("call models(values) first")
        energies = np.atleast_1d(np.asarray(energies, dtype=float))
        out_of = np.abs(energies - self.mu) > self.half_width * (1 + 1e-12)
        if np.any(out_of):
            raise ParameterError(
                "energies", energies[out_of][:3], "must lie inside the window of the models"
            )
        with blas_limit():
            cols = [self.transmission_of(red, energies) for red in self.reduced]
        return np.stack(cols, axis=1)


def policy_half_width(
    kt: float, tol: float, bound: float = 1.0, method: str = "adaptive", spacing=None
) -> float:
    """Half-width of the energies :func:`ringkit.thermal_policy.energy_average` can ask for.

    The window :func:`~ringkit.thermal_policy.thermal_window` ``(kt, tol, bound)``; the grid
    rule rounds it up to an even number of steps of ``spacing`` (default ``kt/4``). A relative
    margin of 1e-9 covers rounding. Same units as ``kt``.
    """
    from ringkit.thermal_policy import thermal_window

    half = thermal_window(kt, tol, bound)
    if method == "grid":
        h = kt / 4.0 if spacing is None else check_positive("spacing", spacing)
        m = max(1, math.ceil(half / h))
        half = (m + m % 2) * h
    return half * (1.0 + 1e-9)


def spectral_thermal_transmission(
    fsyst,
    values,
    *,
    field_param: str,
    params: dict,
    mu: float,
    kt: float,
    tol: float,
    method: str = "adaptive",
    bound: float = 1.0,
    functionals=None,
    spacing: float | None = None,
    workers: int | None = None,
):
    """Thermally averaged transmission per spin over ``values`` by the spectral engine.

    The energies are chosen by the one policy (:func:`ringkit.thermal_policy.energy_average`,
    same window, same rule, same ``tol``); each costs only small dense algebra here, so the
    energy budget is large (``max_energies`` 50 000). The reduced models' measured error
    (:attr:`SpectralSweeper.model_error`, at most ``tol/100``) is added to the returned error
    estimates.

    Returns
    -------
    (EnergyAverage, SpectralSweeper)
    """
    from dataclasses import replace

    from ringkit.thermal_policy import check_tol, energy_average

    tol = check_tol(tol)
    kt = check_positive("kt", kt)
    half = policy_half_width(kt, tol, bound, method, spacing)
    sw = SpectralSweeper(
        fsyst,
        field_param=field_param,
        params=params,
        mu=mu,
        half_width=half,
        model_tol=max(1e-13, min(MODEL_TOL, tol / 100.0)),
        workers=workers,
    ).models(values)
    res = energy_average(
        sw.transmission,
        mu,
        kt,
        tol=tol,
        method=method,
        bound=bound,
        functionals=functionals,
        spacing=spacing,
        batched=True,
        max_energies=50_000,
    )
    extra = None if res.extra_errors is None else res.extra_errors + sw.model_error
    return replace(res, errors=res.errors + sw.errors, extra_errors=extra), sw


def _reduce_one(value: float):
    with blas_limit():
        return _TASK[0].reduce(value)
