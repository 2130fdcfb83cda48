"""Build the amplitude emulator of a device: ensembles over disorder, L_phi and temperature.

One work unit is one disorder realization (mean free path ``l``, seed ``s``) of the device in
flux-tube mode. Per unit (:class:`EmulatorUnitTask`):

1. the ring is built once (:func:`ringkit.tightbinding.build_ring`), probe sites are placed
   along and across both arms (:func:`ringkit.transport.probes.ring_probe_sites`, as the
   realised-L_phi calibration does);
2. at every energy of a fixed set, ONE sparse factorization of ``E - H - Sigma_leads`` and the
   block of its inverse on the cut, lead and probe orbitals
   (:class:`ringkit.transport._probe_solver.ProbeFluxSolver`, the engine of
   ``LPhiCalibrator``); every probe coupling ``eta`` and every flux then follow by dense
   folding (Dyson + Woodbury), exact (tested against ``kwant.smatrix``);
3. the dephasing-probe (energy-conserving) conductance ``G_eff(E, flux)`` is Kron-reduced per
   energy, and every temperature is averaged from the SAME energies with the grid rule of
   :func:`ringkit.thermal_policy.energy_average` (``method="grid"``, trapezoid on
   ``-df/dE``; error = difference to the rule on every second energy, plus the tail bound);
4. the h/e rms, h/2e rms and mean G of each thermal trace come from its flux harmonics over
   one period (a flux-tube trace is exactly h/e periodic: ``rms_n = sqrt(2)|c_n|`` equals the
   band rms of :func:`ringkit.analysis.extract.extract_oscillations` for whole periods).

Energy set: for temperature ``T`` the grid step is ``h_T = h0 2^k <= min(k_B T, E_c)/4``
(``E_c = hbar v/(2 pi r)``, the loop correlation energy; ``h0`` from the lowest temperature)
on the window ``|E - mu| <= k_B T ln(20 bound/tol)`` of the thermal policy; the steps are
nested (powers of two of ``h0``), so the union of all temperatures' energies is evaluated
once. The T = 0 h/e amplitudes on the energies within ``+-8 E_c`` of ``mu`` are kept for the
ensemble realised-L_phi (the definition of ``LPhiCalibrator``, pooled over realizations;
:mod:`ringkit.analysis.emulator`).

Units run through :func:`ringkit.transport.ensemble.run_ensemble` (any executor, including
``dask.distributed``'s ``client.get_executor(pure=False)``; one checkpoint directory per
disorder value: an interrupted build resumes without recomputation; results depend only on
the seeds). docs/inverse-fit.md.

Public API
----------
build_emulator, EmulatorUnitTask, emulator_energy_indices
"""

from __future__ import annotations

import dataclasses
import math
import time
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.analysis.emulator import AmplitudeEmulator, EmulatorGrid
from ringkit.thermal_policy import ThermalToleranceWarning, check_tol, energy_average
from ringkit.thermal_policy import thermal_window as _window
from ringkit.units import K_B, PHI0

__all__ = ["build_emulator", "EmulatorUnitTask", "emulator_energy_indices"]

#: Half-width of the T = 0 realised-L_phi window in correlation energies (the 16 energies
#: spaced by E_c of ``LPhiCalibrator`` span +-8 E_c).
CAL_HALF_WIDTH = 8.0
#: Energies per sparse-solver batch (bounds the memory of the inverse blocks).
ENERGY_BATCH = 24


def _steps(temperatures_lat: np.ndarray, e_c: float) -> tuple[float, list[int]]:
    """Base step h0 and the power-of-two multiplier of each temperature's grid step."""
    scale = [min(kt, e_c) / 4.0 for kt in temperatures_lat]
    h0 = min(scale)
    return h0, [2 ** int(math.floor(math.log2(s / h0) + 1e-9)) for s in scale]


