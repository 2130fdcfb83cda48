"""Fast field sweeps of a finalized kwant system at the sparse-factorization limit.

One :class:`FieldSweeper` per system, energy and probe set. At construction it reads how the
field enters kwant's own Hamiltonian (per-nonzero Peierls phase coefficients, obtained
numerically from two field values and verified at a third), computes the lead modes at the
energy once, lays out kwant's scattering linear system with a fixed sparsity pattern and runs
the MUMPS symbolic analysis (AMD ordering) once. Each field point then costs one numpy update of
the field-dependent entries, one MUMPS numeric factorization (by default a Schur complement
onto the lead and probe variables, so no separate solve phase) and a few small dense numpy
operations. Results agree with ``kwant.smatrix`` on the same system to ~1e-12 (tested to 1e-10).

The engine is generic: any finalized kwant system whose hoppings depend on one scalar parameter
(``field_param``, e.g. ``"B"`` in T or ``"flux"`` in Wb) through Peierls phases linear in it.
Leads may be field-free (modes computed once per energy) or carry the field (modes recomputed
per field value).

Public API
----------
FieldSweeper
    ``transmission``, ``transmission_matrix``, ``conductance_matrix``, ``conductance``,
    ``smatrix``, ``at_energy``.

Units: energies in the units of the system Hamiltonian (for ringkit rings: the hopping t);
transmissions and conductances in e^2/h per spin channel (multiply by 2 for spin degeneracy).
"""

from __future__ import annotations

import warnings

import kwant
import numpy as np
from kwant.solvers.common import SMatrix

from ringkit._validation import ParameterError, check_choice
from ringkit.transport._engine_krylov import KrylovReuse
from ringkit.transport._engine_linsys import (
    MumpsKernel,
    PatternSystem,
    SingularSystemError,
    compute_lead_data,
)
from ringkit.transport._engine_model import PeierlsModel, build_peierls_model, lead_depends_on
from ringkit.transport._engine_threads import limited

__all__ = ["FieldSweeper", "kron_reduce", "BoundStateWarning", "KrylovFallbackWarning"]


class BoundStateWarning(RuntimeWarning):
    """The energy coincides with a bound state in the continuum of the open system."""


class KrylovFallbackWarning(RuntimeWarning):
    """Some field points of a ``method="krylov"`` sweep did not converge and were solved
    directly (exact, slower)."""


def kron_reduce(cmat: np.ndarray, source: int = 0, drain: int = 1) -> np.ndarray:
    """Two-terminal conductance with every other terminal floating (zero net current).

    ``cmat`` is a conductance matrix (…, n, n) with ``I = C V``; the floating terminals'
    voltages are eliminated (Kron reduction / Schur complement, Buttiker 1986) and the current
    into ``drain`` per unit voltage on ``source`` (drain grounded) is returned.
    """
    cmat = np.asarray(cmat, dtype=float)
    n = cmat.shape[-1]
    if not (0 <= source < n and 0 <= drain < n) or source == drain:
        raise ParameterError("source/drain", (source, drain), f"distinct terminals in 0..{n - 1}")
    # terminals that are not coupled at all (zero row and column, e.g. a probe with zero
    # coupling) carry no current and are left out
    flat = cmat.reshape(-1, n, n)
    coupled = np.any(flat != 0, axis=(0, 2)) | np.any(flat != 0, axis=(0, 1))
    others = [k for k in range(n) if k not in (source, drain) and coupled[k]]
    # ground the drain: unknowns V_p (floating); V_source = 1
    c_ss = cmat[..., source, source]
    if not others:
        return c_ss
    c_pp = cmat[..., others, :][..., :, others]
    c_ps = cmat[..., others, source]
    c_sp = cmat[..., source, others]
    try:
        v_p = np.linalg.solve(c_pp, -c_ps[..., None])[..., 0]
    except np.linalg.LinAlgError:
        # a group of floating probes without any path to source or drain (e.g. no open
        # channel in a lead at this energy): their voltage is undetermined but they carry no
        # current to the source, so any solution gives the same G; take the minimum-norm one
        pp = c_pp.reshape(-1, len(others), len(others))
        ps = c_ps.reshape(-1, len(others))
        v_p = np.stack([np.linalg.lstsq(a, -b, rcond=None)[0] for a, b in zip(pp, ps, strict=True)])
        v_p = v_p.reshape(c_ps.shape)
    g = c_ss + np.einsum("...i,...i->...", c_sp, v_p)
    # a terminal without any open channel carries no current: G = 0 exactly (kwant gives 0)
    dead = ~(_coupled(cmat, source) & _coupled(cmat, drain))
    return np.where(dead, 0.0, g)


