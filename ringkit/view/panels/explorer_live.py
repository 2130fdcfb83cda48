"""Live lattice view of the device explorer: the exact flux-tube lattice model on every change.

In flux-tube mode (flux through the hole only) the explorer can recompute the full
tight-binding G(Phi) of the device on every control change, next to the 1D network preview.
This module is the computation (no widgets); :class:`LiveLattice` keeps what did not change:

* the built lattice (:func:`ringkit.tightbinding.build_ring`), reused while the inputs of the
  build are unchanged: geometry, resolved lattice spacing and hopping, Anderson strength (from
  the mean free path at E_F), gated arm, branch cut, lead stubs and disorder seed. The gate
  potential is a kwant parameter (the live device always carries an
  :class:`~ringkit.device.ArmGate`; at 0 it gives the same values as no gate), so gate,
  temperature, L_phi and field-window changes never rebuild. A new Fermi energy rebuilds
  only when it changes the lattice: the automatic spacing ``a = max_kfa/kF`` follows kF, and a
  mobility-defined disorder strength depends on E_F; with a fixed ``lattice_spacing`` and a
  clean material the lattice is reused;
* the dephasing-probe sites and the local-density weights behind the L_phi -> coupling
  mapping (:func:`ringkit.transport.probes.attach_probes`, cached per lattice, E_F and gate;
  a new L_phi only recomputes the coupling with the same formula);
* one probe-free :class:`~ringkit.transport.lowrank.FluxTubeModel` per (lattice, gate): the
  only evaluation of the Hamiltonian; it also gives the zero-field LDOS of the probe weights
  (``FluxTubeModel.local_dos``), and the model with probes is derived from it per probe set
  (``with_probes``: no re-evaluation, no new cut detection); coherent: one
  :class:`~ringkit.transport.lowrank.FluxTubeSweeper` (one sparse factorization) per energy;
* with dephasing probes, per energy one block that does not depend on the probe coupling
  (:class:`~ringkit.transport._probe_solver.ProbeFluxSolver` of the probe-free model: one
  MUMPS Schur complement onto the cut, lead-interface and probe orbitals, for the union of the
  analytic frame's probe sites and the calibrated frame's ``across=True`` sites); the probes
  (any eta), the flux and the Kron reduction of the floating probes follow by exact dense
  algebra (Dyson, Woodbury). A new L_phi and the calibrated frame therefore cost no sparse
  factorization at the energies already done (7-10 ms of dense algebra per energy on the
  default ring, 10-26 ms under load, instead of ~80 ms).

Flux grid: the flux-tube conductance is exactly periodic in the hole flux with period h/e
(gauge invariance, Byers-Yang), so the live line uses a grid commensurate with the period,
``flux_k = k (h/e)/M`` with M points per period, and evaluates only the distinct residues
``k mod M`` (at most M low-rank solves per energy, for any field window). The x axis is the
equivalent field ``B = flux/A_mean`` as in :mod:`ringkit.view.panels.explorer_full`.

Temperature: the one thermal policy (:func:`ringkit.thermal_policy.energy_average` through
:func:`ringkit.transport.thermal.thermal_average`), called exactly as
:func:`ringkit.transport.field_sweep` calls it (bound from the open lead modes, h/e and h/2e
band projections over the plotted grid as controlled functionals, per-spin tolerance
``tol/2``), at the live goal ``LIVE_TOL`` = 1e-2 e^2/h (the library default 1e-4 is what the
full computation uses) and a budget of ``LIVE_MAX_ENERGIES`` energies. Every result carries
the number of energies, the error estimate reached and whether it is below the goal; the
panel shows them. With the same goal and budget the live line equals ``field_sweep``.
G per energy is kept over the whole h/e period, so a new field window costs no factorization.
The energies stay on the low-rank path (one factorization each): the spectral energy engine
(:class:`ringkit.transport.spectral.SpectralSweeper`, one reduced model for every flux and
energy, cut mode with the same probes) gives the same G (< 1e-12 apart at the same energies)
but cost 2-4x more CPU time per update on the default ring at 0.3 K and 1 K
(benchmarks/RESULTS-live-preview.md, engine comparison). Dephasing: ``n_probes`` floating
Büttiker probes when L_phi is finite, with the analytic coupling by default (realised L_phi not
measured); ``compute(..., calibrate_l_phi=True)`` uses the coupling calibrated on the device as
``field_sweep`` does (cached calibrator, set up on the view's evaluated model) and reports the
realised L_phi with its error (the panel does this in the background after the first frame).
``compute(params, cancelled=...)`` stops between energies when newer settings arrive (finished
energies stay cached).

API
---
LiveLattice(*, max_sites=LIVE_MAX_SITES, max_energies=LIVE_MAX_ENERGIES, tol=LIVE_TOL,
            n_probes=N_PROBES, points_per_period=64, min_points=161)
    ``.unavailable(params)`` (reason or None), ``.compute(params, cancelled=None)``,
    ``.ring``, ``.builds``, ``.factorizations``.
LiveResult
    Line data, spectrum, amplitudes, thermal error estimate and energies, requested and
    realised L_phi, timings and cache facts of one update.
LiveCancelled
    Raised by ``compute`` when ``cancelled()`` turns true.
live_device(params), live_flux_grid(field_min, field_max, period, ...)
single_thread_blas()
    Context limiting BLAS to one thread (threadpoolctl, optional) around each live update.
"""

from __future__ import annotations

