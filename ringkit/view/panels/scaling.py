"""Size-scaling panel, compute part: predicted h/e and h/2e amplitudes versus ring radius and
simulated disorder-ensemble points (no widgets here).

Public API
----------
ScalingParams
    Material, L_phi, temperature, mean free path (or mobility), radius range, prefactors.
scaling_curves(params, simulated=None) -> xarray.Dataset
    :func:`ringkit.analysis.scaling.predict_amplitudes` for these settings.
simulate_points(params, radii, *, seeds, ...) -> dict
    Tight-binding disorder ensemble per radius: flux-tube rings swept over exactly one flux
    quantum (exact low-rank sweeper), dephasing probes for L_phi, thermal average; per-sample
    h/e and h/2e rms from the first two Fourier harmonics; rms over samples with standard
    errors. Returns arrays in the ``simulated=`` format of ``predict_amplitudes``.
calibrated_prefactors(dataset) -> (c_he, c_aas)
    Prefactors that match the model to simulated points (geometric mean of the ratios).

The panel itself shows quantile bands of simulated ensembles and the law fitted through them:
:mod:`ringkit.view.panels.scaling_bands` (dataset, mismatch, law, recompute) and
:mod:`ringkit.view.panels.scaling_draw` (figure); ``simulate_points`` and
``calibrated_prefactors`` remain for notebook 02's quick points.
"""

from __future__ import annotations

import functools
import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive, check_range

__all__ = ["ScalingParams", "scaling_curves", "simulate_points", "calibrated_prefactors"]


@dataclass(frozen=True)
class ScalingParams:
    """Settings of the size-scaling panel (SI units).

    Parameters
    ----------
    material : {"GaAs", "InAs", "Au"}
        Preset giving the Fermi velocity (and mobility unless overridden).
    l_phi : float
        Phase-coherence length in m (``inf`` allowed).
    temperature : float
        Temperature in K.
    mean_free_path : float or None
        Elastic mean free path in m; None: from the preset's mobility.
    r_min, r_max : float
        Radius range in m.
    n_radius : int
        Radii of the model curve.
    n_averaged : int
        Independent samples averaged (series array / ensemble mean).
    coherent_amplitude, aas_amplitude : float
        Typed model prefactors in e^2/h, used only with ``override_prefactors`` (advanced);
        otherwise the law uses the prefactors fitted to the simulated size dataset.
    dimension : {2, 3}
        2 for a 2DEG, 3 for a metal film (``D = v_F l/d``).
    width : float
        Arm width in m (simulated bands: rings of this width).
    override_prefactors : bool
        Draw the law with the typed prefactors instead of the fitted ones.
    """

    material: str = "GaAs"
    l_phi: float = 2e-6
    temperature: float = 0.1
    mean_free_path: float | None = None
    r_min: float = 0.1e-6
    r_max: float = 2.0e-6
    n_radius: int = 200
    n_averaged: int = 1
    coherent_amplitude: float = 1.0
    aas_amplitude: float = 1.0
    dimension: int = 2
    width: float = 120e-9
    override_prefactors: bool = False

    def __post_init__(self) -> None:
        check_choice("material", self.material, ("GaAs", "InAs", "Au"))
        check_range("l_phi", self.l_phi, 0.0, None, "m", inclusive=(False, True))
        check_positive("temperature", self.temperature, "K", allow_zero=True)
        if self.mean_free_path is not None:
            check_positive("mean_free_path", self.mean_free_path, "m")
        check_positive("r_min", self.r_min, "m")
        if not self.r_max > self.r_min:
            raise ParameterError("r_max", self.r_max, f"must be > r_min = {self.r_min:g} m", "m")
        if int(self.n_radius) != self.n_radius or self.n_radius < 2:
            raise ParameterError("n_radius", self.n_radius, "must be an integer >= 2")
        check_positive("width", self.width, "m")

    def updated(self, **changes: Any) -> ScalingParams:
        """Copy with fields replaced (validated)."""
        return replace(self, **changes)

    def material_obj(self):
        """The :class:`ringkit.device.Material` (with L_phi, temperature, mean free path)."""
        from ringkit.device import Material

        over: dict[str, Any] = {"temperature": self.temperature}
        if math.isfinite(self.l_phi):
            over["l_phi"] = self.l_phi
        if self.mean_free_path is not None:
            over["mean_free_path"] = self.mean_free_path
        mat = Material.preset(self.material, **over)
        if mat.elastic_mean_free_path is None:
            raise ParameterError(
                "mean_free_path", None, f"is required for {self.material} (preset has none)", "m"
            )
        return mat

    @property
    def radii(self) -> np.ndarray:
        """Radii of the model curve in m (log-spaced)."""
        return np.geomspace(self.r_min, self.r_max, int(self.n_radius))