def _coupled(cmat: np.ndarray, k: int) -> np.ndarray:
    """Per matrix of the batch: does terminal ``k`` exchange any current (nonzero row/column)?"""
    return np.any(cmat[..., k, :] != 0, axis=-1) | np.any(cmat[..., :, k] != 0, axis=-1)


def _indicator(sizes: np.ndarray) -> np.ndarray:
    """(n_blocks, sum(sizes)) matrix summing consecutive segments of the given sizes."""
    sizes = np.asarray(sizes, dtype=np.int64)
    out = np.zeros((len(sizes), int(sizes.sum())))
    out[np.repeat(np.arange(len(sizes)), sizes), np.arange(int(sizes.sum()))] = 1.0
    return out


class FieldSweeper:
    """Scattering quantities of one kwant system versus one field parameter, at one energy.

    Parameters
    ----------
    fsyst : kwant.system.FiniteSystem
        Finalized system with at least one lead (all leads must have modes).
    field_param : str
        kwant parameter carrying the field (``"B"`` in T, ``"flux"`` in Wb, ...). Hoppings
        must depend on it only through Peierls phases linear in it.
    params : dict, optional
        All other kwant parameters (fixed during the sweep).
    energy : float
        Energy in the units of the system Hamiltonian.
    probes : object with ``sites`` and ``eta``, optional
        Wide-band self-energy probes (see :class:`ringkit.transport.probes.DephasingProbes`):
        site indices of ``fsyst`` and coupling Gamma (self-energy ``-i Gamma/2`` on each
        orbital), in the energy units of the Hamiltonian. Probes are terminals numbered after
        the leads.
    method : {"schur", "lu", "krylov"}
        ``"schur"`` (default): MUMPS Schur complement onto the terminal variables;
        ``"lu"``: numeric LU and solve for the needed columns; ``"krylov"``: reuse one LU
        across a field window, block GMRES preconditioned by it with the error of every
        amplitude estimated below ``tol`` (:mod:`ringkit.transport._engine_krylov`,
        ``docs/engine.md``); points not converged within ``max_iter`` are solved directly
        (:class:`KrylovFallbackWarning`, once per call, with the count). Field-free leads only.
    ordering : str
        MUMPS ordering (default ``"amd"``).
    field_scale : float, optional
        A field value at which the largest Peierls phase is of order 1 rad (found
        automatically if omitted).
    model : PeierlsModel, optional
        Reuse the field model of another sweeper of the same system (see :meth:`at_energy`).
    tol : float
        ``method="krylov"``: bound on the estimated absolute error of every scattering
        amplitude (default 1e-10; allowed 1e-15 to 1e-6).
    max_iter : int
        ``method="krylov"``: block iterations before a point is solved directly.

    Raises
    ------
    ParameterError
        Not a finalized system, no leads, self-energy leads, field not a linear Peierls phase,
        bad probe sites.

    Notes
    -----
    Lead data (modes) are computed at ``energy`` and bound to it; a sweeper never serves
    another energy. Use :meth:`at_energy` to get a sweeper at a new energy that shares the
    (expensive) field model.

    The Schur method eliminates the closed interior first, which cannot pivot when the energy
    sits (numerically) on one of its eigenvalues. Every Schur result is therefore checked for
    current conservation (row and column sums of the terminal transmissions, direct
    reflections included) against ``conservation_tol`` (1e-11); a point that fails is
    recomputed with a pivoting LU (counted in ``n_fallbacks``).

    Examples
    --------
    >>> sw = FieldSweeper(fsyst, field_param="B", energy=0.5)    # doctest: +SKIP
    >>> g = sw.transmission(np.linspace(0, 0.05, 201))           # doctest: +SKIP
    """

    @limited
    def __init__(
        self,
        fsyst,
        *,
        field_param: str = "B",
        params: dict | None = None,
        energy: float,
        probes=None,
        method: str = "schur",
        ordering: str = "amd",
        field_scale: float | None = None,
        model: PeierlsModel | None = None,
        tol: float = 1e-10,
        max_iter: int = 20,
    ) -> None:
        if not isinstance(fsyst, kwant.system.FiniteSystem):
            raise ParameterError(
                "fsyst", type(fsyst).__name__, "must be a finalized kwant system (.finalized())"
            )
        if not fsyst.lead_interfaces:
            raise ParameterError("fsyst", "system", "must have leads")
        for i, lead in enumerate(fsyst.leads):
            if kwant.system.is_selfenergy_lead(lead):
                raise ParameterError(
                    f"fsyst.leads[{i}]", "self-energy lead", "pass probes via probes="
                )
        try:
            energy = float(energy)
        except (TypeError, ValueError):
            raise ParameterError("energy", energy, "must be a real number") from None
        if not np.isfinite(energy):
            raise ParameterError("energy", energy, "must be finite")
        check_choice("method", method, ("schur", "lu", "krylov"))
        self.tol, self.max_iter = tol, max_iter
        self.fsyst = fsyst
        self.field_param = field_param
        self.params = {k: v for k, v in dict(params or {}).items() if k != field_param}
        self.energy = energy
        self.method = method
        self.ordering = ordering
        if model is None:
            model = build_peierls_model(fsyst, field_param, self.params, field_scale=field_scale)
        elif (
            model.field_param != field_param or len(model.orb_offsets) - 1 != fsyst.graph.num_nodes
        ):
            raise ParameterError("model", "PeierlsModel", "must belong to this system")
        self.model = model
        self.probes = probes
        self._probe_orbs, self._probe_eta = self._check_probes(probes)
        offs = model.orb_offsets
        self._iface_orbs = [
            np.concatenate([np.arange(offs[s], offs[s + 1]) for s in iface])
            for iface in fsyst.lead_interfaces
        ]
        scale_hint = self._field_hint()
        self._lead_dep = [
            lead_depends_on(lead, field_param, self.params, scale_hint) for lead in fsyst.leads
        ]
        self._system: PatternSystem | None = None
        self._kernel: MumpsKernel | None = None
        self._krylov: KrylovReuse | None = None
        self._lu: MumpsKernel | None = None
        self.n_fallbacks = 0
        self.n_singular = 0
        self._warned_singular = False
        self._last_tm = None
        self.conservation_tol = 1e-11
        self._install(self._lead_data(None))

    # ------------------------------------------------------------------ set-up helpers
    def _field_hint(self) -> tuple[float, ...]:
        c = np.max(np.abs(self.model.coef), initial=0.0)
        v = 1.0 / c if c > 0 else 1.0
        return (v, -0.37 * v)

    def _check_probes(self, probes):
        if probes is None:
            return [], np.zeros(0)
        sites = np.asarray(getattr(probes, "sites", None))
        eta = np.asarray(getattr(probes, "eta", None), dtype=float)
        nsite = len(self.model.orb_offsets) - 1
        if sites.ndim != 1 or sites.dtype.kind not in "iu":
            raise ParameterError("probes.sites", sites, "must be a 1D array of site indices")
        if np.any((sites < 0) | (sites >= nsite)) or len(np.unique(sites)) != len(sites):
            raise ParameterError("probes.sites", sites, f"distinct site indices in 0..{nsite - 1}")
        eta = np.broadcast_to(eta, sites.shape).astype(float)
        if np.any(~np.isfinite(eta) | (eta < 0)):
            raise ParameterError("probes.eta", eta, "must be >= 0 and finite")
        offs = self.model.orb_offsets
        orbs = [np.arange(offs[s], offs[s + 1]) for s in sites]
        return orbs, eta

    def _lead_data(self, value: float | None):
        params = dict(self.params)
        if value is not None:
            params[self.field_param] = float(value)
        else:
            params[self.field_param] = 0.0
        return [
            compute_lead_data(lead, self.energy, params, iface)
            for lead, iface in zip(self.fsyst.leads, self._iface_orbs, strict=True)
        ]

    def _install(self, leads) -> None:
        system = PatternSystem(self.model, leads, self.energy, self._probe_orbs, self._probe_eta)
        same = (
            self._system is not None
            and self._system.layout.n_total == system.layout.n_total
            and np.array_equal(self._system.rows, system.rows)
            and np.array_equal(self._system.cols, system.cols)
        )
        if same:  # keep the analysis: copy the new values into the analysed buffer
            self._system.data[:] = system.data
            self._system.leads = system.leads
            self._prepare_dense()  # right-hand sides depend on the lead modes
            return
        self._system = system
        if self.method == "krylov":
            if any(self._lead_dep):
                raise ParameterError(
                    "method", "krylov", "needs field-free leads (use 'schur' or 'lu')"
                )
            self._krylov = KrylovReuse(
                system, ordering=self.ordering, tol=self.tol, max_iter=self.max_iter
            )
            self._kernel = self._krylov._lu
        else:
            self._kernel = MumpsKernel(system, self.method, self.ordering)
        self._prepare_dense()

    def _prepare_dense(self) -> None:
        """Right-hand sides and output rows on the Schur variables (or all variables)."""
        sysm = self._system
        lay = sysm.layout
        nl = len(sysm.leads)
        if self.method == "schur":
            svars = self._kernel.schur_vars
            index_of = np.full(lay.n_total, -1, dtype=np.int64)
            index_of[svars] = np.arange(len(svars))
            nrow = len(svars)
        else:
            index_of = np.arange(lay.n_total)
            nrow = lay.n_total
        cols, col_sizes, col_w = [], [], []
        for i in range(nl):
            cols.append(sysm.lead_rhs(i, index_of, nrow))
            col_sizes.append(sysm.leads[i].nprop)
            col_w.append(1.0)
        for orbs, eta in zip(self._probe_orbs, self._probe_eta, strict=True):
            b = np.zeros((nrow, len(orbs)), dtype=complex)
            b[index_of[orbs], np.arange(len(orbs))] = 1.0
            cols.append(b)
            col_sizes.append(len(orbs))
            col_w.append(float(eta))
        out_rows = [index_of[sysm.out_vars(i)] for i in range(nl)]
        out_rows += [index_of[orbs] for orbs in self._probe_orbs]
        self._rhs = np.concatenate(cols, axis=1) if cols else np.zeros((nrow, 0), complex)
        self._col_sizes = np.array(col_sizes, dtype=np.int64)
        self._out_rows = out_rows
        self._row_sizes = np.array([len(r) for r in out_rows], dtype=np.int64)
        self._out_all = np.concatenate(out_rows) if out_rows else np.zeros(0, np.int64)
        self._w = np.array(col_w)
        self._rstart = np.r_[0, np.cumsum(self._row_sizes)[:-1]].astype(np.int64)
        self._cstart = np.r_[0, np.cumsum(self._col_sizes)[:-1]].astype(np.int64)
        self._row_sum = _indicator(self._row_sizes)
        self._col_sum = _indicator(self._col_sizes)
        rows_d, cols_d, starts = [], [], []
        for k, orbs in enumerate(self._probe_orbs):
            j = nl + k
            starts.append(sum(len(r) for r in rows_d))
            rows_d.append(self._rstart[j] + np.arange(len(orbs)))
            cols_d.append(self._cstart[j] + np.arange(len(orbs)))
        self._pdiag_rows = np.concatenate(rows_d) if rows_d else np.zeros(0, np.int64)
        self._pdiag_cols = np.concatenate(cols_d) if cols_d else np.zeros(0, np.int64)
        self._pdiag_start = np.array(starts, dtype=np.int64)
        sysm_vars = [sysm.out_vars(i) for i in range(nl)] + list(self._probe_orbs)
        self._out_vars_full = np.concatenate(sysm_vars) if sysm_vars else np.zeros(0, np.int64)
        self._channels = np.array(
            [ld.nprop for ld in sysm.leads] + [len(o) for o in self._probe_orbs], dtype=float
        )

    # ------------------------------------------------------------------ per field point
    def _prepare(self, value: float) -> None:
        if any(self._lead_dep):
            self._install(self._lead_data(value))
        self._system.set_field(value)

    def _lu_solution(self, ncols: int | None = None) -> np.ndarray:
        if self.method == "lu":
            self._kernel.factor()
            rhs = self._rhs if ncols is None else self._rhs[:, :ncols]
            return self._kernel.solve(rhs)[self._out_all]
        # robust fallback of the Schur method, analysed on first use; shares the value buffer
        if self._lu is None or self._lu.system is not self._system:
            self._lu = MumpsKernel(self._system, "lu", self.ordering)
        self._lu.factor()
        self.n_fallbacks += 1
        return self._lu.solve(self._full_rhs())[self._out_vars_full]

    def _full_rhs(self) -> np.ndarray:
        """Right-hand sides on all variables (for the LU fallback of the Schur method)."""
        sysm = self._system
        lay = sysm.layout
        cols = [sysm.lead_rhs(i) for i in range(len(sysm.leads))]
        for orbs in self._probe_orbs:
            b = np.zeros((lay.n_total, len(orbs)), dtype=complex)
            b[orbs, np.arange(len(orbs))] = 1.0
            cols.append(b)
        return np.concatenate(cols, axis=1)

    def _solution(self, value: float, ncols: int | None = None) -> np.ndarray:
        """Solution at the output rows, all terminal columns: (n_out_rows, n_cols).

        With the Schur method the elimination is checked for null pivots (the energy sits on an
        eigenvalue of the closed interior, which the Schur elimination cannot pivot around; the
        result would still conserve current but be wrong) and the result for current
        conservation (unitarity); a point failing either is recomputed with a pivoting LU.
        """
        self._prepare(value)
        if self.method == "lu":
            return self._lu_solution(ncols)
        if self.method == "krylov":
            rhs = self._rhs if ncols is None else self._rhs[:, :ncols]
            x, _ = self._krylov.solve(value, rhs, key=-1 if ncols is None else ncols)
            return x[self._out_all]
        self._kernel.factor()
        x = np.linalg.solve(self._kernel.schur, self._rhs)[self._out_all]
        tm = self._tmatrix_from(x)
        conserved = self._conservation_error(tm) <= self.conservation_tol
        if self._kernel.null_pivots or not conserved:
            try:
                x = self._lu_solution()
                tm = None
            except SingularSystemError:
                # a bound state in the continuum sits exactly at this energy: the full system is
                # singular (kwant.smatrix fails too); the Schur value is the decoupled limit
                if not conserved:
                    raise
                self.n_singular += 1
                if not self._warned_singular:
                    self._warned_singular = True
                    warnings.warn(
                        f"energy {self.energy!r} coincides with a bound state in the continuum "
                        f"({self.field_param} = {value!r}): the scattering system is singular; "
                        "returning the Schur-elimination value (current-conserving), whose "
                        "accuracy is not guaranteed at this exact point",
                        BoundStateWarning,
                        stacklevel=4,
                    )
        self._last_tm = tm
        return x

    def _tmatrix_from(self, x: np.ndarray) -> np.ndarray:
        """Terminal transmissions from the solution; the diagonal is the direct reflection.

        For a probe p, S_pp = -1 - i eta (A^-1)_pp, so R_pp = eta^2 sum |X_pp|^2 + n_orb
        - 2 eta sum_a Im X_aa (the first term is the diagonal block sum).
        """
        p = x.real**2 + x.imag**2
        # block sums by indicator matrices: exact for empty blocks (a lead without an open
        # channel has no rows/columns; np.add.reduceat would fail or repeat a neighbour)
        blocks = self._row_sum @ p @ self._col_sum.T
        w = self._w
        tm = blocks * w[:, None] * w[None, :]
        if len(self._pdiag_rows):
            im = np.add.reduceat(x[self._pdiag_rows, self._pdiag_cols].imag, self._pdiag_start)
            j = np.arange(self.n_leads, len(w))
            tm[j, j] += self._channels[j] - 2.0 * w[j] * im
        return tm

    def _conservation_error(self, tm: np.ndarray) -> float:
        n = self._channels
        return float(max(np.abs(tm.sum(axis=0) - n).max(), np.abs(tm.sum(axis=1) - n).max()))

    @property
    def n_leads(self) -> int:
        """Number of real (mode) leads."""
        return len(self.fsyst.leads)

    @property
    def n_terminals(self) -> int:
        """Leads plus probes."""
        return self.n_leads + len(self._probe_orbs)

    def num_modes(self, value: float = 0.0) -> np.ndarray:
        """Open channels per terminal (probes: one per orbital)."""
        if any(self._lead_dep):
            self._install(self._lead_data(value))
        return self._channels.astype(int)

    def _values(self, values) -> tuple[np.ndarray, bool]:
        arr = np.asarray(values, dtype=float)
        scalar = arr.ndim == 0
        arr = np.atleast_1d(arr)
        if arr.ndim != 1 or not np.all(np.isfinite(arr)):
            raise ParameterError(self.field_param, values, "must be finite numbers (1D)")
        return arr, scalar

    @limited
    def transmission(self, values, *, to_lead: int = 1, from_lead: int = 0) -> np.ndarray:
        """Coherent transmission ``T[to_lead <- from_lead]`` per field value (e^2/h per spin).

        With probes this is only the part that never entered a probe; see :meth:`conductance`.
        """
        arr, scalar = self._values(values)
        nl = self.n_leads
        if not (0 <= to_lead < nl and 0 <= from_lead < nl):
            raise ParameterError("to_lead/from_lead", (to_lead, from_lead), f"in 0..{nl - 1}")
        out = np.empty(len(arr))
        before = self._krylov_fallbacks()
        for k, v in enumerate(arr):
            ncols = None
            if self.method != "schur" and from_lead == 0 and not any(self._lead_dep):
                ncols = int(self._col_sizes[0])
            x = self._solution(v, ncols=ncols)
            c0 = int(self._col_sizes[:from_lead].sum())
            c1 = c0 + int(self._col_sizes[from_lead])
            r0 = int(self._row_sizes[:to_lead].sum())
            r1 = r0 + int(self._row_sizes[to_lead])
            blk = x[r0:r1, c0:c1]
            out[k] = float(np.vdot(blk, blk).real)
        self._warn_krylov(before, len(arr))
        return out[0] if scalar else out

    def _krylov_fallbacks(self) -> int:
        return 0 if self._krylov is None else self._krylov.stats.fallbacks

    def _warn_krylov(self, before: int, n_points: int) -> None:
        """One warning per call naming the points that were solved directly."""
        new = self._krylov_fallbacks() - before
        if new <= 0:
            return
        self.n_fallbacks += new
        warnings.warn(
            f"{new} of {n_points} field point(s) did not converge within max_iter = "
            f"{self.max_iter} block iterations (tol {self.tol:g}) and were solved directly "
            "from a fresh factorization (exact, slower)",
            KrylovFallbackWarning,
            stacklevel=4,  # user code -> @limited wrapper -> public method -> here
        )

    @property
    def krylov_stats(self):
        """Counters of the ``method="krylov"`` path (points, factorizations, solves,
        iterations, fallbacks, max_error), or None for the direct methods."""
        return None if self._krylov is None else self._krylov.stats

    def _tmatrix_one(self, value: float) -> np.ndarray:
        x = self._solution(value)
        tm = self._last_tm if self.method == "schur" and self._last_tm is not None else None
        tm = self._tmatrix_from(x) if tm is None else tm.copy()
        off = tm.copy()
        np.fill_diagonal(off, 0.0)
        # reflection from the sum rule (column j: N_j = R_jj + sum_i T_ij): exact conservation
        np.fill_diagonal(tm, self._channels - off.sum(axis=0))
        return tm

    @limited
    def transmission_matrix(self, values) -> np.ndarray:
        """All terminal-to-terminal transmissions ``T[i, j]`` (from j into i), e^2/h per spin.

        Returns shape (n_values, n_terminals, n_terminals) (or (n, n) for a scalar value).
        The diagonal holds the reflection ``N_j - sum_{i != j} T_ij``.
        """
        arr, scalar = self._values(values)
        before = self._krylov_fallbacks()
        res = np.stack([self._tmatrix_one(v) for v in arr])
        self._warn_krylov(before, len(arr))
        return res[0] if scalar else res

    def conductance_matrix(self, values) -> np.ndarray:
        """Conductance matrix C (e^2/h per spin), ``I = C V``: ``C_ij = -T_ij`` (i != j),
        ``C_jj = sum_{i != j} T_ij``; rows and columns sum to zero (Datta 1995, sec. 2.4)."""
        tm = self.transmission_matrix(values)
        c = -tm
        nt = tm.shape[-1]
        idx = np.arange(nt)
        c[..., idx, idx] = 0.0
        c[..., idx, idx] = -c.sum(axis=-2)
        return c

    @limited
    def conductance(self, values, *, source: int = 0, drain: int = 1) -> np.ndarray:
        """Two-terminal conductance (e^2/h per spin) with all probes floating.

        Without probes (and two leads) this is the coherent ``T[drain <- source]``; with
        probes the probe voltages are eliminated from the conductance matrix (Kron reduction,
        Buttiker 1986).
        """
        if self.n_terminals == 2:
            return self.transmission(values, to_lead=drain, from_lead=source)
        return kron_reduce(self.conductance_matrix(values), source, drain)

    @limited
    def smatrix(self, value: float) -> SMatrix:
        """kwant ``SMatrix`` between the real leads at one field value (all leads in and out)."""
        v = float(self._values(value)[0][0])
        x = self._solution(v)
        nl = self.n_leads
        nrow = int(self._row_sizes[:nl].sum())
        ncol = int(self._col_sizes[:nl].sum())
        info = [ld.prop for ld in self._system.leads]
        leads = list(range(nl))
        return SMatrix(x[:nrow, :ncol].copy(), info, leads, leads, not self._probe_orbs)

    def at_energy(self, energy: float) -> FieldSweeper:
        """A sweeper of the same system, probes and field model at another ``energy``."""
        return FieldSweeper(
            self.fsyst,
            field_param=self.field_param,
            params=self.params,
            energy=energy,
            probes=self.probes,
            method=self.method,
            ordering=self.ordering,
            model=self.model,
            tol=self.tol,
            max_iter=self.max_iter,
        )
