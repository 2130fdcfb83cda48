"""Spectral energy engine: every energy of a thermal window from one factorization per field.

The direct path factorizes the scattering system once per (energy, field) point, so a thermal
average over a window of a few hundred energies costs a few hundred factorizations per field
point. Here one factorization per distinct field point (uniform field), or a single one for
every flux (flux tube), gives the conductance at *every* energy of the window, exactly up to a
measured error:

1. The clean leads are written in their transverse-mode basis (:mod:`._spectral_leads`). The
   modes whose self-energy matters across the window (propagating, or slowly decaying
   evanescent) stay energy-dependent terminals; the others are frozen at their window-centre
   value after ``L`` clean lead cells appended to the scattering region, which attenuates the
   neglected change by ``exp(-36)``.
2. The terminal block (:mod:`._spectral_terminals`) holds those modes, one orbital per
   dephasing probe and, in flux-tube mode, the orbitals of the hops across the branch cut.
   The extended region is closed (Hermitian, energy-independent). Block Lanczos on its shifted
   inverse, started from the terminal block, gives the projected resolvent
   ``g(E) = X^dag (E - H)^-1 X`` in pole-residue form for all E (:mod:`._spectral_lanczos`).
3. At each energy (and flux), the exact Dyson equation on the block attaches the self-energies
   (and the cut's flux), and the Fisher-Lee transmissions between leads and probes give the
   two-terminal conductance (floating probes Kron-reduced at every energy).

Lanczos steps are added until the conductance changes by less than ``model_tol`` between
successive checks, on 97 energies across the window plus points next to the model's own poles
inside it (where narrow resonances sit). The measured change is returned as the model error
and added to the thermal error estimate. Field points are folded by exact symmetries first
(``G(-B) = G(B)``; h/e periodicity of a flux tube).

Scope: two-terminal conductance, leads clean and field-free with ``v * identity`` hopping
between cells (every ringkit ring), probes on one-orbital sites. See docs/engine.md §9 for the
derivation, the error budget and the measured cost.

Public API
----------
SpectralSweeper(fsyst, *, field_param, params, mu, half_width, probes=None, ...)
    ``.models(values)`` (reduced models, in worker processes), ``.transmission(energies)``
    (conductance per spin, n_E x n_fields), ``.model_error``, ``.mode``, ``.n_models``.
spectral_eligible(fsyst, field_param, params, probes) -> str | None
    ``None`` if the spectral path applies, else the reason.
spectral_thermal_transmission(fsyst, values, *, field_param, params, mu, kt, tol, ...)
    The thermal average by the one policy on the spectral engine.
"""

from __future__ import annotations

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
from ringkit.transport._spectral_poles import WindowResolvent
from ringkit.transport._spectral_terminals import Terminals

__all__ = [
    "SpectralSweeper",
    "SpectralModelWarning",
    "spectral_eligible",
    "spectral_thermal_transmission",
    "spectral_preferred",
    "AUTO_MAX_PROBES",
    "AUTO_MAX_PROBES_FLUX_TUBE",
    "MODEL_TOL",
]

MODEL_TOL = 1e-9
"""Default bound on the change of the transmission (per spin) between successive checks."""
_MIN_STEPS = 6
_CHECK_GROWTH = 0.15  # checks every max(2, 15 %) steps
_MAX_STEPS = 400
_MAX_CUT = 600  # cut orbitals beyond which the field counts as spread over the ring
_CHECK_GRID = 97  # energies of the fixed check grid across the window
_CUT_CHECKS = 6  # flux values at which a cut-mode model's convergence is measured
_MERGE = 1e-13  # |B| values closer than this (relative) are one field point
_PARALLEL_FLOPS = 2e9  # dense work of one transmission call above which workers share it

_TASK: list = []


class SpectralModelWarning(RuntimeWarning):
    """A field point whose reduced model did not reach ``model_tol`` (error stored)."""


AUTO_MAX_PROBES = 64
"""Most probes for which ``thermal_engine="auto"`` picks the spectral engine in a uniform field.

The cost of a reduced model grows with the square of the terminal block (lead modes + probes).
Measured on the 0.5 um GaAs ring (28.6k sites), 0.3 K, 3 field points, the same policy
energies, direct / spectral (benchmarks/RESULTS-auto-rule.md): 40 probes 2.5-3.2x (wall),
3.2-3.3x (CPU); 64 probes 1.2x (wall, two free cores) to 2.2x (loaded machine), 2.0x (CPU);
100 probes 0.89x (wall), 1.1x (CPU). 64 is the largest measured count at which the spectral
engine is not slower in any of these regimes."""

