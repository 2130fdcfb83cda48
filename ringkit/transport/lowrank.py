"""Exact flux-tube sweeps by a low-rank (Woodbury/Dyson) update of one sparse factorization.

In flux-tube mode (flux through the hole only, arms field-free) the flux enters the Hamiltonian
only through the hoppings that cross a branch cut: ``H(flux) = H_ref + V(flux)`` with ``V``
supported on ``n_e`` entries (two per cut bond). With ``A = E - H_ref - Sigma`` (``Sigma`` = lead
self-energies and wide-band probe self-energies) and ``V = R D(flux) C^T`` (``R``, ``C`` columns of
the identity at the rows/columns of the entries, ``D`` diagonal), the Woodbury identity gives the
retarded Green's function exactly::

    G(flux) = G0 + G0 R D (1 - C^T G0 R D)^-1 C^T G0,        G0 = A^-1.

Only the blocks of ``G0`` between the cut orbitals and the terminal (lead interface, probe)
orbitals are needed. They come from one MUMPS LU factorization of the whole matrix per energy
(with MUMPS's own pivoting, so only ``A`` itself must be regular; a Schur complement onto the
terminal orbitals would need the *closed* interior to be regular at ``E``, which fails at its
eigenvalues) followed by MUMPS's selected-entries-of-the-inverse solve. Each flux value then
costs one dense ``n_e x n_e`` solve, vectorised over the sweep. Transmissions follow from the
Fisher-Lee formula ``T_pq = Tr(Gamma_p G_pq Gamma_q G_pq^dagger)`` with
``Gamma = i (Sigma - Sigma^dagger)``; this is not an approximation.

Every small solve carries a rounding-error estimate (condition number from random probe
vectors); a point above the tolerance is solved directly from a fresh sparse LU instead, with a
:class:`LowRankFallbackWarning` issued once per sweeper. The default reference flux is a
generic value, and two others are tried if ``A`` is (numerically) singular there.

Public API
----------
FluxTubeModel(fsyst, *, flux_param="flux", params=None, probe_sites=None, probe_eta=None,
              probes=None, flux_period=PHI0, max_entries=1024)
    Energy-independent preparation of a finalized kwant system (finds and checks the cut
    bonds); ``.sweeper(energy)``, ``.with_probes(probes)`` (other probes, no re-evaluation),
    ``.local_dos(energy, flux=0.0)`` (LDOS per orbital, as ``kwant.ldos``).
FluxTubeSweeper(fsyst_or_model, *, energy, ..., reference_flux=None, tol=1e-8)
    One energy: ``transmission(fluxes, source=0, drain=1)``, ``transmission_matrix(fluxes)``,
    ``conductance_matrix(fluxes)``, ``conductance(fluxes)`` (probes floating),
    ``at_energy(energy)``, ``condition(fluxes)``; usable with
    :func:`ringkit.transport.thermal.thermal_conductance`.
thermal_flux_sweep(system, fluxes, energies, weights, *, quantity="transmission")
    Weighted sum over energies (thermal averaging), one factorization per energy.
FluxCut
    The detected flux-dependent entries (``rows``, ``cols``, ``values``, ``rates`` [rad/Wb]).
LowRankFallbackWarning
    Points solved directly because the update was ill-conditioned.

Units: flux in Wb (or whatever unit the kwant parameter uses, with ``flux_period`` in the same
unit); energies and probe widths in the energy unit of the kwant Hamiltonian (``E/t`` for ringkit
systems); transmissions and conductances in units of e^2/h per spin (dimensionless T).

References
----------
D. S. Fisher, P. A. Lee, Phys. Rev. B 23, 6851 (1981), doi:10.1103/PhysRevB.23.6851 (Fisher-Lee).
M. A. Woodbury, Memorandum Rep. 42, Statistical Research Group, Princeton (1950) (from memory).
"""

from __future__ import annotations

import copy
import warnings
from collections.abc import Sequence

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.transport._engine_threads import limited
from ringkit.transport._lowrank_cut import FluxCut, check_leads_flux_free, detect_flux_cut
from ringkit.transport._lowrank_linalg import (
    Factorization,
    SparsePattern,
    batched_update_solve,
    gamma_factor,
    lead_self_energies,
)
from ringkit.transport._lowrank_schur import (
    MAX_UNITARITY_RESIDUAL,
    SchurInverse,
    unitarity_residual,
)
from ringkit.units import PHI0

__all__ = [
    "FluxCut",
    "FluxTubeModel",
    "FluxTubeSweeper",
    "LowRankFallbackWarning",
    "thermal_flux_sweep",
]

