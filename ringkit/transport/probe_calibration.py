"""Per-device calibration of dephasing probes: the L_phi a probe coupling actually realises.

Why per device
--------------
The analytic mapping of :func:`ringkit.transport.probes.coupling_from_l_phi` (escape rate
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
LPhiCalibrator (set-up once, many L_phi), calibrate_probes, calibrate_ring_probes (ringkit
rings, SI, either field mode), ProbeFluxSolver, measure_realised_l_phi, he_amplitudes,
default_calibration_energies, CalibrationRangeWarning, VALIDATED_DAMPING
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY, path_length
from ringkit.transport._probe_solver import (
    ProbeFluxSolver,
    he_amplitudes,
    measure_realised_l_phi,
)
from ringkit.transport.probes import (
    ANALYTIC_LATTICE_FACTOR,
    DephasingProbes,
    coupling_from_l_phi,
    ring_probe_sites,
)

__all__ = [
    "VALIDATED_DAMPING",
    "CalibrationRangeWarning",
    "ProbeFluxSolver",
    "default_calibration_energies",
    "he_amplitudes",
    "measure_realised_l_phi",
    "LPhiCalibrator",
    "calibrate_probes",
    "calibrate_ring_probes",
]

VALIDATED_DAMPING = (0.25, 3.0)
"""Range of ``pi r / L_phi`` on which the calibration is validated (tests/test_probes.py,
benchmarks/bench_l_phi_calibration.py)."""


class CalibrationRangeWarning(UserWarning):
    """The requested L_phi lies outside the validated range of the calibration."""


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


class LPhiCalibrator:
    """Realised-L_phi calibration of one device at one working energy, reusable for many L_phi.

    The set-up (probe sites, calibration energies, one factorization per energy, probe-free
    h/e amplitudes) is done once; every :meth:`probes` call only costs dense solves (secant
    steps). Parameters as in :func:`calibrate_probes`; ``center`` (position units) as in
    :func:`ringkit.transport.probes.ring_probe_sites` (rings with more than two leads).
    ``workers``: processes for the per-energy factorizations
    (:class:`ringkit.transport._probe_solver.BlockPool`, forked, used only when one energy costs
    more than ``MIN_SECONDS_PER_ENERGY``; None: :func:`ringkit.transport.energy_pool.
    thermal_workers`). Default 1 (serial): forking the explorer's process for the 16 energies
    of the default ring cost 0.4-0.5 s more CPU than it saved on the shared 2-core machine
    (benchmarks/RESULTS-live-preview.md). The values do not depend on it.
    """

    def __init__(
        self,
        model,
        energy: float,
        *,
        n_probes: int = 100,
        radius: float | None = None,
        energies: Sequence[float] | None = None,
        n_energies: int = 16,
        n_flux: int = 16,
        seed: int = 0,
        center: tuple[float, float] | None = None,
        workers: int | None = 1,
    ) -> None:
        from ringkit.transport.lowrank import FluxTubeModel

        if not isinstance(model, FluxTubeModel):
            model = FluxTubeModel(model)
        if len(model.probe_sites):
            model = model.with_probes(None)
        self.model, self.energy = model, float(energy)
        fsyst = model.fsyst
        self.radius = (
            _estimate_radius(fsyst) if radius is None else check_positive("radius", radius)
        )
        self.length = path_length(self.radius, 1)
        self.sites = ring_probe_sites(fsyst, n_probes, center=center, across=True)
        prop, _ = fsyst.leads[0].modes(self.energy, params=model.params)
        self.velocity = float(np.mean(np.abs(prop.velocities)))
        if energies is None:
            energies = default_calibration_energies(
                self.energy, self.velocity, self.radius, n_energies
            )
        self.energies = np.atleast_1d(np.asarray(energies, dtype=float))
        self.n_flux, self.seed = int(n_flux), int(seed)
        self.solver = ProbeFluxSolver(model, self.sites, self.energies, workers=workers)
        self.a0 = he_amplitudes(self.solver, 0.0, self.n_flux)
        lattice = fsyst.graph.num_edges / fsyst.graph.num_nodes >= 2.5
        self._start = ANALYTIC_LATTICE_FACTOR if lattice else 1.0

    def measure(self, eta) -> dict:
        """:func:`measure_realised_l_phi` of coupling ``eta`` on the calibration energies."""
        return measure_realised_l_phi(
            self.solver, eta, radius=self.radius, n_flux=self.n_flux, seed=self.seed, a0=self.a0
        )

    def probes(self, l_phi: float, *, tol: float = 0.03, max_steps: int = 4) -> DephasingProbes:
        """Probes realising ``l_phi`` (position units) on this device; see the module docstring."""
        length, lo, hi = self.length, *VALIDATED_DAMPING
        info = {
            "l_phi_requested": float(l_phi),
            "path_length": float(length),
            "radius": float(self.radius),
            "energy": self.energy,
            "calibration_energies": [float(e) for e in self.energies],
            L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
            "method": "per-device h/e damping, secant on the probe coupling (probe_calibration)",
            "velocity": self.velocity,
        }
        if isinstance(l_phi, (int, float, np.floating)) and l_phi == math.inf:
            info.update(l_phi_realised=math.inf, l_phi_realised_err=0.0, n_steps=0)
            return DephasingProbes(self.sites, 0.0, math.inf, info)
        l_phi = check_positive("l_phi", l_phi, "position units")
        target = length / l_phi
        if not lo <= target <= hi:
            warnings.warn(
                f"l_phi = {l_phi:g} gives pi r/L_phi = {target:.3g}, outside the calibration's "
                f"validated range {lo} <= pi r/L_phi <= {hi} (L_phi between {length / hi:.4g} "
                f"and {length / lo:.4g} position units); "
                + (
                    "calibrated at the bound and extrapolated linearly in eta"
                    if target < lo
                    else ""
                )
                + ("calibrated directly, unvalidated" if target > hi else ""),
                CalibrationRangeWarning,
                stacklevel=3,
            )
        aim = max(target, lo)
        f_uniform = len(self.sites) / self.model.h0.shape[0]
        eta = coupling_from_l_phi(
            length / aim, velocity=self.velocity, probe_fraction=f_uniform, calibration=self._start
        )
        eta_meas, meas, hist = self._secant(eta, aim, tol, max_steps)
        miss = abs(math.log(-meas["log_ratio"] / aim))
        if miss > math.log1p(max(tol, 3 * meas["log_ratio_err"] / abs(meas["log_ratio"]))):
            warnings.warn(
                f"requested l_phi = {l_phi:g} not reached: the closest coupling realises "
                f"{length / -meas['log_ratio']:.4g} (pi r/L_phi = {-meas['log_ratio']:.3g}); "
                f"validated range {lo} <= pi r/L_phi <= {hi}; more probes (n_probes) damp more",
                CalibrationRangeWarning,
                stacklevel=3,
            )
        lr, lr_err = meas["log_ratio"], meas["log_ratio_err"]
        scale = target / aim  # < 1: weak dephasing extrapolated linearly in eta
        realised = length / (-lr * scale)
        info.update(
            {
                "l_phi_realised": float(realised),
                "l_phi_realised_err": float(realised * lr_err / abs(lr)),
                "log_ratio_at_calibration": float(lr),
                "eta_history": [math.exp(x) for x, _ in hist],
                "n_steps": len(hist),
                "extrapolated": bool(scale != 1.0),
            }
        )
        return DephasingProbes(self.sites, float(eta_meas * scale), float(l_phi), info)

    def _secant(self, eta: float, aim: float, tol: float, max_steps: int):
        """Secant on ln(-ln rho) versus ln eta; returns the closest (eta, measurement, history)."""
        hist: list[tuple[float, float]] = []  # (ln eta, ln(-ln rho)) of damped points
        best = None  # (|ln(-ln rho) - ln aim|, eta, measurement)
        for _ in range(int(max_steps) + 1):
            meas = self.measure(eta)
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
            raise ParameterError("l_phi", aim, "the probes do not damp the h/e amplitude here")
        return best[1], best[2], hist


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
        convention :data:`ringkit.conventions.L_PHI_CONVENTION` (h/e damped by exp(-pi r/L_phi));
        ``inf`` gives zero coupling.
    energy : float
        Working energy (Hamiltonian units).
    n_probes : int
        Probes along both arms and across them (:func:`ring_probe_sites`, ``across=True``).
    radius : float, optional
        Mean ring radius (position units); default: mean distance of the sites from the
        midpoint of the lead interfaces.
    energies : sequence, optional
        Calibration energies; default :func:`default_calibration_energies` (``n_energies``).
    tol : float
        Stop when ``|realised/requested - 1| <= tol``.
    max_steps : int
        Maximum number of coupling updates after the analytic start.
    n_flux, seed : int
        Flux points per period; seed of the bootstrap.

    Returns
    -------
    DephasingProbes
        ``info`` holds ``l_phi_requested``, ``l_phi_realised``, ``l_phi_realised_err``,
        ``path_length``, ``calibration_energies``, ``eta_history``, ``l_phi_convention``.
        For several L_phi on one device use :class:`LPhiCalibrator` (set-up done once).
    """
    cal = LPhiCalibrator(
        model,
        energy,
        n_probes=n_probes,
        radius=radius,
        energies=energies,
        n_energies=n_energies,
        n_flux=n_flux,
        seed=seed,
    )
    return cal.probes(l_phi, tol=tol, max_steps=max_steps)


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
        Requested L_phi in m (convention :data:`ringkit.conventions.L_PHI_CONVENTION`).
    energy : float
        Fermi energy in J above the band bottom.
    gate : float, optional
        Arm-gate potential in J.
    **kwargs
        ``n_energies``, ``n_flux``, ``energies``, ``seed``, ``tol``, ``max_steps`` as in
        :func:`calibrate_probes`.

    Returns
    -------
    DephasingProbes
        Sites of ``ring.fsyst``; ``info`` lengths in m (``l_phi_realised``,
        ``l_phi_realised_err``, ``path_length``, ``radius``, ``l_phi_requested``).
        The set-up is cached per process (:mod:`ringkit.transport.realised_l_phi`).
    """
    from ringkit.transport.realised_l_phi import realised_ring_probes

    if not math.isinf(l_phi):
        check_positive("l_phi", l_phi, "m")
    return realised_ring_probes(
        ring,
        float(l_phi),
        ring.to_lattice_energy(energy),
        ring.params(gate=gate),
        int(n_probes),
        **kwargs,
    )