AUTO_MAX_PROBES_FLUX_TUBE = 40
"""Most probes for which ``thermal_engine="auto"`` picks the spectral engine on a flux tube.

Cut mode (one reduced model for every flux) against the low-rank update (one factorization
per energy, which spreads over the energy workers while the reduced model is built in one
process). Measured on the 0.5 um GaAs ring, 24 fluxes over one period, the same policy
energies, low-rank / spectral (benchmarks/RESULTS-auto-rule.md): 40 probes 1.2x (0.3 K) and
1.0x (1 K) in wall time with two free cores, 1.6-2.1x on a loaded machine, 1.8-2.2x in CPU;
64 probes 0.73-0.75x (wall, two free cores) but 1.3-1.5x (CPU); 100 probes 0.6x (wall),
1.0-1.1x (CPU). 40 is the largest measured count at which the spectral engine is not slower
in wall time on an idle machine; between 40 and 64 it still saves CPU (ensembles, whose workers
run one energy process each) but costs wall time in a single sweep."""


def spectral_preferred(flux_tube: bool, probes=None) -> bool:
    """Whether ``"auto"`` takes the spectral engine (given that it is eligible).

    Always without probes; with probes up to :data:`AUTO_MAX_PROBES` of them in a uniform
    field and up to :data:`AUTO_MAX_PROBES_FLUX_TUBE` on a flux tube (cut mode); more probes
    stay on the per-energy paths (direct factorizations / the low-rank flux update). The
    limits are measured (benchmarks/RESULTS-auto-rule.md, docs/engine.md §9.5).

    Parameters
    ----------
    flux_tube : bool
        Flux-tube field (True) or uniform field (False).
    probes : DephasingProbes, optional
        The floating probes (None: coherent).

    Returns
    -------
    bool
        True for the spectral engine.
    """
    if probes is None:
        return True
    limit = AUTO_MAX_PROBES_FLUX_TUBE if flux_tube else AUTO_MAX_PROBES
    return len(np.atleast_1d(probes.sites)) <= limit


def spectral_eligible(fsyst, field_param: str, params: dict, probes=None) -> str | None:
    """Why the spectral engine cannot serve this system (``None``: it can).

    Needs two clean, field-free leads whose hopping between cells is ``v * identity`` (every
    ringkit lead), and probes (if any) on one-orbital sites.
    """
    if len(fsyst.leads) != 2:
        return "two-terminal systems only"
    for i, lead in enumerate(fsyst.leads):
        if lead_depends_on(lead, field_param, params, (1.0, -0.37)):
            return f"lead {i} carries the field"
        v = np.asarray(lead.inter_cell_hopping(params={**params, field_param: 0.0}))
        if v.shape[0] != v.shape[1] or not np.allclose(v, v[0, 0] * np.eye(len(v)), atol=0):
            return f"lead {i} is not a clean separable lead"
    if probes is not None:
        norbs = [fsyst.sites[int(k)].family.norbs or 1 for k in np.atleast_1d(probes.sites)]
        if any(n != 1 for n in norbs):
            return "probes on sites with more than one orbital"
    return None