_QUANTITIES = ("transmission", "conductance_matrix", "transmission_matrix")
_CHUNK_ENTRIES = 4_000_000  # complex entries of the small matrices held at once (64 MB)
_T2_CHUNK_ENTRIES = 400_000  # the same for all-channel amplitudes (6.4 MB per array)
_COND_MAX = 1.0e11  # retry another reference flux above this (automatic reference only)


class LowRankFallbackWarning(RuntimeWarning):
    """Some flux points were solved directly because the low-rank update was ill-conditioned."""


class FluxTubeModel:
    """Energy-independent preparation of a flux-tube system for low-rank sweeps.

    Evaluates kwant's Hamiltonian three times (flux 0, a small step and a generic value of a
    few periods), identifies the entries that depend on ``flux_param`` and checks that the
    dependence is a pure phase linear in it. Reuse one model for many energies.

    Parameters
    ----------
    fsyst : kwant.system.FiniteSystem
        Finalized system with at least one lead (leads must not depend on the flux and must not
        be precalculated).
    flux_param : str
        Name of the kwant parameter carrying the flux (default ``"flux"``, in Wb).
    params : dict, optional
        Other kwant parameters. A value given for ``flux_param`` is ignored.
    probe_sites : sequence of int or kwant Site, optional
        Sites of wide-band dephasing probes; each is an extra terminal with self-energy
        ``-i eta/2`` on every orbital of the site (``Gamma = eta``).
    probe_eta : float or sequence of float, optional
        Probe width(s) ``eta`` >= 0 in energy units of the Hamiltonian. Required with probes.
    probes : object with ``sites`` and ``eta``, optional
        Alternative to ``probe_sites``/``probe_eta``, e.g. a
        :class:`ringkit.transport.probes.DephasingProbes`.
    flux_period : float
        Natural period of the parameter (default ``h/e`` in Wb); sets the probe values used to
        detect the cut.
    max_entries : int
        Refuse systems in which more entries depend on the flux (a uniform field is not a flux
        tube).

    Raises
    ------
    ringkit.ParameterError
        If nothing depends on ``flux_param``, if the dependence is not a linear pure phase on
        off-diagonal entries, if a lead depends on it or is precalculated, or on bad probes.
    """

    def __init__(
        self,
        fsyst,
        *,
        flux_param: str = "flux",
        params: dict | None = None,
        probe_sites: Sequence | None = None,
        probe_eta: float | Sequence[float] | None = None,
        probes=None,
        flux_period: float = PHI0,
        max_entries: int = 1024,
    ) -> None:
        if probes is not None:
            if probe_sites is not None or probe_eta is not None:
                raise ParameterError("probes", probes, "give either probes or probe_sites/eta")
            probe_sites, probe_eta = list(np.atleast_1d(probes.sites)), probes.eta
        if not hasattr(fsyst, "hamiltonian_submatrix") or not hasattr(fsyst, "leads"):
            raise ParameterError(
                "fsyst", type(fsyst).__name__, "must be a finalized kwant system (.finalized())"
            )
        self.fsyst = fsyst
        self.flux_param = str(flux_param)
        self.flux_period = check_positive("flux_period", flux_period, "Wb")
        self.params = {k: v for k, v in (params or {}).items() if k != self.flux_param}
        self.h0, self.offsets, self.cut, self._cut_pos = detect_flux_cut(
            fsyst,
            self.flux_param,
            self.params,
            flux_period=self.flux_period,
            max_entries=int(max_entries),
        )
        check_leads_flux_free(fsyst, self.flux_param, self.params, self.flux_period)
        self.n_leads = len(fsyst.leads)
        self.lead_orbitals = [self._orbitals(np.asarray(s)) for s in fsyst.lead_interfaces]
        self._lead_cache: dict = {}
        self._set_probes(probe_sites, probe_eta)

    def _set_probes(self, probe_sites, probe_eta) -> None:
        """Probe terminals, the fixed pattern of ``A`` and a fresh MUMPS context."""
        self.probe_sites, self.probe_eta = self._check_probes(probe_sites, probe_eta)
        self.probe_orbitals = [self._orbitals(np.array([s])) for s in self.probe_sites]
        if self.n_terminals < 2:
            raise ParameterError(
                "fsyst", f"{self.n_terminals} terminal(s)", "needs at least two leads or probes"
            )
        # fixed pattern of A = E - H - Sigma: H, the diagonal, one dense block per terminal
        n = self.h0.shape[0]
        sources = [(self.h0.row, self.h0.col), (np.arange(n), np.arange(n))]
        for o in self.lead_orbitals + self.probe_orbitals:
            sources.append((np.repeat(o, o.size), np.tile(o, o.size)))
        pat = SparsePattern(n, sources)
        self._pattern = pat
        self._cut_in_pattern = pat.maps[0][self._cut_pos]
        h_data = self.h0.data.copy()
        h_data[self._cut_pos] = 0.0  # the cut entries are added per reference flux
        zeros = [np.zeros(len(r)) for r, _ in sources[1:]]
        self._a_template = pat.fill([-h_data] + zeros)  # -H without the cut entries
        # one MUMPS context per model: energies share the symbolic analysis (same pattern).
        # A sweeper uses it only while it is being built, so sweepers may coexist (one thread).
        self._lu = Factorization()
        self._schur: SchurInverse | None = None  # probe models: Schur path (``_inverse_block``)

    def with_probes(
        self,
        probes=None,
        *,
        probe_sites: Sequence | None = None,
        probe_eta: float | Sequence[float] | None = None,
    ) -> FluxTubeModel:
        """The same system and parameters with other probes (or none), without re-evaluation.

        Shares the evaluated Hamiltonian ``h0``, the detected cut and the lead matrices with
        this model (the probes only add terminal self-energies); the result is what
        ``FluxTubeModel(self.fsyst, params=self.params, probes=probes, ...)`` gives.
        """
        if probes is not None:
            if probe_sites is not None or probe_eta is not None:
                raise ParameterError("probes", probes, "give either probes or probe_sites/eta")
            probe_sites, probe_eta = list(np.atleast_1d(probes.sites)), probes.eta
        new = copy.copy(self)
        new._set_probes(probe_sites, probe_eta)
        if np.array_equal(new._pattern.rows, self._pattern.rows) and np.array_equal(
            new._pattern.cols, self._pattern.cols
        ):
            new._lu = self._lu  # same pattern (one-orbital probes): reuse the symbolic analysis
        return new

    @limited
    def local_dos(self, energy: float, flux: float = 0.0) -> np.ndarray:
        """LDOS per orbital at ``flux``, summed over the scattering states of all terminals.

        ``(G Gamma G^dagger)_ii / (2 pi)`` with ``Gamma`` of every lead and probe; without
        probes this is what ``kwant.ldos`` returns (tests/test_lowrank.py compares to 1e-10).
        One sparse LU in the model's MUMPS context (shares the symbolic analysis with the
        sweepers) and one solve with the ``Gamma`` factors as right-hand sides.
        """
        energy = float(energy)
        sig = lead_self_energies(self.fsyst.leads, self.params, energy, self._lead_cache)
        for o, eta in zip(self.probe_orbitals, self.probe_eta, strict=True):
            sig.append(-0.5j * eta * np.eye(o.size))
        data = self._assemble(energy, sig, float(flux))
        factors = [gamma_factor(x) for x in sig]
        n = self.h0.shape[0]
        rhs = np.zeros((n, sum(f.shape[1] for f in factors)), dtype=complex)
        c = 0
        for o, f in zip(self.lead_orbitals + self.probe_orbitals, factors, strict=True):
            rhs[o, c : c + f.shape[1]] = f
            c += f.shape[1]
        if rhs.shape[1] == 0:
            return np.zeros(n)
        if not self._lu.factor(self._pattern.matrix(data)):
            raise np.linalg.LinAlgError(
                f"E - H - Sigma is singular at flux {flux!r}, energy {energy!r}"
            )
        psi = self._lu.solve(rhs)
        return (np.abs(psi) ** 2).sum(axis=1) / (2.0 * np.pi)

    def _inverse_block(
        self, data: np.ndarray, keep: np.ndarray, schur: bool = True
    ) -> tuple[np.ndarray, bool]:
        """``(A^-1)[keep][:, keep]`` for the values ``data`` of ``A`` (NaN if singular), and
        whether it came from the Schur path.

        With probes the block is large (one orbital per probe) and one MUMPS Schur complement
        onto ``keep`` gives it at the cost of a factorization alone
        (:class:`ringkit.transport._lowrank_schur.SchurInverse`, with its guards); without
        probes, with ``schur=False``, or when a guard fires, the pivoting LU and MUMPS's
        selected inverse.
        """
        if schur and self.probe_sites.size:
            if self._schur is None or not np.array_equal(self._schur.keep, keep):
                pat = self._pattern
                self._schur = SchurInverse(pat.rows, pat.cols, self.h0.shape[0], keep)
            g = self._schur.inverse_block(data)
            if g is not None:
                return g, True
        self._lu.factor(self._pattern.matrix(data))
        return self._lu.inverse_block(keep), False

    def _assemble(self, energy: float, sigmas: list[np.ndarray], ref: float) -> np.ndarray:
        """Data of ``A = E - H(ref) - Sigma`` in the fixed pattern."""
        pat = self._pattern
        data = self._a_template.copy()
        data[pat.maps[1]] += energy
        np.subtract.at(data, self._cut_in_pattern, self.cut.entries(ref))
        for k, s in enumerate(sigmas):
            np.subtract.at(data, pat.maps[2 + k], s.ravel())
        return data

    @property
    def n_terminals(self) -> int:
        """Number of terminals: kwant leads first (in their order), then the probes."""
        return self.n_leads + len(self.probe_sites)

    def _orbitals(self, sites: np.ndarray) -> np.ndarray:
        o = self.offsets
        if sites.size == 0:
            return np.zeros(0, dtype=np.int64)
        return np.concatenate([np.arange(o[s], o[s + 1]) for s in sites]).astype(np.int64)

    def _check_probes(self, sites, eta) -> tuple[np.ndarray, np.ndarray]:
        if sites is None or len(sites) == 0:
            if eta is not None and np.size(eta) > 1:
                raise ParameterError("probe_eta", eta, "given without probe_sites")
            return np.zeros(0, dtype=np.int64), np.zeros(0)
        n_sites = len(self.offsets) - 1
        idx = []
        for s in sites:
            if isinstance(s, (int, np.integer)):
                i = int(s)
            else:
                try:
                    i = int(self.fsyst.id_by_site[s])
                except (AttributeError, KeyError, TypeError):
                    raise ParameterError(
                        "probe_sites", s, "must be site indices or sites of fsyst"
                    ) from None
            if not 0 <= i < n_sites:
                raise ParameterError("probe_sites", s, f"site index must lie in [0, {n_sites})")
            idx.append(i)
        if len(set(idx)) != len(idx):
            raise ParameterError("probe_sites", list(sites), "must not repeat a site")
        if eta is None:
            raise ParameterError("probe_eta", eta, "must be given (>= 0) when probes are used")
        eta_arr = np.broadcast_to(np.asarray(eta, dtype=float), (len(idx),)).copy()
        for e in eta_arr:
            check_positive("probe_eta", e, "energy units", allow_zero=True)
        return np.asarray(idx, dtype=np.int64), eta_arr

    def sweeper(self, energy: float, **kwargs) -> FluxTubeSweeper:
        """Factorize at ``energy`` and return the :class:`FluxTubeSweeper`."""
        return FluxTubeSweeper(self, energy=energy, **kwargs)