import contextlib
import copy
import math
import time
import warnings
from collections import OrderedDict
from dataclasses import dataclass, replace
from typing import Any, NamedTuple

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.analysis.spectrum import OscillationSpectrum, ab_bands, oscillation_spectrum
from ringkit.units import PHI0
from ringkit.view.panels.explorer import N_PROBES, ExplorerParams, _band_rms

__all__ = [
    "LIVE_MAX_SITES",
    "LIVE_MAX_ENERGIES",
    "LIVE_TOL",
    "LiveCancelled",
    "LiveLattice",
    "LiveResult",
    "live_device",
    "live_flux_grid",
    "live_flux_of",
    "gated_model",
    "single_thread_blas",
]

LIVE_MAX_SITES = 40_000
"""Largest site estimate for which the live view computes (the explorer's default 0.5 µm
ring has ~24 000 sites; timings: benchmarks/bench_live_preview.py)."""

LIVE_TOL = 1e-2
"""Error goal (e^2/h) of the live view's thermal average (the library default is 1e-4; the
full computation uses it). The estimate reached is shown with every update."""

LIVE_MAX_ENERGIES = 31
"""Budget of energies (one factorization each) of one live thermal average: the smallest
budget :func:`ringkit.thermal_policy.energy_average` accepts. When the policy needs more, the
update shows the error reached and says it is not converged."""

_MAX_MODELS = 6  # probe-free base models and models with probes
_MAX_SWEEPERS = 4  # one sparse factorization each (~10 MB at 24k sites)
_MAX_ROWS = 4096  # G at the flux residues per (model, energy): a few hundred bytes each
_MAX_PROBE_SETS = 8
_MAX_ENGINES = 2  # eta-independent per-energy blocks (probes): one set per gate and sites
_MAX_BLOCKS = 96  # blocks kept per engine (~0.6 MB each at 24k sites, 80 probe sites)
_BLAS: list = []  # lazily created threadpoolctl controller (empty: not looked up yet)


class LiveCancelled(Exception):
    """A live update stopped because newer settings superseded it."""


class _Thermal(NamedTuple):
    value: np.ndarray  # spinless G over the plotted grid
    energies: np.ndarray  # lattice units
    weights: np.ndarray
    error: float  # e^2/h (spin included)
    converged: bool
    note: str


LIVE_L_PHI_PENDING = "being measured… (per-device calibration running in the background)"

LIVE_L_PHI_STATUS = (
    "not measured: analytic probe coupling (its realised L_phi varies 0.7-2.1x between "
    "devices, docs/probes.md); the full computation measures it on the device"
)


def _realised(probes) -> tuple[float, float, str]:
    """Realised L_phi (m), its error and status (:func:`realised_l_phi_info` of the probes)."""
    from ringkit.transport.realised_l_phi import realised_l_phi_info

    info = realised_l_phi_info(probes)
    real, err = info["l_phi_realised_m"], info["l_phi_realised_err_m"]
    status = LIVE_L_PHI_STATUS if math.isnan(real) else info["l_phi_status"]
    return float(real), float(err), status


def _calibration_ring(ring):
    """``ring`` with the device's temperature and L_phi set to 0 and None: they do not enter
    the Hamiltonian, so every live L_phi and temperature shares one cached calibrator
    (:func:`ringkit.transport.realised_l_phi.ring_fingerprint` hashes the whole device)."""
    mat = ring.device.material
    if mat.temperature == 0.0 and mat.l_phi is None:
        return ring
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # device notes were given when `ring` was built
        mat = replace(mat, temperature=0.0, l_phi=None)
        return replace(ring, device=replace(ring.device, material=mat))


def single_thread_blas() -> contextlib.AbstractContextManager:
    """Context limiting the BLAS libraries of the process to one thread (threadpoolctl).

    The low-rank sweeps do many small dense solves and products; with OpenBLAS's default two
    threads on the project's shared 2-core machine they ran 30-100x slower under load
    (measured: 64 flux points with 40 probes took 0.6-2 s instead of 12 ms). Without
    threadpoolctl installed this is a no-op (set ``OPENBLAS_NUM_THREADS=1`` instead).
    """
    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:  # optional: the computation is the same, only slower
            _BLAS.append(None)
        else:
            _BLAS.append(ThreadpoolController())
    ctrl = _BLAS[0]
    if ctrl is None:
        return contextlib.nullcontext()
    return ctrl.limit(limits=1, user_api="blas")