def emulator_energy_indices(
    kts: Sequence[float], e_c: float, tol: float, bound: float
) -> tuple[float, list[np.ndarray], np.ndarray, np.ndarray]:
    """Energies (as integer multiples of a base step) that serve every temperature.

    Parameters
    ----------
    kts : sequence of float
        ``k_B T`` of each temperature (lattice energy units, > 0).
    e_c : float
        Loop correlation energy ``hbar v/(2 pi r)`` (same units).
    tol, bound : float
        Thermal tolerance and bound of ``|G|`` (window of
        :func:`ringkit.thermal_policy.thermal_window`).

    Returns
    -------
    h0 : float
        Base step.
    per_t : list of ndarray
        For each temperature the step multiple ``m`` and its indices ``m*(-k..k)``.
    union : ndarray
        Sorted union of all indices (energy ``mu + h0*index``); always contains 0.
    cal : ndarray
        Indices within ``+-CAL_HALF_WIDTH E_c`` (T = 0 realised-L_phi energies).
    """
    kts = np.asarray(kts, dtype=float)
    h0, mult = _steps(kts, e_c)
    per_t = []
    for kt, m in zip(kts, mult, strict=True):
        step = h0 * m
        k = max(1, int(math.ceil(_window(kt, tol, bound) / step)))
        k += k % 2  # the policy's grid: even, so that every second point is the 2h rule
        per_t.append(m * np.arange(-k, k + 1))
    cal_k = int(math.floor(CAL_HALF_WIDTH * e_c / h0))
    cal_step = max(1, int(round(e_c / h0)))
    cal = cal_step * np.arange(-(cal_k // cal_step), cal_k // cal_step + 1)
    union = np.unique(np.concatenate(per_t + [cal, [0]]))
    return h0, per_t, union, cal


def _harmonics(rows: np.ndarray) -> np.ndarray:
    """Linear functionals of G over one flux period: c0, Re/Im c1, Re/Im c2 (c = rfft/n)."""
    c = np.fft.rfft(rows, axis=-1) / rows.shape[-1]
    return np.stack(
        [c[..., 0].real, c[..., 1].real, c[..., 1].imag, c[..., 2].real, c[..., 2].imag], -1
    )


def amplitudes_from_harmonics(ext: np.ndarray, err: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(h/e rms, h/2e rms, mean G) and error bounds from averaged harmonics (``_harmonics``)."""
    he = math.sqrt(2.0) * math.hypot(ext[1], ext[2])
    h2e = math.sqrt(2.0) * math.hypot(ext[3], ext[4])
    e_he = math.sqrt(2.0) * math.hypot(err[1], err[2])
    e_h2e = math.sqrt(2.0) * math.hypot(err[3], err[4])
    return np.array([he, h2e, ext[0]]), np.array([e_he, e_h2e, err[0]])


@dataclass(frozen=True, eq=False)
class EmulatorUnitTask:
    """One realization (``task(seed)``): amplitudes at every probe coupling and temperature.

    Picklable, module level (process pools, dask). Row layout (:meth:`unpack`):
    amplitudes ``(n_eta, n_T, 3)``, their thermal errors ``(n_eta, n_T, 3)``, the thermal
    traces ``(n_eta, n_T, n_flux)`` and the T = 0 h/e amplitudes ``(n_eta, n_cal)``.

    Attributes
    ----------
    device : RingDevice
        Flux-tube device with the realization's mean free path.
    etas : tuple of float
        Probe couplings (lattice energy units), first 0 (coherent).
    temperatures : tuple of float
        K (> 0).
    h0 : float
        Base energy step (lattice units); energies ``mu + h0*index``.
    indices : tuple of int
        Union of energy indices (:func:`emulator_energy_indices`).
    per_t : tuple of (int, int)
        Step multiple and half-count of each temperature's grid.
    cal : tuple of int
        Indices of the T = 0 realised-L_phi energies.
    n_flux, n_probes : int
    tol, bound : float
        Thermal-policy tolerance (e^2/h) and bound of G (e^2/h).
    """

    device: object
    etas: tuple
    temperatures: tuple
    h0: float
    indices: tuple
    per_t: tuple
    cal: tuple
    n_flux: int = 24
    n_probes: int = 100
    tol: float = 2e-3
    bound: float = 2.0

    def shapes(self) -> tuple[tuple[int, ...], ...]:
        ne, nt = len(self.etas), len(self.temperatures)
        return (ne, nt, 3), (ne, nt, 3), (ne, nt, self.n_flux), (ne, len(self.cal))

    def unpack(self, row: np.ndarray) -> tuple[np.ndarray, ...]:
        """Split one result row (or rows, leading axes kept) into the four arrays."""
        row = np.asarray(row, dtype=float)
        out, start = [], 0
        for shp in self.shapes():
            n = int(np.prod(shp))
            out.append(row[..., start : start + n].reshape(row.shape[:-1] + shp))
            start += n
        return tuple(out)

    def conductance(self, seed: int) -> np.ndarray:
        """G_eff in e^2/h (spin-degenerate), shape ``(n_eta, n_energies, n_flux)``."""
        from ringkit.tightbinding import build_ring
        from ringkit.transport._probe_solver import ProbeFluxSolver
        from ringkit.transport.fastsweep import kron_reduce
        from ringkit.transport.lowrank import FluxTubeModel
        from ringkit.transport.probes import ring_probe_sites

        ring = build_ring(self.device, seed=int(seed))
        model = FluxTubeModel(ring.fsyst, params=ring.params())
        sites = ring_probe_sites(ring.fsyst, int(self.n_probes), across=True)
        mu = ring.fermi_energy_lattice
        energies = mu + self.h0 * np.asarray(self.indices, dtype=float)
        flux = np.arange(self.n_flux) * PHI0 / self.n_flux
        out = np.empty((len(self.etas), energies.size, self.n_flux))
        for start in range(0, energies.size, ENERGY_BATCH):
            sl = slice(start, start + ENERGY_BATCH)
            solver = ProbeFluxSolver(model, sites, energies[sl])
            for i, eta in enumerate(self.etas):
                cm = solver.conductance_matrices(eta, flux)
                out[i, sl] = 2.0 * kron_reduce(cm, 0, 1)  # spin degeneracy (docs/conventions.md)
        return out

    def __call__(self, seed: int) -> np.ndarray:
        g = self.conductance(seed)
        pos = {int(k): j for j, k in enumerate(self.indices)}
        (amp_shape, _, tr_shape, _) = self.shapes()
        amps, errs, traces = np.empty(amp_shape), np.empty(amp_shape), np.empty(tr_shape)
        for i in range(len(self.etas)):

            def lookup(e, i=i):
                idx = np.rint(np.asarray(e, dtype=float) / self.h0).astype(np.int64)
                return g[i, [pos[int(k)] for k in idx]]

            for j, (t, (m, k)) in enumerate(zip(self.temperatures, self.per_t, strict=True)):
                kt = K_B * float(t) / self.device.hopping
                with warnings.catch_warnings():
                    # a missed tolerance is kept as the stored error estimate (checked later)
                    warnings.simplefilter("ignore", ThermalToleranceWarning)
                    avg = energy_average(
                        lookup,
                        0.0,
                        kt,
                        tol=self.tol,
                        method="grid",
                        spacing=self.h0 * m,
                        bound=self.bound,
                        functionals=_harmonics,
                        batched=True,
                    )
                if avg.n_energies != 2 * k + 1:
                    raise ParameterError("energies", avg.n_energies, f"expected {2 * k + 1}")
                amps[i, j], errs[i, j] = amplitudes_from_harmonics(avg.extra, avg.extra_errors)
                traces[i, j] = avg.value
        cal = [pos[int(k)] for k in self.cal]
        c1 = np.fft.rfft(g[:, cal, :], axis=-1)[..., 1] / self.n_flux
        he0 = math.sqrt(2.0) * np.abs(c1)
        return np.concatenate([amps.ravel(), errs.ravel(), traces.ravel(), he0.ravel()])

    def describe(self) -> dict:
        return {
            "task": "ringkit.transport.emulator_build.EmulatorUnitTask",
            "device": repr(self.device),
            "etas": [repr(float(e)) for e in self.etas],
            "temperatures_K": [repr(float(t)) for t in self.temperatures],
            "h0": repr(float(self.h0)),
            "indices": [int(i) for i in self.indices],
            "cal": [int(i) for i in self.cal],
            "n_flux": int(self.n_flux),
            "n_probes": int(self.n_probes),
            "tol": repr(float(self.tol)),
            "bound": repr(float(self.bound)),
        }


def _positive_sorted(name: str, values, unit: str) -> np.ndarray:
    vals = np.atleast_1d(np.asarray(values, dtype=float))
    if vals.ndim != 1 or vals.size == 0:
        raise ParameterError(name, values, "must be a non-empty 1-D sequence", unit)
    for v in vals:
        check_positive(name, v, unit)
    vals = np.unique(vals)
    return vals


def _device_for(device, mean_free_path: float):
    mat = dataclasses.replace(
        device.material, mean_free_path=float(mean_free_path), mobility=None, disorder_strength=None
    )
    return dataclasses.replace(device, material=mat, field_mode="flux_tube")


def _reference(device, n_probes: int) -> dict:
    """Seed-independent quantities: lead velocity, correlation energy, modes, probe fraction."""
    from ringkit.tightbinding import build_ring
    from ringkit.transport.probes import ring_probe_sites

    ring = build_ring(device, seed=0)
    mu = ring.fermi_energy_lattice
    prop, _ = ring.fsyst.leads[0].modes(mu, params=ring.params())
    if prop.velocities.size == 0:
        raise ParameterError(
            "device", "lead width", "the leads have no open mode at E_F (widen the leads)"
        )
    v = float(np.mean(np.abs(prop.velocities)))
    r = device.geometry.mean_radius / device.spacing
    n_modes = int(prop.velocities.size // 2)
    sites = ring_probe_sites(ring.fsyst, int(n_probes), across=True)
    return {
        "velocity": v,
        "e_c": v / (2.0 * math.pi * r),
        "n_modes": n_modes,
        "probe_fraction": len(sites) / ring.n_sites,
        "n_sites": int(ring.n_sites),
    }


def build_emulator(
    device,
    *,
    temperatures: Sequence[float],
    l_phi_values: Sequence[float],
    disorder_values: Sequence[float],
    n_realizations: int = 40,
    seeds: Sequence[int] | None = None,
    seed0: int = 0,
    n_flux: int = 24,
    n_probes: int = 100,
    thermal_tol: float = 2e-3,
    executor=None,
    max_workers: int | None = None,
    cache_path=None,
    progress: bool = False,
) -> AmplitudeEmulator:
    """Emulator of the amplitude statistics of ``device`` over (mean free path, L_phi, T).

    Parameters
    ----------
    device : RingDevice
        The device; its material's disorder is replaced by each ``disorder_values`` mean free
        path; flux-tube mode is used (the field window is one h/e flux period, ``n_flux``
        points: the trace is exactly periodic, so the window only matters for the measured
        traces' noise, which the fit takes from them).
    temperatures : sequence of float
        K (> 0); every temperature comes from the same energy samples.
    l_phi_values : sequence of float
        Target L_phi in m; each sets one probe coupling from the analytic estimate
        (``coupling_from_l_phi`` with the lattice start factor). The emulator's L_phi axis is
        the REALISED L_phi of each coupling, measured on the ensemble (h/e damping at T = 0,
        convention of :mod:`ringkit.conventions`), with a bootstrap error over realizations.
    disorder_values : sequence of float
        Elastic mean free paths in m (Born, ``Material.mean_free_path``).
    n_realizations : int
        Realizations per mean free path (seeds ``seed0 .. seed0 + n - 1`` unless ``seeds``).
    seeds : sequence of int, optional
        Explicit disorder seeds (held-out seeds for validation must not be among them).
    n_flux : int
        Flux points per h/e period (>= 8).
    n_probes : int
        Dephasing probes along and across the arms.
    thermal_tol : float
        Tolerance of the thermal average in e^2/h (thermal policy range).
    executor : concurrent.futures.Executor, optional
        Any executor; default a local process pool (``max_workers``).
    cache_path : str or Path, optional
        netCDF file of the emulator. An existing file for the same device and grid is loaded
        instead of recomputing; one built for another device or grid is refused
        (:class:`ParameterError`). Units are checkpointed in ``<cache_path>.units/``.
    progress : bool
        Progress bars of :func:`run_ensemble`.

    Returns
    -------
    AmplitudeEmulator
    """
    from ringkit.transport.ensemble import default_executor, run_ensemble

    temps = _positive_sorted("temperatures", temperatures, "K")
    lphis = _positive_sorted("l_phi_values", l_phi_values, "m")
    mfps = _positive_sorted("disorder_values", disorder_values, "m")
    tol = check_tol(thermal_tol)
    if int(n_flux) != n_flux or n_flux < 8:
        raise ParameterError("n_flux", n_flux, "must be an integer >= 8")
    if seeds is None:
        if int(n_realizations) != n_realizations or n_realizations < 4:
            raise ParameterError("n_realizations", n_realizations, "must be an integer >= 4")
        seeds = list(range(int(seed0), int(seed0) + int(n_realizations)))
    seeds = [int(s) for s in seeds]
    if len(seeds) < 4 or len(set(seeds)) != len(seeds):
        raise ParameterError("seeds", seeds, "need >= 4 distinct integers")
    base = _device_for(device, mfps[0])
    grid = EmulatorGrid(
        temperatures=tuple(temps.tolist()),
        l_phi_targets=tuple(lphis.tolist()),
        mean_free_paths=tuple(mfps.tolist()),
        seeds=tuple(seeds),
        n_flux=int(n_flux),
        n_probes=int(n_probes),
        thermal_tol=tol,
    )
    if cache_path is not None and Path(cache_path).exists():
        return AmplitudeEmulator.load(cache_path, device=device, grid=grid)
    ref = _reference(base, n_probes)
    t_lat = K_B * temps / base.hopping
    bound = 2.0 * max(ref["n_modes"], 1)
    h0, per_t, union, cal = emulator_energy_indices(t_lat, ref["e_c"], tol, bound)
    from ringkit.transport.probe_calibration import ANALYTIC_LATTICE_FACTOR
    from ringkit.transport.probes import coupling_from_l_phi

    a = base.spacing
    etas = [0.0] + [
        coupling_from_l_phi(
            lp / a,
            velocity=ref["velocity"],
            probe_fraction=ref["probe_fraction"],
            calibration=ANALYTIC_LATTICE_FACTOR,
        )
        for lp in lphis[::-1]  # increasing coupling: decreasing L_phi
    ]
    own = executor is None
    if own:
        executor = default_executor(max_workers)
    t0 = time.perf_counter()
    blocks = []
    try:
        for d, mfp in enumerate(mfps):
            task = EmulatorUnitTask(
                _device_for(device, mfp),
                tuple(etas),
                tuple(temps.tolist()),
                float(h0),
                tuple(int(i) for i in union),
                tuple((int(p[1] - p[0]), int(p.size // 2)) for p in per_t),
                tuple(int(i) for i in cal),
                int(n_flux),
                int(n_probes),
                tol,
                bound,
            )
            ck = None if cache_path is None else Path(f"{cache_path}.units") / f"disorder_{d}"
            res = run_ensemble(
                task, seeds, executor=executor, checkpoint=ck, progress=progress, chunk_size=1
            )
            blocks.append(task.unpack(res.values))
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
    amps, errs, traces, cal_he = (np.stack([b[k] for b in blocks]) for k in range(4))
    info = {
        "n_sites": ref["n_sites"],
        "mean_radius_m": float(device.geometry.mean_radius),
        "n_energies": int(union.size),
        "energy_step_t": float(h0),
        "correlation_energy_t": float(ref["e_c"]),
        "hopping_J": float(base.hopping),
        "lattice_spacing_m": float(a),
        "thermal_bound_e2h": float(bound),
        "build_wall_time_s": time.perf_counter() - t0,
        "thermal_method": "thermal_policy grid rule, nested steps min(kT, E_c)/4 (halving error)",
        "field_model": "flux tube (one h/e period), dephasing probes (energy-conserving)",
    }
    emu = AmplitudeEmulator(
        device=device,
        grid=grid,
        etas=np.broadcast_to(np.asarray(etas), (mfps.size, len(etas))).copy(),
        amplitudes=amps,
        thermal_errors=errs,
        traces=traces,
        cal_he=cal_he,
        info=info,
    )
    worst = float(np.max(errs[..., :2]))
    if worst > tol:
        warnings.warn(
            f"emulator thermal averages: largest amplitude error estimate {worst:.3g} e^2/h > "
            f"thermal_tol = {tol:g} (stored per point as thermal_error)",
            ThermalToleranceWarning,
            stacklevel=2,
        )
    if cache_path is not None:
        emu.save(cache_path)
    return emu