def scaling_curves(params: ScalingParams, simulated: Any = None, *, n_modes: int = 1):
    """Model curves (and simulated points) as an xarray Dataset.

    See :func:`ringkit.analysis.scaling.predict_amplitudes` for the variables; ``n_modes``
    open modes per arm.
    """
    from ringkit.analysis.scaling import predict_amplitudes

    mat = params.material_obj()
    return predict_amplitudes(
        params.radii,
        l_phi=params.l_phi,
        temperature=params.temperature,
        mean_free_path=mat.elastic_mean_free_path,
        fermi_velocity=mat.fermi_velocity,
        dimension=params.dimension,
        coherent_amplitude=params.coherent_amplitude,
        aas_amplitude=params.aas_amplitude,
        n_averaged=params.n_averaged,
        n_modes=n_modes,
        simulated=simulated,
    )


def _sample(device, seed: int, params: ScalingParams, n_flux: int, n_probes: int,
            max_energies: int) -> np.ndarray:  # fmt: skip
    """G(flux) over one flux quantum (n_flux points) of one disorder sample, e^2/h, and the
    (realised L_phi, its error) in m of the sample's calibrated probes (NaN without probes)."""
    from ringkit.tightbinding import build_ring
    from ringkit.transport.fastsweep import kron_reduce
    from ringkit.transport.lowrank import FluxTubeSweeper
    from ringkit.units import PHI0
    from ringkit.view.panels.explorer_full import thermal_grid

    ring = build_ring(device, seed=seed)
    fluxes = PHI0 * np.arange(n_flux) / n_flux
    p0 = ring.params(flux=0.0)
    probes_kw: dict[str, Any] = {}
    realised = (math.nan, math.nan)
    if math.isfinite(params.l_phi):
        from ringkit.transport.sweep import ring_probes

        # calibrated on this sample: the probes realise params.l_phi (docs/probes.md)
        pr = ring_probes(ring, params.l_phi, ring.fermi_energy_lattice, p0, n_probes)
        probes_kw = {"probe_sites": pr.sites, "probe_eta": pr.eta}
        from ringkit.transport.realised_l_phi import realised_l_phi_info

        info = realised_l_phi_info(pr)
        realised = (info["l_phi_realised_m"], info["l_phi_realised_err_m"])
    energies, weights, _ = thermal_grid(ring, params.temperature, max_energies)
    g = np.zeros(n_flux)
    for e, w in zip(energies, weights, strict=True):
        sw = FluxTubeSweeper(ring.fsyst, energy=ring.to_lattice_energy(e), params=p0, **probes_kw)
        if probes_kw:
            g += w * kron_reduce(sw.conductance_matrix(fluxes), 0, 1)
        else:
            g += w * sw.transmission(fluxes)
    return 2.0 * g, realised  # G spin degenerate (e^2/h); realised L_phi and error (m)


def simulate_points(
    params: ScalingParams,
    radii: Sequence[float],
    *,
    seeds: Sequence[int] = (0, 1, 2, 3),
    width: float | None = None,
    lattice_spacing: float | None = None,
    n_flux: int = 32,
    n_probes: int = 24,
    max_energies: int = 5,
    report: Callable[[float, str], None] | None = None,
    executor: Any = None,
) -> dict[str, np.ndarray]:
    """Simulated h/e and h/2e rms amplitudes (e^2/h) of disorder ensembles versus radius.

    Each sample is a flux-tube ring (flux through the hole only, so G(flux) has period h/e
    exactly) swept over one flux quantum; the cosine amplitudes ``A_n`` of harmonics n = 1, 2
    give rms ``A_n/sqrt(2)``. Per radius the rms over samples ``sqrt(<A^2>)`` is reported with
    the standard error of the mean of ``A^2`` propagated to the rms.

    Parameters
    ----------
    params : ScalingParams
    radii : sequence of float
        Mean radii in m.
    seeds : sequence of int
        Disorder realisations per radius.
    width : float, optional
        Arm width in m (default ``0.25 * min(radii)``).
    lattice_spacing : float, optional
        m; default the device's automatic choice (``kF a = 0.5``).
    n_flux : int
        Flux points per flux quantum (>= 8).
    n_probes, max_energies : int
        Dephasing probes per ring (if L_phi is finite) and energies of the thermal average.
    report : callable, optional
        ``report(fraction, text)``; may raise to cancel.
    executor : concurrent.futures.Executor, optional
        Run the samples of each radius with :func:`ringkit.transport.ensemble.run_ensemble`
        on this executor (e.g. ``ProcessPoolExecutor`` or ``client.get_executor(pure=False)``);
        progress is then reported per radius. Default: in this process, sample by sample.

    Returns
    -------
    dict
        ``radius``, ``amplitude_he_rms``, ``amplitude_he_rms_err``, ``amplitude_h2e_rms``,
        ``amplitude_h2e_rms_err``, ``n_samples``, ``l_phi_realised_m`` and
        ``l_phi_realised_err_m`` (median over the samples of the probes' realised L_phi and of
        its error, m; NaN without probes) (arrays) and ``notes`` (tuple of str: warnings
        recorded on the way, e.g. low-rank fallbacks or a coarse lattice).
    """
    say = report or (lambda frac, text: None)
    with warnings.catch_warnings(record=True) as caught:  # notes, not errors in a job thread
        warnings.simplefilter("always")
        res = _simulate(params, radii, seeds, width, lattice_spacing, n_flux, n_probes,
                        max_energies, say, executor)  # fmt: skip
    notes = [f"{w.category.__name__}: {w.message}" for w in caught]
    for r, lr, le in zip(res["radius"], res["l_phi_realised_m"], res["l_phi_realised_err_m"],
                         strict=True):  # fmt: skip
        if np.isfinite(lr):
            notes.append(
                f"r = {r * 1e9:.0f} nm: probes calibrated on each sample, realised L_phi "
                f"{lr * 1e6:.3g} ± {le * 1e6:.2g} um (median; requested "
                f"{params.l_phi * 1e6:.3g} um)"
            )
    res["notes"] = tuple(dict.fromkeys(notes))
    say(1.0, "done")
    return res