class SpectralSweeper:
    """Two-terminal conductance at all energies of a window, for a set of field values.

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
        Bound on the measured change of the conductance per spin (e^2/h) between checks
        (default 1e-9; allowed 1e-13 to 1e-4).
    workers : int, optional
        Processes for the field points (default: :func:`ringkit.transport.energy_pool.
        thermal_workers`).
    probes : DephasingProbes, optional
        Floating dephasing probes (wide-band ``-i eta/2``; Kron reduction at every energy).
    fold : bool
        Compute each physically distinct field once (default True): ``G(-B) = G(B)`` for the
        two-terminal conductance of a reciprocal system (Onsager-Büttiker), and in flux-tube
        mode also the h/e periodicity (:mod:`ringkit.transport.flux_symmetry`).

    Notes
    -----
    Two modes, chosen from where the field enters (``mode``):

    * ``"per-field"`` (uniform field: phases on most hops): one factorization and one reduced
      model per distinct field value;
    * ``"cut"`` (flux tube: phases only on the hops across the branch cut): the cut orbitals
      join the terminal block and one reduced model at zero field serves every flux.
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
        probes=None,
        fold: bool = True,
    ):
        params = {k: v for k, v in dict(params or {}).items() if k != field_param}
        why = spectral_eligible(fsyst, field_param, params, probes)
        if why is not None:
            raise ParameterError("fsyst", "system", f"not for the spectral engine: {why}")
        self.mu = float(mu)
        self.half_width = check_positive("half_width", half_width)
        if not 1e-13 <= float(model_tol) <= 1e-4:
            raise ParameterError("model_tol", model_tol, "must lie in [1e-13, 1e-4]")
        self.model_tol = float(model_tol)
        self.field_param, self.params, self.workers = field_param, params, workers
        self.fold = bool(fold)
        self.model = build_peierls_model(fsyst, field_param, params)
        p0 = {**params, field_param: 0.0}
        self.leads: list[ModeLead] = [
            mode_lead(lead, p0, self.mu, self.half_width, name=f"fsyst.leads[{i}]")
            for i, lead in enumerate(fsyst.leads)
        ]
        m = self.model
        cut = np.unique(np.concatenate([m.rows[m.dep], m.cols[m.dep]]))
        self.mode = "cut" if 0 < cut.size <= min(_MAX_CUT, 0.1 * m.shape) else "per-field"
        self._cut = cut if self.mode == "cut" else np.zeros(0, int)
        self._reciprocal = _reciprocal(fsyst, m, p0)
        self._probes = probes
        self._assemble(fsyst)
        self.values: np.ndarray | None = None
        self.reduced: list[ReducedResolvent] = []
        self.errors = np.zeros(0)
        self.steps = np.zeros(0, dtype=int)
        self._reps = np.zeros(0)
        self._inverse = np.zeros(0, dtype=int)
        self._windows: dict[int, WindowResolvent] = {}  # per reduced model (id)
        self._last_steps = 0  # steps of this process's previous model: the next one is similar

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
        probe_orb = np.zeros(0, int)
        eta = np.zeros(0)
        if self._probes is not None:
            sites = np.atleast_1d(np.asarray(self._probes.sites, dtype=int))
            probe_orb = offs[sites]
            eta = np.broadcast_to(np.asarray(self._probes.eta, dtype=float), sites.shape)
        cut = self._cut
        kw = {}
        if cut.size:
            where = {int(o): k for k, o in enumerate(cut)}
            kw = dict(
                n_cut=int(cut.size),
                cut_rows=np.array([where[int(r)] for r in m.rows[m.dep]]),
                cut_cols=np.array([where[int(c)] for c in m.cols[m.dep]]),
                cut_base=m.base[m.dep].astype(complex),
                cut_coef=np.asarray(m.coef, dtype=float),
            )
        self.terminals = Terminals(self.leads, eta, **kw)
        self.n_terminal = self.terminals.size
        p = np.zeros((pos, self.n_terminal), dtype=complex)
        k = 0
        for ld, far in zip(self.leads, blocks, strict=True):
            p[far, k : k + ld.n_active] = ld.modes[:, ld.active]
            k += ld.n_active
        for orb in (probe_orb, cut):
            p[orb, k + np.arange(orb.size)] = 1.0
            k += orb.size
        self._p = p

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

    # ------------------------------------------------------------------ one model
    def _check_energies(self, red: ReducedResolvent | None) -> np.ndarray:
        grid = np.linspace(self.mu - self.half_width, self.mu + self.half_width, _CHECK_GRID)
        if red is None:
            return grid
        # next to the model's poles inside the window: narrow resonances sit there
        inside = red.poles[np.abs(red.poles - self.mu) <= self.half_width]
        near = np.concatenate([inside - 1e-3 * self.half_width, inside + 1e-3 * self.half_width])
        near = near[np.abs(near - self.mu) <= self.half_width]
        return np.concatenate([grid, near])

    def reduce(self, value: float, check_values=(None,)) -> tuple[ReducedResolvent, float]:
        """Reduced model at field ``value`` and its measured error (conductance per spin).

        ``check_values``: field values of the cut update at which the convergence is measured
        (flux-tube mode; ``(None,)`` when the model holds the field itself).
        """
        if self.terminals.n_phys == 0 or self.terminals.n_lead[0] * self.terminals.n_lead[1] == 0:
            return ReducedResolvent(np.zeros(0), np.zeros((self.n_terminal, 0), complex), 0), 0.0
        h = self.hamiltonian(value)
        p = self._p
        if not np.any(h.data.imag) and not np.any(p.imag):
            # real symmetric (e.g. a flux tube at zero flux): real arithmetic throughout,
            # and the reduced resolvent is real at real energies
            h, p = h.real.tocsc(), p.real.copy()
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
        lz = BlockLanczos(lambda b: lu.solve(np.asfortranarray(b)), p, shift)
        # checks on a geometric schedule (each costs an eigendecomposition of the reduced
        # matrix); the error is the change since the previous check, a conservative measure
        # the first checks go where the previous field point converged (fields are similar)
        prev, red, err = None, None, np.inf
        next_check = max(_MIN_STEPS, min(self._last_steps - 2, _MAX_STEPS // 2))
        grid_memo: dict = {}  # cut mode: conductance on the check grid per model (id)
        partial = None  # (red, prev) of the last check if its err is a grid-only lower bound
        while lz.steps < _MAX_STEPS:
            lz.step()
            if lz.steps < next_check and not lz.exhausted:
                continue
            next_check = lz.steps + max(2, int(np.ceil(_CHECK_GROWTH * lz.steps)))
            red = lz.model()
            if lz.exhausted:
                err, partial = 0.0, None
                break
            if prev is not None:
                if self.mode == "cut":
                    err, lower = self._cut_change(red, prev, check_values, grid_memo)
                    partial = (red, prev) if lower else None
                else:
                    energies = self._check_energies(red)
                    now = self.conductance_of(red, energies, check_values, keep=False)
                    before = self.conductance_of(prev, energies, check_values, keep=False)
                    err = float(np.max(np.abs(now - before)))
                if err <= self.model_tol:
                    break
            if prev is None or lz.steps >= self._last_steps:
                next_check = min(next_check, lz.steps + 2)  # compare soon: expected converged
            prev = red
        if partial is not None:  # stopped at _MAX_STEPS on a grid-only measure: in full
            err, _ = self._cut_change(*partial, check_values, grid_memo, full=True)
        self._last_steps = lz.steps
        return red, err

    def _cut_change(self, red, prev, check_values, memo: dict, full: bool = False):
        """Measured change between two cut-mode models, and whether it is only a lower bound.

        The same measure as in per-field mode (all of :meth:`_check_energies`), evaluated in two
        parts: the fixed grid first (each model's grid values are kept for the next comparison)
        and, only if the grid change is already within ``model_tol`` (or ``full``), the
        energies next to the poles. A grid change above ``model_tol`` fails the check either
        way; it is then returned as a lower bound (``True``) and the steps continue.
        """
        energies = self._check_energies(red)
        grid, near = energies[:_CHECK_GRID], energies[_CHECK_GRID:]
        for m in (red, prev):  # entries hold their model: an id is never reused meanwhile
            if id(m) not in memo or memo[id(m)][0] is not m:
                memo[id(m)] = (m, self.conductance_of(m, grid, check_values, keep=False))
        err = float(np.max(np.abs(memo[id(red)][1] - memo[id(prev)][1])))
        for key in [k for k in memo if k not in (id(red), id(prev))]:
            del memo[key]
        if err > self.model_tol and not full:
            return err, True
        if near.size:
            now = self.conductance_of(red, near, check_values, keep=False)
            before = self.conductance_of(prev, near, check_values, keep=False)
            err = max(err, float(np.max(np.abs(now - before))))
        return err, False

    # ------------------------------------------------------------------ per energy
    def conductance_of(
        self, red: ReducedResolvent, energies, values=(None,), *, keep: bool = True
    ) -> np.ndarray:
        """Conductance per spin (e^2/h) of one reduced model, ``(n_E, len(values))``.

        The resolvent is evaluated by :class:`._spectral_poles.WindowResolvent` (far poles by
        a Chebyshev series with a rigorous bound of 1e-13 of its scale), kept per model when
        ``keep``.
        """
        energies = np.atleast_1d(np.asarray(energies, dtype=float))
        out = np.zeros((energies.size, len(values)))
        if red.weights.shape[1] == 0:
            return out
        win = self._window(red, energies.size, keep)
        step = self.terminals.energy_chunk()
        for a in range(0, energies.size, step):
            e = energies[a : a + step]
            out[a : a + step] = self.terminals.conductance(win(e), e, values)
        return out

    def _half_slack(self) -> float:
        """Half-width accepted for energies: a relative 1e-12 plus a few ulps of ``mu`` (a
        very narrow window, e.g. at 1e-6 K, is below the float resolution of ``mu``)."""
        return self.half_width * (1 + 1e-12) + 16 * np.finfo(float).eps * max(1.0, abs(self.mu))

    def _window(self, red: ReducedResolvent, n_energies: int, keep: bool) -> WindowResolvent:
        win = self._windows.get(id(red))
        if win is None:
            win = WindowResolvent(
                red.poles, red.weights, self.mu, self._half_slack(), n_energies=max(n_energies, 400)
            )
            if keep:
                self._windows[id(red)] = win
        return win

    def transmission_of(self, red: ReducedResolvent, energies) -> np.ndarray:
        """Conductance per spin of a per-field model at ``energies`` (``(n_E,)``)."""
        return self.conductance_of(red, energies)[:, 0]

    # ------------------------------------------------------------------ the sweep
    def _classes(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Distinct field values and the map back (exact symmetries; ``fold``)."""
        if not self.fold:
            return values.copy(), np.arange(values.size)
        if self.mode == "cut":
            from ringkit.transport.flux_symmetry import fold_fluxes

            rates = np.abs(self.terminals.cut_coef)
            rates = rates[rates != 0]
            if rates.size == 0:
                return values.copy(), np.arange(values.size)
            period = 2.0 * np.pi / float(np.min(rates))
            w = rates * period / (2.0 * np.pi)
            periodic = bool(np.all(np.abs(w - np.round(w)) <= 1e-9))
            return fold_fluxes(values, period, periodic, self._reciprocal)
        if not self._reciprocal:
            return values.copy(), np.arange(values.size)
        a = np.abs(values)
        scale = max(float(np.max(a, initial=0.0)), 1e-300)
        key = np.round(a / (scale * _MERGE)).astype(np.int64)
        _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
        return a[first], inverse.ravel()

    def models(self, values) -> SpectralSweeper:
        """Build the reduced model(s) for the field ``values`` (per-field mode: in ``workers``
        processes)."""
        from ringkit.transport.energy_pool import thermal_workers

        values = np.atleast_1d(np.asarray(values, dtype=float))
        if not np.all(np.isfinite(values)):
            raise ParameterError("values", values, "must be finite")
        reps, inverse = self._classes(values)
        if self.mode == "cut":
            idx = np.unique(np.linspace(0, reps.size - 1, min(reps.size, _CUT_CHECKS)).astype(int))
            with blas_limit():
                out = [self.reduce(0.0, tuple(float(v) for v in reps[idx]))]
        else:
            nw = min(thermal_workers(self.workers), len(reps))
            if nw > 1:
                _TASK[:] = [self]
                try:
                    with multiprocessing.get_context("fork").Pool(nw) as pool:
                        out = pool.map(_reduce_one, list(reps), chunksize=1)
                finally:
                    _TASK.clear()
            else:
                with blas_limit():
                    out = [self.reduce(v) for v in reps]
        self.values, self._reps, self._inverse = values, reps, inverse
        self.reduced = [o[0] for o in out]
        self._windows = {}
        err = np.array([o[1] for o in out], dtype=float)
        steps = np.array([o[0].steps for o in out], dtype=int)
        if self.mode == "cut":
            self.errors = np.full(values.size, err[0])
            self.steps = np.full(values.size, steps[0])
        else:
            self.errors, self.steps = err[inverse], steps[inverse]
        bad = int(np.sum(~(err <= self.model_tol)))
        if bad:
            warnings.warn(
                f"{bad} of {len(out)} reduced models above model_tol = {self.model_tol:g} "
                f"after {_MAX_STEPS} steps (max error {np.max(err):.3g}, stored and added "
                "to the error estimate)",
                SpectralModelWarning,
                stacklevel=2,
            )
        return self

    @property
    def n_models(self) -> int:
        """Factorizations (reduced models) of the last :meth:`models` call."""
        return len(self.reduced)

    @property
    def model_error(self) -> float:
        """Largest measured model error over the field points (conductance per spin)."""
        return float(np.max(self.errors, initial=0.0))

    def transmission(self, energies) -> np.ndarray:
        """Conductance per spin (e^2/h), shape ``(n_E, n_fields)`` (after :meth:`models`).

        Without probes this is the transmission ``T_10``; with probes the Kron-reduced
        two-terminal conductance.
        """
        if self.values is None:
            raise RuntimeError("call models(values) first")
        energies = np.atleast_1d(np.asarray(energies, dtype=float))
        out_of = np.abs(energies - self.mu) > self._half_slack()
        if np.any(out_of):
            raise ParameterError(
                "energies", energies[out_of][:3], "must lie inside the window of the models"
            )
        parts = self._parts(energies)
        if len(parts) > 1:  # built once here, shared by the forked workers
            for red in self.reduced:
                if red.weights.shape[1]:
                    self._window(red, 400, True)
            _TASK[:] = [self]
            try:
                with multiprocessing.get_context("fork").Pool(len(parts)) as pool:
                    out = pool.map(_evaluate_part, parts, chunksize=1)
            finally:
                _TASK.clear()
        else:
            with blas_limit():
                out = [self._evaluate(*parts[0])]
        reps = np.concatenate(out, axis=0 if self.mode == "cut" else 1)
        return reps[:, self._inverse]

    def _parts(self, energies: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        """Split ``(energies, models)`` over the workers when the dense algebra is large."""
        from ringkit.transport.energy_pool import thermal_workers

        n_models = len(self.reduced)
        poles = sum(r.poles.size for r in self.reduced)
        b = self.n_terminal
        each = len(self._reps) if self.mode == "cut" else 1
        flops = energies.size * (poles * b * b + (n_models + each) * b**3)
        nw = 1 if flops < _PARALLEL_FLOPS else thermal_workers(self.workers)
        models = np.arange(n_models)
        if self.mode == "cut":
            return [(e, models) for e in np.array_split(energies, min(nw, energies.size))]
        return [(energies, m) for m in np.array_split(models, min(nw, n_models))]

    def _evaluate(self, energies: np.ndarray, models: np.ndarray) -> np.ndarray:
        """Conductance per spin at ``energies`` of the models ``models`` (one process)."""
        if self.mode == "cut":
            vals = tuple(float(v) for v in self._reps)
            return self.conductance_of(self.reduced[0], energies, vals)
        cols = [self.transmission_of(self.reduced[k], energies) for k in models]
        return np.stack(cols, axis=1) if cols else np.zeros((energies.size, 0))


def _reciprocal(fsyst, model, p0: dict) -> bool:
    """Whether H at zero field and the leads are real (then ``G(-B) = G(B)``, two terminals)."""
    if np.any(np.asarray(model.base).imag):
        return False
    for lead in fsyst.leads:
        h = np.asarray(lead.cell_hamiltonian(params=p0))
        v = np.asarray(lead.inter_cell_hopping(params=p0))
        if np.any(h.imag) or np.any(v.imag):
            return False
    return True


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
    probes=None,
    fold: bool = True,
):
    """Thermally averaged conductance per spin over ``values`` by the spectral engine.

    With ``probes`` (floating dephasing probes) the Kron-reduced conductance is averaged at
    every energy (energy-conserving dephasing probes, as on the direct path).

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

    from ringkit.thermal_policy import check_tol, energy_average, sampled_half_width

    tol = check_tol(tol)
    kt = check_positive("kt", kt)
    half = sampled_half_width(kt, tol, bound, method, spacing)
    sw = SpectralSweeper(
        fsyst,
        field_param=field_param,
        params=params,
        mu=mu,
        half_width=half,
        model_tol=max(1e-13, min(MODEL_TOL, tol / 100.0)),
        workers=workers,
        probes=probes,
        fold=fold,
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


def _evaluate_part(part: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    with blas_limit():
        return _TASK[0]._evaluate(*part)