class FluxTubeSweeper:
    """Exact flux sweeps at one energy from one sparse factorization.

    Parameters
    ----------
    fsyst : kwant.system.FiniteSystem or FluxTubeModel
        The system, or a prepared :class:`FluxTubeModel` (then the model's settings are used and
        ``flux_param``, ``params``, ``probe_sites``, ``probe_eta``, ``flux_period`` must not be
        given).
    energy : float
        Energy in the units of the kwant Hamiltonian.
    flux_param, params, probe_sites, probe_eta, probes, flux_period
        See :class:`FluxTubeModel`.
    reference_flux : float, optional
        Flux at which the sparse system is factorized. By default a generic value
        (``0.2113 * flux_period``) is used, and two others are tried if the factorized matrix
        is numerically singular there (a bound state at the reference flux).
    tol : float
        Points whose estimated rounding error in the channel amplitudes exceeds ``tol`` are
        solved directly instead (:class:`LowRankFallbackWarning`, once per sweeper). The
        estimate is the normwise bound ``eps * cond(M) * ||left|| * max|v| * ||M^-1 right||``
        of the small solve (``cond`` from random probe vectors); it is usually 100-1000 times
        above the actual error, which the tests check against kwant to 1e-10.

    Attributes
    ----------
    model : FluxTubeModel
    n_channels : tuple of int
        Rank of ``Gamma`` of every terminal (open modes of a lead; orbitals of a probe).
    n_fallback : int
        Number of points solved directly so far.
    """

    @limited
    def __init__(
        self,
        fsyst,
        *,
        energy: float,
        flux_param: str | None = None,
        params: dict | None = None,
        probe_sites: Sequence | None = None,
        probe_eta: float | Sequence[float] | None = None,
        probes=None,
        flux_period: float | None = None,
        reference_flux: float | None = None,
        tol: float = 1.0e-8,
    ) -> None:
        if isinstance(fsyst, FluxTubeModel):
            given = dict(
                flux_param=flux_param,
                params=params,
                probe_sites=probe_sites,
                probe_eta=probe_eta,
                probes=probes,
                flux_period=flux_period,
            )
            extra = [k for k, v in given.items() if v is not None]
            if extra:
                raise ParameterError(extra[0], given[extra[0]], "is fixed by the FluxTubeModel")
            model = fsyst
        else:
            model = FluxTubeModel(
                fsyst,
                flux_param=flux_param or "flux",
                params=params,
                probe_sites=probe_sites,
                probe_eta=probe_eta,
                probes=probes,
                flux_period=PHI0 if flux_period is None else flux_period,
            )
        self.model = model
        energy_f = float(energy)
        if not np.isfinite(energy_f):
            raise ParameterError("energy", energy, "must be a finite real number", "energy units")
        self.energy = energy_f
        self.tol = check_positive("tol", tol)
        self.n_fallback = 0
        self._warned = False
        self._lu_direct: Factorization | None = None
        rng = np.random.default_rng(20240917)
        g = rng.standard_normal((model.cut.n_entries, 4)).view(complex)
        self._probes = g / np.linalg.norm(g, axis=0)
        self._reference_arg = reference_flux
        if reference_flux is None:
            refs = [c * model.flux_period for c in (0.2113, 0.4367, 0.0791)]
        else:
            refs = [float(reference_flux)]
        for ref in refs:
            self._factorize(ref)
            if self._cond_lower < _COND_MAX:
                break

    # ------------------------------------------------------------------ set-up (per energy)
    def _factorize(self, ref: float) -> None:
        m, cut = self.model, self.model.cut
        self.reference_flux = ref
        n = m.h0.shape[0]
        params = {**m.params, m.flux_param: 0.0}
        sig = lead_self_energies(m.fsyst.leads, params, self.energy, m._lead_cache)
        for k, s in enumerate(sig):
            if s.shape != (m.lead_orbitals[k].size,) * 2:
                raise RuntimeError(f"self-energy of lead {k} has shape {s.shape}")
        for o, eta in zip(m.probe_orbitals, m.probe_eta, strict=True):
            sig.append(-0.5j * eta * np.eye(o.size))
        self._data_ref = m._assemble(self.energy, sig, ref)
        factors = [gamma_factor(s) for s in sig]
        self.n_channels = tuple(f.shape[1] for f in factors)
        self._chan_off = np.concatenate([[0], np.cumsum(self.n_channels)]).astype(np.int64)
        i_orbs = np.concatenate(m.lead_orbitals + m.probe_orbitals)
        lmat = np.zeros((i_orbs.size, int(self._chan_off[-1])), dtype=complex)
        r0 = 0
        for k, f in enumerate(factors):
            lmat[r0 : r0 + f.shape[0], self._chan_off[k] : self._chan_off[k + 1]] = f
            r0 += f.shape[0]
        self._i_orbs, self._lmat = i_orbs, lmat
        keep = np.unique(np.concatenate([cut.rows, cut.cols, i_orbs]))
        g_kk, from_schur = m._inverse_block(self._data_ref, keep)
        self._products(g_kk, keep, lmat, i_orbs, n)
        if from_schur and not unitarity_residual(self._base) <= MAX_UNITARITY_RESIDUAL:
            # the Schur block fails the S-matrix unitarity check: the pivoting LU instead
            g_lu = m._inverse_block(self._data_ref, keep, schur=False)[0]
            self._products(g_lu, keep, lmat, i_orbs, n)

    def _products(self, g_kk, keep, lmat, i_orbs, n) -> None:
        """Reference amplitudes and the Woodbury factors from the block ``g_kk``."""
        m, cut = self.model, self.model.cut
        # lower bound on cond(A) (max-norm of A^-1 on the block times the inf-norm of A)
        a_norm = np.bincount(m._pattern.rows, np.abs(self._data_ref), n).max()
        g_max = np.abs(g_kk).max() if np.all(np.isfinite(g_kk)) else np.inf
        self._cond_lower = float(a_norm * g_max)
        ip, rp, cp = (np.searchsorted(keep, x) for x in (i_orbs, cut.rows, cut.cols))
        q = g_kk[np.ix_(cp, rp)]
        self._negq = -q
        self._qcol2 = (np.abs(q) ** 2).sum(axis=0)
        lh = lmat.conj().T
        self._left = lh @ g_kk[np.ix_(ip, rp)]
        self._right = g_kk[np.ix_(cp, ip)] @ lmat
        self._base = lh @ g_kk[np.ix_(ip, ip)] @ lmat

    # ------------------------------------------------------------------ per-flux update
    def _delta_v(self, fluxes: np.ndarray) -> np.ndarray:
        cut = self.model.cut
        return cut.entries(fluxes) - cut.entries(self.reference_flux)

    def condition(self, fluxes) -> np.ndarray:
        """Condition-number estimate of the small update matrix at each flux (>= 1).

        ``inf`` marks an exactly singular update matrix.
        """
        f = np.asarray(fluxes, dtype=float)
        v = self._delta_v(f.ravel())
        _, kappa = batched_update_solve(
            self._negq, self._qcol2, v, self._right[:, :0], self._probes
        )
        return kappa.reshape(f.shape)

    def _amplitudes(self, fluxes: np.ndarray, out_ch: np.ndarray, in_ch: np.ndarray) -> np.ndarray:
        """Channel amplitudes ``L^dagger G L`` for rows ``out_ch`` and columns ``in_ch``."""
        nf = fluxes.size
        res = np.empty((nf, out_ch.size, in_ch.size), dtype=complex)
        base = self._base[np.ix_(out_ch, in_ch)]
        left = self._left[out_ch]
        right = self._right[:, in_ch]
        lnorm = np.linalg.norm(left)
        eps = np.finfo(float).eps
        bad_all: list[int] = []
        chunk = max(1, min(512, _CHUNK_ENTRIES // max(1, self._negq.size)))
        for s in range(0, nf, chunk):
            f = fluxes[s : s + chunk]
            v = self._delta_v(f)
            y, kappa = batched_update_solve(self._negq, self._qcol2, v, right, self._probes)
            z = v[:, :, None] * y
            res[s : s + f.size] = base + left @ z
            ynorm = np.sqrt((np.abs(y) ** 2).sum(axis=(1, 2)))
            err = eps * kappa * lnorm * np.abs(v).max(axis=1, initial=0.0) * ynorm
            good = (err <= self.tol) & np.all(np.isfinite(res[s : s + f.size]), axis=(1, 2))
            bad_all.extend((s + np.flatnonzero(~good)).tolist())
        if bad_all:
            self._warn(len(bad_all), nf)
            for k in bad_all:
                res[k] = self._direct_amplitudes(float(fluxes[k]))[np.ix_(out_ch, in_ch)]
            self.n_fallback += len(bad_all)
        return res

    def _channel_t2(self, fluxes: np.ndarray) -> np.ndarray:
        """``|L^dagger G L|^2`` between all channels, shape ``(n_flux, n_ch, n_ch)``.

        The all-channel case of :meth:`_amplitudes` (conductance matrices, dephasing probes),
        organised for many channels: the Woodbury correction of every flux of a chunk is one
        matrix product, and each point is checked a posteriori against the unitarity of the
        scattering matrix, ``sum_i |a_ij|^2 + 2 Im a_jj = 0`` for every channel ``j``
        (``a = L^dagger G L``; from ``G - G^dagger = -i G Gamma G^dagger`` with ``Gamma`` of
        all terminals, Fisher and Lee 1981). A point failing either that check or the
        rounding-error bound of :meth:`_amplitudes` by more than ``tol`` is solved directly.
        """
        nf, nch, ne = fluxes.size, int(self._chan_off[-1]), self._negq.shape[0]
        out = np.empty((nf, nch, nch))
        lnorm = np.linalg.norm(self._left)
        eps = np.finfo(float).eps
        bad_all: list[int] = []
        # small chunks keep the per-chunk arrays in cache (measured ~10 % faster than one
        # chunk of 201 points at 110 channels) and the memory low
        chunk = max(1, min(512, _T2_CHUNK_ENTRIES // max(1, self._negq.size, nch * nch)))
        for s in range(0, nf, chunk):
            f = fluxes[s : s + chunk]
            v = self._delta_v(f)
            y, kappa = batched_update_solve(self._negq, self._qcol2, v, self._right, self._probes)
            z = (v[:, :, None] * y).transpose(1, 0, 2).reshape(ne, f.size * nch)
            amp = (self._left @ z).reshape(nch, f.size, nch).transpose(1, 0, 2) + self._base
            t2 = amp.real**2 + amp.imag**2
            out[s : s + f.size] = t2
            ynorm = np.sqrt((np.abs(y) ** 2).sum(axis=(1, 2)))
            err = eps * kappa * lnorm * np.abs(v).max(axis=1, initial=0.0) * ynorm
            unitarity = unitarity_residual(amp)
            good = (err <= self.tol) & (unitarity <= self.tol) & np.isfinite(unitarity)
            bad_all.extend((s + np.flatnonzero(~good)).tolist())
        if bad_all:
            self._warn(len(bad_all), nf)
            for k in bad_all:
                out[k] = np.abs(self._direct_amplitudes(float(fluxes[k]))) ** 2
            self.n_fallback += len(bad_all)
        return out

    def _direct_amplitudes(self, flux: float) -> np.ndarray:
        """All channel amplitudes at one flux from a fresh sparse solve (fallback path)."""
        m = self.model
        data = self._data_ref.copy()
        np.subtract.at(data, m._cut_in_pattern, self._delta_v(np.array([flux]))[0])
        keep, inv_pos = np.unique(self._i_orbs, return_inverse=True)
        if self._lu_direct is None:
            self._lu_direct = Factorization()
        if not self._lu_direct.factor(m._pattern.matrix(data)):
            raise np.linalg.LinAlgError(
                f"E - H - Sigma is singular at flux {flux!r}, energy {self.energy!r}: "
                "a bound state sits exactly at this energy"
            )
        g = self._lu_direct.inverse_block(keep)[np.ix_(inv_pos, inv_pos)]
        return self._lmat.conj().T @ g @ self._lmat

    def _warn(self, n_bad: int, n_total: int) -> None:
        if self._warned:
            return
        self._warned = True
        warnings.warn(
            f"low-rank flux update ill-conditioned at {n_bad} of {n_total} flux point(s) "
            f"(energy {self.energy:g}); those points were solved directly (exact, slower). "
            "Further occurrences on this sweeper are not reported.",
            LowRankFallbackWarning,
            stacklevel=4,
        )

    # ------------------------------------------------------------------ public quantities
    def _terminal(self, name: str, k: int) -> int:
        n = self.model.n_terminals
        if not (isinstance(k, (int, np.integer)) and 0 <= k < n):
            raise ParameterError(name, k, f"must be a terminal index in [0, {n})")
        return int(k)

    @limited
    def transmission(self, fluxes, *, source: int = 0, drain: int = 1) -> np.ndarray:
        """Transmission ``T_{drain, source}`` (from ``source`` into ``drain``) at each flux.

        Parameters
        ----------
        fluxes : float or array_like
            Flux values (Wb for ringkit systems).
        source, drain : int
            Terminal indices (kwant leads first, then probes).

        Returns
        -------
        ndarray
            Same shape as ``fluxes``; two-terminal conductance in units of e^2/h per spin.
        """
        src, dst = self._terminal("source", source), self._terminal("drain", drain)
        if src == dst:
            raise ParameterError("drain", drain, "must differ from source")
        f = np.asarray(fluxes, dtype=float)
        c = self._chan_off
        out_ch, in_ch = np.arange(c[dst], c[dst + 1]), np.arange(c[src], c[src + 1])
        t = self._amplitudes(f.ravel(), out_ch, in_ch)
        return (np.abs(t) ** 2).sum(axis=(1, 2)).reshape(f.shape)

    @limited
    def transmission_matrix(self, fluxes) -> np.ndarray:
        """All ``T_ij`` (from terminal j into terminal i), shape ``fluxes.shape + (n, n)``.

        The diagonal (reflection) is set to 0; use :meth:`conductance_matrix` for the full
        linear-response matrix.
        """
        f = np.asarray(fluxes, dtype=float)
        t2 = self._channel_t2(f.ravel())
        n = self.model.n_terminals
        sizes = np.asarray(self.n_channels)
        nl = self.model.n_leads
        if np.all(sizes == 1):
            tm = t2
        elif np.all(sizes[:nl] > 0) and np.all(sizes[nl:] == 1):
            # one-channel probes after the leads: only the lead rows and columns are summed
            k, starts = int(self._chan_off[nl]), self._chan_off[:nl]
            tm = np.empty((f.size, n, n))
            tm[:, nl:, nl:] = t2[:, k:, k:]
            rows = np.add.reduceat(t2[:, :k, :], starts, axis=1)
            tm[:, :nl, :nl] = np.add.reduceat(rows[:, :, :k], starts, axis=2)
            tm[:, :nl, nl:] = rows[:, :, k:]
            tm[:, nl:, :nl] = np.add.reduceat(t2[:, k:, :k], starts, axis=2)
        else:
            tm = np.zeros((f.size, n, n))
            nonempty = np.flatnonzero(sizes > 0)
            if nonempty.size:
                starts = self._chan_off[nonempty]
                blocks = np.add.reduceat(np.add.reduceat(t2, starts, axis=1), starts, axis=2)
                if nonempty.size == n:
                    tm = blocks
                else:
                    tm[:, nonempty[:, None], nonempty[None, :]] = blocks
        idx = np.arange(n)
        tm[:, idx, idx] = 0.0
        return tm.reshape(f.shape + (n, n))

    def conductance_matrix(self, fluxes) -> np.ndarray:
        """Büttiker conductance matrix in units of e^2/h per spin, shape ``fluxes.shape + (n, n)``.

        ``C_ij = -T_ij`` for ``i != j`` and ``C_jj = sum_{i != j} T_ij`` (= ``N_j - R_jj``), so
        ``I = C V`` and rows and columns sum to zero (Datta 1995, sec. 2.4; the same convention
        as kwant's ``SMatrix.conductance_matrix``).
        """
        tm = self.transmission_matrix(fluxes)
        c = -tm
        idx = np.arange(tm.shape[-1])
        c[..., idx, idx] = tm.sum(axis=-2)
        return c

    @limited
    def conductance(self, fluxes, *, source: int = 0, drain: int = 1) -> np.ndarray:
        """Two-terminal conductance (e^2/h per spin) with every other terminal floating.

        With two terminals this is ``T[drain <- source]``; otherwise the floating terminals'
        voltages are eliminated from :meth:`conductance_matrix` (Kron reduction, Büttiker,
        Phys. Rev. Lett. 57, 1761 (1986); :func:`ringkit.transport.fastsweep.kron_reduce`).
        """
        src, dst = self._terminal("source", source), self._terminal("drain", drain)
        if self.model.n_terminals == 2:
            return self.transmission(fluxes, source=src, drain=dst)
        from ringkit.transport.fastsweep import kron_reduce

        return kron_reduce(self.conductance_matrix(fluxes), src, dst)

    def at_energy(self, energy: float) -> FluxTubeSweeper:
        """A sweeper of the same model (cut, probes, symbolic analysis) at another energy.

        Makes this class usable with :func:`ringkit.transport.thermal.thermal_conductance`.
        """
        return FluxTubeSweeper(
            self.model, energy=energy, reference_flux=self._reference_arg, tol=self.tol
        )


def thermal_flux_sweep(
    system,
    fluxes,
    energies,
    weights,
    *,
    quantity: str = "transmission",
    source: int = 0,
    drain: int = 1,
    **kwargs,
) -> np.ndarray:
    """Weighted sum over energies of a flux sweep: one factorization per energy.

    ``result(flux) = sum_k weights[k] * X(energies[k], flux)``. For thermal averaging pass the
    energy grid and the weights of ``-df/dE`` (e.g. from ``ringkit.transport.thermal``).

    Parameters
    ----------
    system : kwant.system.FiniteSystem or FluxTubeModel
        A model is reused for every energy (build it once to avoid re-detecting the cut).
    fluxes : array_like
        Flux values (Wb).
    energies, weights : array_like
        Energy grid (Hamiltonian units) and weights of the same length.
    quantity : {"transmission", "conductance_matrix", "transmission_matrix"}
        What to average.
    source, drain : int
        Terminals for ``quantity="transmission"``.
    **kwargs
        Passed to :class:`FluxTubeModel` (when ``system`` is not a model) or to
        :class:`FluxTubeSweeper` (``reference_flux``, ``tol``).
    """
    check_choice("quantity", quantity, _QUANTITIES)
    e = np.atleast_1d(np.asarray(energies, dtype=float))
    w = np.atleast_1d(np.asarray(weights, dtype=float))
    if e.ndim != 1 or e.shape != w.shape or e.size == 0:
        raise ParameterError("weights", f"shape {w.shape}", f"must match energies {e.shape}")
    sweep_kw = {k: kwargs.pop(k) for k in ("reference_flux", "tol") if k in kwargs}
    model = system if isinstance(system, FluxTubeModel) else FluxTubeModel(system, **kwargs)
    total = None
    for ek, wk in zip(e, w, strict=True):
        sw = FluxTubeSweeper(model, energy=float(ek), **sweep_kw)
        if quantity == "transmission":
            x = sw.transmission(fluxes, source=source, drain=drain)
        else:
            x = getattr(sw, quantity)(fluxes)
        total = wk * x if total is None else total + wk * x
    return total