def _harmonics(device, params: ScalingParams, n_flux: int, n_probes: int, max_energies: int,
               seed: int) -> np.ndarray:  # fmt: skip
    """rms of the h/e and h/2e harmonics (e^2/h) of one sample, then its realised L_phi and
    error (m; NaN without probes): a picklable ensemble task."""
    g, realised = _sample(device, int(seed), params, int(n_flux), n_probes, max_energies)
    c = 2.0 * np.abs(np.fft.rfft(g)) / g.size
    return np.concatenate([c[1:3] / math.sqrt(2.0), realised])


def _simulate(params, radii, seeds, width, lattice_spacing, n_flux, n_probes, max_energies, say,
              executor=None):  # fmt: skip
    from ringkit.device import RingDevice, RingGeometry

    radii = [check_positive("radius", r, "m") for r in radii]
    if int(n_flux) != n_flux or n_flux < 8:
        raise ParameterError("n_flux", n_flux, "must be an integer >= 8")
    w = 0.25 * min(radii) if width is None else check_positive("width", width, "m")
    mat = params.material_obj()
    out = {k: [] for k in ("amplitude_he_rms", "amplitude_he_rms_err", "amplitude_h2e_rms",
                           "amplitude_h2e_rms_err", "l_phi_realised_m",
                           "l_phi_realised_err_m")}  # fmt: skip
    total = len(radii) * len(seeds)
    done = 0
    for r in radii:
        geo = RingGeometry.from_mean_radius(r, w)
        device = RingDevice(mat, geo, field_mode="flux_tube", lattice_spacing=lattice_spacing)
        task = functools.partial(_harmonics, device, params, int(n_flux), n_probes, max_energies)
        if executor is not None:
            from ringkit.transport.ensemble import run_ensemble

            say(done / total, f"r = {r * 1e9:.0f} nm, {len(seeds)} samples")
            amps = list(run_ensemble(task, seeds, executor=executor, progress=False).values)
            done += len(seeds)
        else:
            amps = []
            for seed in seeds:
                say(done / total, f"r = {r * 1e9:.0f} nm, sample {seed}")
                amps.append(task(int(seed)))
                done += 1
        amps = np.asarray(amps, dtype=float)
        lr, lr_err = amps[:, 2], amps[:, 3]
        out["l_phi_realised_m"].append(float(np.median(lr)) if np.isfinite(lr).all() else np.nan)
        out["l_phi_realised_err_m"].append(
            float(np.median(lr_err)) if np.isfinite(lr_err).all() else np.nan
        )
        a2 = amps[:, :2] ** 2  # (samples, 2)
        mean = a2.mean(axis=0)
        sem = a2.std(axis=0, ddof=1) / math.sqrt(len(seeds)) if len(seeds) > 1 else 0 * mean
        rms = np.sqrt(mean)
        err = np.where(rms > 0, sem / (2 * np.maximum(rms, 1e-300)), 0.0)
        out["amplitude_he_rms"].append(rms[0])
        out["amplitude_he_rms_err"].append(err[0])
        out["amplitude_h2e_rms"].append(rms[1])
        out["amplitude_h2e_rms_err"].append(err[1])
    res = {k: np.asarray(v) for k, v in out.items()}
    res["radius"] = np.asarray(radii, dtype=float)
    res["n_samples"] = np.full(len(radii), len(seeds))
    return res


def calibrated_prefactors(dataset) -> tuple[float, float]:
    """Prefactors ``(coherent_amplitude, aas_amplitude)`` matching the model to the simulated
    points of a :func:`scaling_curves` dataset (mean log ratio simulated/model = 0, solved
    by :func:`ringkit.analysis.scaling.match_prefactors`)."""
    from ringkit.analysis.scaling import match_prefactors

    if "sim_amplitude_he_rms" not in dataset or not np.any(
        np.asarray(dataset["sim_amplitude_he_rms"]) > 0
    ):
        raise ParameterError("simulated", "points", "have no positive h/e amplitude to calibrate")
    # the model is bounded by G (not linear in the prefactors): solve for the prefactors
    return match_prefactors(dataset)