@dataclass(frozen=True)
class LiveResult:
    """One live update of the lattice model.

    Attributes
    ----------
    field : ndarray
        Equivalent field ``flux/A_mean`` in T (grid commensurate with the h/e period).
    flux : ndarray
        Hole flux in Wb, ``k (h/e)/points_per_period``.
    conductance : ndarray
        Two-terminal conductance in e^2/h (spin degenerate, probes floating).
    spectrum : OscillationSpectrum
    period : float
        h/e period ``(h/e)/A_mean`` in T.
    mean_conductance, amplitude_he, amplitude_h2e : float
        Mean G and rms of the h/e and h/2e band contents in e^2/h.
    energies, weights : ndarray
        Energies (J) and weights of the thermal average (:mod:`ringkit.thermal_policy`).
    thermal_error : float
        Estimated error of the thermal average in e^2/h (largest over the plotted points and
        the h/e, h/2e band projections; 0 at T = 0).
    thermal_tol : float
        Its goal in e^2/h (0 at T = 0).
    thermal_converged : bool
        Whether the estimate is below ``thermal_tol`` within the energy budget.
    n_sites : int
    lattice_spacing : float
        m.
    n_probes : int
        Dephasing probes (0: coherent).
    probe_sites : ndarray of int
        Their site indices in the lattice's kwant order (empty when coherent).
    probe_eta : float
        Probe coupling in units of t (0 without probes).
    l_phi : float or None
        Requested L_phi in m.
    l_phi_realised, l_phi_realised_err : float
        L_phi the probes realise on this device and its error in m (NaN: not measured, the
        coupling is the analytic estimate; inf: coherent).
    l_phi_status : str
    points_per_period : int
    n_solved : int
        Distinct flux values solved per energy (residues modulo h/e).
    rebuilt : bool
        Whether this update built a new lattice.
    factorizations : int
        Sparse factorizations done in this update.
    timings : dict
        Seconds spent in ``build``, ``probes``, ``model``, ``factorize``, ``sweep``, ``total``.
    notes : tuple of str
    """

    field: np.ndarray
    flux: np.ndarray
    conductance: np.ndarray
    spectrum: OscillationSpectrum
    period: float
    mean_conductance: float
    amplitude_he: float
    amplitude_h2e: float
    energies: np.ndarray
    weights: np.ndarray
    thermal_error: float
    thermal_tol: float
    thermal_converged: bool
    n_sites: int
    lattice_spacing: float
    n_probes: int
    probe_sites: np.ndarray
    probe_eta: float
    l_phi: float | None
    l_phi_realised: float
    l_phi_realised_err: float
    l_phi_status: str
    points_per_period: int
    n_solved: int
    rebuilt: bool
    factorizations: int
    timings: dict
    notes: tuple[str, ...] = ()

    @property
    def n_energies(self) -> int:
        """Energies of the thermal average (1 at T = 0)."""
        return int(self.energies.size)


def live_device(params: ExplorerParams):
    """The :class:`ringkit.device.RingDevice` of the live view.

    As :func:`ringkit.view.panels.explorer_full.build_device`, but always with an
    :class:`~ringkit.device.ArmGate` on ``params.gate_arm`` (potential ``gate_potential``,
    possibly 0) so that the gate is a kwant parameter of the built lattice.
    """
    from ringkit.device import ArmGate, RingDevice

    return RingDevice(
        params.material_obj(),
        params.geometry(),
        gate=ArmGate(arm=params.gate_arm, potential=params.gate_potential),
        field_mode=params.field_mode,
        lattice_spacing=params.lattice_spacing,
    )


def _lattice_key(device, seed: int) -> tuple:
    """Everything :func:`ringkit.tightbinding.build_ring` depends on, except the gate value."""
    mat = device.material
    disordered = not (
        mat.disorder_strength in (None, 0, 0.0) and mat.elastic_mean_free_path is None
    )
    return (
        device.geometry,
        device.spacing,
        device.hopping,
        device.field_mode,
        device.cut_angle,
        device.lead_stub,
        device.gate.arm,
        mat.disorder_strength,
        mat.elastic_mean_free_path,
        # W calibrated from a mean free path depends on E_F/t (a mobility-defined mean free
        # path l = hbar kF mu/e already changes with E_F; a given one does not)
        mat.fermi_energy_J if disordered else None,
        int(seed),
    )


def live_flux_grid(
    field_min: float,
    field_max: float,
    period: float,
    *,
    points_per_period: int = 64,
    min_points: int = 161,
    max_points: int = 20_001,
) -> tuple[np.ndarray, int]:
    """Integer grid ``k`` and points per period ``M`` of the commensurate field grid.

    The grid is ``B_k = k period/M`` for all ``field_min <= B_k <= field_max`` (T), with
    ``M >= points_per_period`` and at least ``min_points`` points in the window (at most
    ``max_points``).
    """
    period = check_positive("period", period, "T")
    if not field_max > field_min:
        raise ParameterError("field_max", field_max, f"must be > field_min = {field_min:g} T", "T")
    span = field_max - field_min
    m = max(int(points_per_period), math.ceil(min_points * period / span))
    if span / period * m + 1 > max_points:
        m = max(4, math.floor((max_points - 1) * period / span))
    step = period / m
    k0 = math.ceil(field_min / step - 1e-9)
    k1 = math.floor(field_max / step + 1e-9)
    return np.arange(k0, k1 + 1, dtype=np.int64), m


def live_flux_of(params: ExplorerParams, *, points_per_period: int = 64,
                 min_points: int = 161) -> np.ndarray:  # fmt: skip
    """Flux grid (Wb) the live view uses for ``params`` (builds the lattice for its area)."""
    from ringkit.tightbinding import build_ring

    ring = build_ring(live_device(params), seed=params.seed)
    k, m = live_flux_grid(params.field_min, params.field_max, PHI0 / ring.loop_area,
                          points_per_period=points_per_period, min_points=min_points)  # fmt: skip
    return k * (PHI0 / m)


def gated_model(root, gate: float, gated_sites: np.ndarray):
    """The probe-free flux-tube model ``root`` (evaluated at gate 0) at arm-gate ``gate``.

    The arm gate is an on-site term ``base + gate`` on the sites of the gated arm (the value
    function of :mod:`ringkit.tightbinding`), so ``H(gate) = H(0) + gate P_arm`` entry by entry:
    the same floating-point sum kwant evaluates, without re-evaluating the Hamiltonian or
    re-detecting the flux cut (hoppings, cut and leads do not depend on the gate). Tested
    against kwant's ``hamiltonian_submatrix`` (tests/test_view_live.py).

    Parameters
    ----------
    root : FluxTubeModel
        Without probes, built with ``params["gate"] == 0``.
    gate : float
        Gate potential in units of t.
    gated_sites : ndarray of bool
        Gated-arm mask in the system's site order.
    """
    import scipy.sparse as sp

    if root.params.get("gate") != 0.0 or len(root.probe_sites):
        raise ParameterError("root", root.params.get("gate"), "must be probe-free at gate 0")
    h0 = root.h0
    gated = np.zeros(h0.shape[0], dtype=bool)
    for s in np.flatnonzero(gated_sites):
        gated[root.offsets[s] : root.offsets[s + 1]] = True
    data = h0.data.copy()
    diag = (h0.row == h0.col) & gated[h0.row]
    data[diag] = data[diag] + float(gate)
    new = copy.copy(root)
    new.h0 = sp.coo_matrix((data, (h0.row, h0.col)), shape=h0.shape)
    new.params = {**root.params, "gate": float(gate)}
    new._set_probes(None, None)
    new._lu = root._lu  # same pattern: share the symbolic analysis (as ``with_probes``)
    return new


class _Lru(OrderedDict):
    """A small least-recently-used cache."""

    def __init__(self, size: int) -> None:
        super().__init__()
        self.size = size

    def get_or(self, key, make):
        if key in self:
            self.move_to_end(key)
            return self[key], False
        value = make()
        self[key] = value
        while len(self) > self.size:
            self.popitem(last=False)
        return value, True


class _Template:
    """What :class:`EnergyPool` needs of a sweeper: ``energy`` and ``at_energy`` (one sparse
    factorization per energy, in the worker)."""

    energy = math.nan  # never equal to an energy asked for

    def __init__(self, model) -> None:
        self.model = model

    def at_energy(self, energy: float):
        from ringkit.transport.lowrank import FluxTubeSweeper

        return FluxTubeSweeper(self.model, energy=energy)


class _Pool:
    """Energies of one live update in worker processes (:class:`EnergyPool`), when available.

    The workers are forked from this process with the model (probes, symbolic analysis
    inherited), so each evaluates ``FluxTubeSweeper.conductance`` at the flux
    residues exactly as the serial path; rows are stored in the live view's per-energy cache.
    Energies go out in chunks of two per worker, so a cancellation is seen between chunks.
    """

    def __init__(self, view, model_of, mkey, m: int, residues: np.ndarray, cancelled,
                 timings: dict) -> None:  # fmt: skip
        self.view, self.model_of, self.mkey, self.m = view, model_of, mkey, m
        self.residues, self.cancelled, self.timings = residues, cancelled, timings
        self._pool = None
        self.workers = 1
        try:
            from ringkit.transport.energy_pool import thermal_workers
        except ImportError:  # parallel energies not available: serial path
            self.workers = 1
        else:
            self.workers = thermal_workers(view.workers)

    def _key(self, e_t: float) -> tuple:
        return (self.mkey, e_t, self.m, self.residues.tobytes())

    def fill(self, energies_t: list[float]) -> int:
        """Evaluate the uncached energies in the workers; returns the factorizations done."""
        todo = [e for e in dict.fromkeys(energies_t) if self._key(e) not in self.view._rows]
        if self.workers < 2 or len(todo) < 2:
            return 0
        if self._pool is None:
            from ringkit.transport.energy_pool import EnergyPool

            # the workers inherit the model (no sweeper needs to be factorized here first);
            # the cost of one energy measured in an earlier update spares the pool timing one
            # serially
            fluxes = self.residues * (PHI0 / self.m)
            self._pool = EnergyPool(_Template(self.model_of()), fluxes, workers=self.workers)
            if self.view._seconds_per_energy is not None:
                self._pool.seconds_per_energy = self.view._seconds_per_energy
        done = 0
        step = 2 * self.workers
        for i in range(0, len(todo), step):
            if self.cancelled():
                raise LiveCancelled("superseded while computing energies")
            chunk = [e for e in todo[i : i + step] if self._key(e) not in self.view._rows]
            t0 = time.perf_counter()
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                vals = self._pool(chunk)
            self.timings["factorize"] += time.perf_counter() - t0
            self.view._fallbacks += len(caught)
            for e, row in zip(chunk, vals, strict=True):
                self.view._rows[self._key(e)] = np.asarray(row, dtype=float)
            done += len(chunk)
            self.view._seconds_per_energy = self._pool.seconds_per_energy
        while len(self.view._rows) > _MAX_ROWS:
            self.view._rows.popitem(last=False)
        return done

    def close(self) -> None:
        if self._pool is not None:
            self._pool.close()
            self._pool = None


class _BlockRows:
    """Energies of one live update with dephasing probes, from coupling-independent blocks.

    Per (gate, probe-site set) the view keeps a :class:`~ringkit.transport._probe_solver.
    ProbeFluxSolver` of the probe-free model whose probe sites are the union of the analytic
    frame's sites (:func:`~ringkit.transport.probes.ring_probe_sites` as
    :func:`~ringkit.transport.probes.attach_probes` places them) and the calibrated frame's
    (``across=True``, as :class:`~ringkit.transport.probe_calibration.LPhiCalibrator`), and
    per energy its block (one sparse factorization: the exact Green's function on the cut,
    lead-interface and probe orbitals). Any coupling and flux then follow by exact dense
    algebra (Dyson equation for the attached probes, Woodbury for the cut, Kron reduction of
    the floating probes); the other sites of the union stay plain lattice sites. So a new L_phi
    and the calibrated frame cost no factorization at the energies already done. New energies
    go to forked workers (:class:`~ringkit.transport._probe_solver.BlockPool`), which also
    return the row at the current coupling.
    """

    def __init__(self, view, ring, base, probes, mkey, m: int, residues: np.ndarray, cancelled,
                 timings: dict) -> None:  # fmt: skip
        from ringkit.transport._probe_solver import ProbeFluxSolver
        from ringkit.transport.energy_pool import thermal_workers

        self.view, self.mkey, self.m, self.residues = view, mkey, m, residues
        self.cancelled, self.timings = cancelled, timings
        sites = view._probe_union(ring, probes)
        t0 = time.perf_counter()
        (self.solver, self.blocks), _ = view._engines.get_or(
            (mkey[0], sites.tobytes()), lambda: (ProbeFluxSolver(base, sites, None), OrderedDict())
        )
        timings["model"] += time.perf_counter() - t0
        self.active = np.searchsorted(sites, probes.sites)
        self.eta = np.broadcast_to(np.asarray(probes.eta, dtype=float), (probes.n,)).copy()
        self.fluxes = residues * (PHI0 / m)
        self.workers = thermal_workers(view.workers)
        self._pool = None

    def _key(self, e_t: float) -> tuple:
        return (self.mkey, e_t, self.m, self.residues.tobytes())

    def _row(self, block) -> np.ndarray:
        return self.solver.block_effective(block, self.eta, self.fluxes, self.active)

    def fill(self, energies_t: list[float]) -> int:
        """Rows of the uncached energies (stored in the view's row cache); returns the sparse
        factorizations done (new blocks)."""
        from ringkit.transport._probe_solver import BlockPool

        view = self.view
        todo = [e for e in dict.fromkeys(energies_t) if self._key(e) not in view._rows]
        t0 = time.perf_counter()
        for e in [e for e in todo if e in self.blocks]:  # dense algebra only
            if self.cancelled():
                raise LiveCancelled("superseded while computing energies")
            self.blocks.move_to_end(e)
            view._rows[self._key(e)] = self._row(self.blocks[e])
        self.timings["sweep"] += time.perf_counter() - t0
        new = [e for e in todo if e not in self.blocks]
        step = 2 * self.workers if self.workers > 1 else 1
        for i in range(0, len(new), step):
            if self.cancelled():
                raise LiveCancelled("superseded while computing energies")
            t0 = time.perf_counter()
            if self._pool is None:
                self._pool = BlockPool(self.solver, self._row, workers=self.workers)
                if view._block_seconds is not None:
                    self._pool.seconds_per_energy = view._block_seconds
            chunk = new[i : i + step]
            for e, (block, row) in zip(chunk, self._pool(chunk), strict=True):
                self.blocks[e] = block
                view._rows[self._key(e)] = np.asarray(row, dtype=float)
            view._block_seconds = self._pool.seconds_per_energy
            while len(self.blocks) > _MAX_BLOCKS:
                self.blocks.popitem(last=False)
            self.timings["factorize"] += time.perf_counter() - t0
        while len(view._rows) > _MAX_ROWS:
            view._rows.popitem(last=False)
        return len(new)

    def close(self) -> None:
        if self._pool is not None:
            self._pool.close()
            self._pool = None


class LiveLattice:
    """Cached exact lattice G(B) of the explorer settings (flux-tube mode).

    Parameters
    ----------
    max_sites : int
        Settings whose site estimate exceeds this are refused (:meth:`unavailable`).
    max_energies : int
        Budget of energies of one thermal average (:func:`ringkit.thermal_policy.energy_average`
        needs at least 31).
    tol : float
        Error goal of the thermal average in e^2/h (default :data:`LIVE_TOL`; the library
        default 1e-4 is what the full computation uses), in [1e-10, 0.1].
    workers : int, optional
        Processes for the energies of a thermal average
        (:func:`ringkit.transport.energy_pool.thermal_workers`: default
        ``RINGKIT_THERMAL_WORKERS`` or the usable cores, at most 4; 1: serial).
    n_probes : int
        Dephasing probes when L_phi is finite (as the full computation).
    points_per_period, min_points : int
        Flux grid (see :func:`live_flux_grid`; ``ExplorerParams.n_field`` is not used).

    Attributes
    ----------
    ring : TightBindingRing or None
        The current lattice.
    builds : int
        Lattices built so far (cache misses).
    factorizations : int
        Sparse factorizations done so far.
    """

    def __init__(
        self,
        *,
        max_sites: int = LIVE_MAX_SITES,
        max_energies: int = LIVE_MAX_ENERGIES,
        tol: float = LIVE_TOL,
        workers: int | None = None,
        n_probes: int = N_PROBES,
        points_per_period: int = 64,
        min_points: int = 161,
    ) -> None:
        from ringkit.thermal_policy import check_tol

        for name, value, low in (("max_sites", max_sites, 1), ("max_energies", max_energies, 31),
                                 ("n_probes", n_probes, 1),
                                 ("points_per_period", points_per_period, 4),
                                 ("min_points", min_points, 2)):  # fmt: skip
            if not (isinstance(value, (int, np.integer)) and value >= low):
                raise ParameterError(name, value, f"must be an integer >= {low}")
        self.max_sites = int(max_sites)
        self.max_energies = int(max_energies)
        self.workers = workers
        self.tol = check_tol(tol)
        self._fallbacks = 0
        self._seconds_per_energy: float | None = None
        self._block_seconds: float | None = None
        self._cal_workers = 1
        self._unions: dict = {}
        self.n_probes = int(n_probes)
        self.points_per_period = int(points_per_period)
        self.min_points = int(min_points)
        self.ring: Any = None
        self._ring_key: tuple | None = None
        self.builds = 0
        self.factorizations = 0
        self._probes = _Lru(_MAX_PROBE_SETS)
        self._models = _Lru(_MAX_MODELS)
        self._sweepers = _Lru(_MAX_SWEEPERS)
        self._rows: OrderedDict = OrderedDict()
        self._engines = _Lru(_MAX_ENGINES)  # per (gate, probe-site union): solver, blocks

    # ------------------------------------------------------------------ availability
    def unavailable(self, params: ExplorerParams) -> str | None:
        """Why the live view cannot run for ``params`` (None if it can).

        Raises
        ------
        ParameterError
            Invalid settings (from the device description).
        """
        if params.field_mode != "flux_tube":
            return "needs the AB flux-tube model (uniform field: use Run tight-binding)"
        est = live_device(params).site_estimate()
        if est.n_sites > self.max_sites:
            return (
                f"~{est.n_sites:,} sites > {self.max_sites:,} (raise the lattice spacing or use "
                "Run tight-binding)"
            )
        return None

    # ------------------------------------------------------------------ cached pieces
    def _lattice(self, params: ExplorerParams) -> tuple[Any, bool]:
        from ringkit.tightbinding import build_ring

        device = live_device(params)
        key = _lattice_key(device, params.seed)
        if key == self._ring_key and self.ring is not None:
            # same lattice: only the device record (E_F, T, L_phi, gate value) is new
            self.ring = replace(self.ring, device=device)
            return self.ring, False
        ring = build_ring(device, seed=params.seed)
        self.ring, self._ring_key = ring, key
        self._probes.clear()
        self._models.clear()
        self._sweepers.clear()
        self._rows.clear()
        self._engines.clear()
        self._unions.clear()
        self.builds += 1
        return ring, True

    def _base_model(self, ring, timings: dict):
        """Probe-free flux-tube model of the lattice at its gate (cached per parameters)."""
        from ringkit.transport.lowrank import FluxTubeModel

        zero = ring.params(flux=0.0)

        def make():
            gate = zero.get("gate", 0.0)
            if gate == 0.0:
                return FluxTubeModel(ring.fsyst, params=zero)
            # H(gate) = H(0) + gate P_arm: derived from the model at gate 0 (cached)
            root, _ = self._models.get_or(
                (tuple(sorted({**zero, "gate": 0.0}.items())), None),
                lambda: FluxTubeModel(ring.fsyst, params={**zero, "gate": 0.0}),
            )
            return gated_model(root, gate, ring.arm_of_site == ring.device.gate.arm)

        t0 = time.perf_counter()
        model, _ = self._models.get_or((tuple(sorted(zero.items())), None), make)
        timings["model"] += time.perf_counter() - t0
        return model

    def _dephasing(self, ring, params: ExplorerParams, base, calibrate: bool = False,
                   notes: list | None = None):  # fmt: skip
        """Probes for L_phi (None if coherent): sites and weights cached per E_F and gate.

        The zero-field LDOS behind the weights comes from the probe-free model ``base`` (same
        parameters, flux 0; its MUMPS analysis is then shared with the sweepers). With
        ``calibrate`` the probes are those of :func:`ringkit.transport.sweep.ring_probes`
        (per-device calibration, cached per process by ring fingerprint, energy, gate and
        probe count: an L_phi change reuses the calibrator); its warnings go to ``notes``.
        """
        from ringkit.transport.probes import DephasingProbes, attach_probes, coupling_from_l_phi

        l_phi = params.l_phi
        if l_phi is None:
            return None
        zero = ring.params(flux=0.0)
        e_f = ring.fermi_energy_lattice
        if calibrate:
            from ringkit.transport.realised_l_phi import ring_calibrator
            from ringkit.transport.sweep import ring_probes

            cal_ring = _calibration_ring(ring)
            with contextlib.suppress(ParameterError):
                # the calibrator ring_probes finds in the cache (same key), set up on the
                # evaluated model instead of a new Hamiltonian evaluation; on an error
                # ring_probes reports it and falls back to the analytic coupling
                cal, _ = ring_calibrator(cal_ring, e_f, zero, self.n_probes, model=base)
                self._cal_workers = cal.solver.workers_used
            with warnings.catch_warnings(record=True) as rec:
                warnings.simplefilter("always")
                probes = ring_probes(cal_ring, l_phi, e_f, zero, self.n_probes,
                                     calibrate=True)  # fmt: skip
            if notes is not None:
                notes.extend(f"{w.category.__name__}: {w.message}" for w in rec)
            return probes
        key = (e_f, tuple(sorted(zero.items())))

        def make():
            # kwant's site positions on ringkit's unit square lattice are the integer tags
            return attach_probes(
                ring.fsyst, l_phi=l_phi, energy=e_f, n_probes=self.n_probes,
                lattice_spacing=ring.lattice_spacing, params=zero,
                ldos=base.local_dos(e_f), positions=np.asarray(ring.tags, dtype=float),
            )  # fmt: skip

        probes, made = self._probes.get_or(key, make)
        if made or probes.l_phi == l_phi:
            return probes
        info = probes.info  # the mapping of attach_probes with the cached weights
        eta = coupling_from_l_phi(
            l_phi / info["lattice_spacing"], velocity=info["velocity"],
            probe_fraction=info["probe_fraction"], diffusion_constant=info["diffusion_constant"],
            calibration=info["calibration"],
        )  # fmt: skip
        return DephasingProbes(probes.sites, eta, l_phi, dict(info))

    def _probe_union(self, ring, probes) -> np.ndarray:
        """Sorted probe sites of the coupling-independent blocks: the analytic frame's and the
        calibrated frame's placements (:class:`_BlockRows`) plus those of ``probes``."""
        from ringkit.transport.probes import ring_probe_sites

        if self.n_probes not in self._unions:
            pos = np.asarray(ring.tags, dtype=float)
            self._unions[self.n_probes] = np.union1d(
                ring_probe_sites(ring.fsyst, self.n_probes, positions=pos),
                ring_probe_sites(ring.fsyst, self.n_probes, positions=pos, across=True),
            )
        return np.union1d(self._unions[self.n_probes], probes.sites)

    def _sweeper(self, ring, base, probes, e_t: float, timings: dict):
        """Cached sweeper at lattice energy ``e_t``; returns (sweeper, newly factorized).

        The model with probes shares the evaluated Hamiltonian and cut of ``base``.
        """
        from ringkit.transport.lowrank import FluxTubeSweeper

        model, mkey = self._probe_model(ring, base, probes, timings)
        t1 = time.perf_counter()
        sweeper, made = self._sweepers.get_or(
            (mkey, e_t), lambda: FluxTubeSweeper(model, energy=e_t)
        )
        timings["factorize"] += time.perf_counter() - t1
        return sweeper, made

    def _probe_model(self, ring, base, probes, timings: dict):
        """The model with ``probes`` (shares the Hamiltonian and cut of ``base``) and its key."""
        zero = ring.params(flux=0.0)
        pkey = None
        if probes is not None:
            pkey = (probes.sites.tobytes(), np.asarray(probes.eta, dtype=float).tobytes())
        mkey = (tuple(sorted(zero.items())), pkey)
        t0 = time.perf_counter()
        model, _ = self._models.get_or(
            mkey, lambda: base if probes is None else base.with_probes(probes)
        )
        timings["model"] += time.perf_counter() - t0
        return model, mkey

    def _values(self, sweeper_of, mkey, e_t: float, m: int, residues: np.ndarray, probes,
                timings: dict) -> np.ndarray:  # fmt: skip
        """Spinless G at the flux residues ``residues (h/e)/m`` and lattice energy ``e_t``
        (cached per model, energy and grid: a field-window change re-uses them)."""
        from ringkit.view.panels.explorer_full import _two_terminal

        key = (mkey, e_t, m, residues.tobytes())
        if key in self._rows:
            self._rows.move_to_end(key)
            return self._rows[key]
        sweeper, _ = sweeper_of(e_t)
        before = sweeper.n_fallback
        t0 = time.perf_counter()
        row = _two_terminal(sweeper, residues * (PHI0 / m), probes)
        timings["sweep"] += time.perf_counter() - t0
        self._fallbacks += sweeper.n_fallback - before
        self._rows[key] = row
        while len(self._rows) > _MAX_ROWS:
            self._rows.popitem(last=False)
        return row

    # ------------------------------------------------------------------ computation
    def compute(self, params: ExplorerParams, *, cancelled=None,
                calibrate_l_phi: bool = False) -> LiveResult:  # fmt: skip
        """Exact lattice G(B) for ``params`` (flux-tube mode), reusing cached pieces.

        Parameters
        ----------
        params : ExplorerParams
        cancelled : callable, optional
            ``cancelled() -> bool``, polled before every energy; when it returns True the
            update stops with :class:`LiveCancelled` (finished energies stay cached).
        calibrate_l_phi : bool
            False (default, the fast first frame): analytic probe coupling, realised L_phi not
            measured. True: the coupling calibrated on this device as in
            ``field_sweep(..., calibrate_l_phi=True)`` (same cached calibrator), so the result
            carries the realised L_phi and its error.

        Raises
        ------
        ParameterError
            Invalid settings, uniform-field mode or a lattice above ``max_sites``.
        LiveCancelled
            ``cancelled()`` became true.
        """
        t_start = time.perf_counter()
        why = self.unavailable(params)
        if why is not None:
            raise ParameterError("live lattice", params.field_mode, why)
        with single_thread_blas():
            return self._compute(params, t_start, cancelled or (lambda: False),
                                 bool(calibrate_l_phi))  # fmt: skip

    def _compute(self, params: ExplorerParams, t_start: float, cancelled,
                 calibrate: bool = False) -> LiveResult:  # fmt: skip
        timings = dict.fromkeys(("build", "probes", "model", "factorize", "sweep"), 0.0)
        t0 = time.perf_counter()
        ring, rebuilt = self._lattice(params)
        timings["build"] = time.perf_counter() - t0
        area = ring.loop_area
        period = PHI0 / area
        k, m = live_flux_grid(
            params.field_min, params.field_max, period,
            points_per_period=self.points_per_period, min_points=self.min_points,
        )  # fmt: skip
        flux = k * (PHI0 / m)
        residues, where = np.unique(k % m, return_inverse=True)
        where = where.reshape(-1)
        if m <= 2 * residues.size:
            # solve the whole period (at most twice the work): any later field window with
            # the same grid is then served from the cache without a factorization
            residues, where = np.arange(m), k % m
        if cancelled():
            raise LiveCancelled("superseded before the model")
        base = self._base_model(ring, timings)
        t0 = time.perf_counter()
        cal_notes: list[str] = []
        self._cal_workers = 1
        probes = self._dephasing(ring, params, base, calibrate, cal_notes)
        timings["probes"] = time.perf_counter() - t0
        pkey = None
        if probes is not None:
            pkey = (probes.sites.tobytes(), np.asarray(probes.eta, dtype=float).tobytes())
        mkey = (tuple(sorted(ring.params(flux=0.0).items())), pkey)
        made = [0]
        self._fallbacks = 0

        def sweeper_of(e_t: float):
            sweeper, new = self._sweeper(ring, base, probes, e_t, timings)
            made[0] += new
            return sweeper, new

        if probes is not None:
            pool = _BlockRows(self, ring, base, probes, mkey, m, residues, cancelled, timings)
        else:
            pool = _Pool(self, lambda: self._probe_model(ring, base, probes, timings)[0], mkey,
                         m, residues, cancelled, timings)  # fmt: skip

        def rows(energies_t) -> np.ndarray:
            energies_t = [float(e) for e in np.atleast_1d(energies_t)]
            n_pool = pool.fill(energies_t)  # (fill may count its template sweeper first)
            made[0] += n_pool
            out = []
            for e_t in energies_t:
                if cancelled():
                    raise LiveCancelled("superseded while computing energies")
                g = self._values(sweeper_of, mkey, e_t, m, residues, probes, timings)
                out.append(g[where])
            return np.array(out)

        try:
            thermal = self._thermal(ring, params.temperature, flux, rows)
        finally:
            pool.close()
            self.factorizations += made[0]
        if pool.workers > 1:
            timings["workers"] = pool.workers
        if calibrate and self._cal_workers > 1:  # the calibration's energies ran in workers
            timings["workers"] = max(timings.get("workers", 1), self._cal_workers)
        notes = [thermal.note, *cal_notes]
        if probes is not None:
            notes.append(f"{probes.n} dephasing probes, eta = {float(np.mean(probes.eta)):.3g} t")
        if self._fallbacks:
            notes.append(
                f"{self._fallbacks} flux point(s) solved directly (ill-conditioned update)"
            )
        g = 2.0 * thermal.value
        field = flux / area
        spec = oscillation_spectrum(field, g, window="hann", pad=4)
        geo = ring.device.geometry
        bands = ab_bands(math.sqrt(geo.area_inner / math.pi), math.sqrt(geo.area_outer / math.pi))
        timings["total"] = time.perf_counter() - t_start
        real, real_err, status = _realised(probes)
        return LiveResult(
            field=field,
            flux=flux,
            conductance=g,
            spectrum=spec,
            period=period,
            mean_conductance=float(np.mean(g)),
            amplitude_he=_band_rms(spec, bands[1]),
            amplitude_h2e=_band_rms(spec, bands[2]),
            energies=thermal.energies * ring.hopping,
            weights=thermal.weights,
            thermal_error=thermal.error,
            thermal_tol=self.tol if params.temperature > 0 else 0.0,
            thermal_converged=thermal.converged,
            n_sites=ring.n_sites,
            lattice_spacing=ring.lattice_spacing,
            n_probes=0 if probes is None else probes.n,
            probe_sites=np.zeros(0, dtype=np.int64) if probes is None else probes.sites.copy(),
            probe_eta=0.0 if probes is None else float(np.mean(probes.eta)),
            l_phi=params.l_phi,
            l_phi_realised=real,
            l_phi_realised_err=real_err,
            l_phi_status=status,
            points_per_period=m,
            n_solved=int(residues.size),
            rebuilt=rebuilt,
            factorizations=made[0],
            timings=timings,
            notes=tuple(notes),
        )

    def _thermal(self, ring, temperature: float, flux: np.ndarray, rows) -> _Thermal:
        """Spinless G over ``flux``: one energy at T = 0, else the thermal policy at ``tol``.

        The call is the one of :func:`ringkit.transport.field_sweep` (same bound, band
        functionals over the plotted grid, per-spin tolerance ``tol/2``), so with the same
        ``thermal_tol`` the live line equals ``field_sweep`` on the plotted fluxes.
        """
        e_t = ring.fermi_energy_lattice
        if temperature == 0.0:
            return _Thermal(rows([e_t])[0], np.array([e_t]), np.array([1.0]), 0.0, True,
                            "T = 0: single energy")  # fmt: skip
        from ringkit.transport.sweep import _band_projector, transmission_bound
        from ringkit.transport.thermal import ThermalToleranceWarning, thermal_average

        bound = transmission_bound(ring, e_t, temperature, self.tol, ring.params(flux=0.0))
        with warnings.catch_warnings():
            # a budget hit is reported through ``converged`` and the note, not as a warning
            warnings.simplefilter("ignore", ThermalToleranceWarning)
            avg = thermal_average(
                rows, e_t, temperature, energy_unit=ring.hopping, tol=0.5 * self.tol,
                bound=bound, functionals=_band_projector(ring, flux), batched=True,
                max_energies=self.max_energies,
            )  # fmt: skip
        err = 2.0 * avg.error  # G = 2 T (spin)
        state = "" if avg.converged else f", NOT converged within {self.max_energies} energies"
        note = (f"thermal average over {avg.n_energies} energies, estimated error "
                f"{err:.2g} e^2/h (tol {self.tol:g}{state})")  # fmt: skip
        return _Thermal(avg.value, avg.energies, avg.weights, err, avg.converged, note)
