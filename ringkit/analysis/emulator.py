"""Amplitude emulator: the ensemble distribution of (h/e rms, h/2e rms, mean G) over parameters.

No kwant here (numpy/scipy/xarray). Built by
:func:`ringkit.transport.emulator_build.build_emulator`; used by
:func:`ringkit.analysis.inverse_fit.fit_device`. docs/inverse-fit.md.

What is stored
--------------
Per mean free path ``l_d`` (grid node), disorder seed ``s``, probe coupling ``eta_i`` (first
0: coherent) and temperature ``T_k``: the h/e rms, h/2e rms and mean G of that realization
(e^2/h), their thermal-average error estimates, the thermal trace G(flux) over one period and
the T = 0 h/e amplitudes near E_F used for the realised L_phi.

L_phi axis (realised, ensemble)
-------------------------------
For each node and coupling, ``rho_i^2 = sum_{s,E} a_{s,i}(E)^2 / sum_{s,E} a_{s,0}(E)^2`` (T = 0
h/e amplitudes pooled over realizations and the energies within +-8 E_c), and
``L_phi = pi r / (-ln rho_i)`` -- the h/e-damping definition of ``LPhiCalibrator``
(docs/probes.md, "Realised L_phi"), convention of :mod:`ringkit.conventions`. Error: bootstrap
over realizations. The coherent coupling is ``L_phi = inf`` (u = 1/L_phi = 0).

Interpolation
-------------
Per realization (same disorder, so the values move smoothly): ``sqrt a`` and ``G`` by monotone
cubic (PCHIP) interpolation in ``ln T`` and then in ``u = 1/L_phi`` (``sqrt a`` falls as
exp(-pi r u/2) for a pure damping; unlike ``ln a`` it stays smooth where the complex h/e
harmonic of one realization passes near zero). Between mean-free-path nodes (other disorder
patterns) the Gaussian summaries (mean, covariance) and the quantiles are interpolated
linearly in ``ln l``. tests/test_inverse_fit.py checks both at held-out nodes.

Likelihood
----------
For measured amplitudes at temperatures ``T_j`` and ``L_phi(T_j)``: ``y = (sqrt r_he, sqrt r_h2e,
G)`` at every ``T_j``. Model realizations get the measurement noise floor added in power
(``r = sqrt(a^2 + n^2)``). The temperatures of one ring are one realization and nearly
perfectly correlated, so the likelihood uses the summary ``z = Q^T y`` per quantity, Q the
orthonormal polynomials of degree < 2 in ln T (level and slope; 6 numbers instead of 18):
its sample mean and covariance over the n realizations, with the finite-ensemble
corrections of Hartlap et al. and Percival et al., give a Gaussian density, plus the
measurement variances and the emulator's interpolation variance (leave-one-node-out).
Why, and what this calibrates: :mod:`ringkit.analysis._emulator_likelihood` and
docs/inverse-fit.md. The square root makes a Rayleigh amplitude nearly symmetric (Weibull of
shape 4). :meth:`AmplitudeEmulator.summary` still gives the full y mean and (shrunk)
covariance, for draws and plots.

Public API
----------
AmplitudeEmulator, EmulatorGrid, EMULATOR_FORMAT
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator

from ringkit._validation import ParameterError
from ringkit.analysis import _emulator_likelihood as _lik
from ringkit.analysis._emulator_likelihood import shrunk_covariance
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY

__all__ = ["AmplitudeEmulator", "EmulatorGrid", "EMULATOR_FORMAT", "QUANTITIES"]

EMULATOR_FORMAT = "ringkit-amplitude-emulator/1"
QUANTITIES = ("amplitude_he_rms", "amplitude_h2e_rms", "mean_conductance")
_FLOOR = 1e-12  # e^2/h, below any resolvable amplitude (log of zero amplitudes)
_DEVICE_IGNORED = ("mean_free_path", "mobility", "disorder_strength", "temperature", "l_phi")


@dataclass(frozen=True)
class EmulatorGrid:
    """Grid of an emulator (SI: K, m). Compared on load: another grid is refused."""

    temperatures: tuple
    l_phi_targets: tuple
    mean_free_paths: tuple
    seeds: tuple
    n_flux: int = 24
    n_probes: int = 100
    thermal_tol: float = 2e-3

    def to_json(self) -> str:
        return json.dumps(dataclasses.asdict(self), sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> EmulatorGrid:
        d = json.loads(text)
        return cls(**{k: tuple(v) if isinstance(v, list) else v for k, v in d.items()})


def device_key(device) -> dict:
    """The device description that an emulator depends on (disorder and T/L_phi excluded)."""
    d = device if isinstance(device, dict) else device.to_dict()
    d = json.loads(json.dumps(d))
    for k in _DEVICE_IGNORED:
        d.get("material", {}).pop(k, None)
    d.pop("field_mode", None)
    return d


def _diff(a: dict, b: dict, prefix: str = "") -> str:
    for k in sorted(set(a) | set(b)):
        x, y = a.get(k), b.get(k)
        if isinstance(x, dict) and isinstance(y, dict):
            out = _diff(x, y, f"{prefix}{k}.")
            if out:
                return out
        elif x != y:
            return f"{prefix}{k}: cache {x!r} vs requested {y!r}"
    return ""


class AmplitudeEmulator:
    """Ensemble amplitude statistics of one device over (mean free path, L_phi, T).

    Parameters
    ----------
    device : RingDevice or dict
        Device description (``to_dict()``); disorder, field mode, T and L_phi are grid axes.
    grid : EmulatorGrid
    etas : ndarray (n_mfp, n_eta)
        Probe couplings (lattice units), first column 0.
    amplitudes, thermal_errors : ndarray (n_mfp, n_seed, n_eta, n_T, 3)
        Columns :data:`QUANTITIES` in e^2/h.
    traces : ndarray (n_mfp, n_seed, n_eta, n_T, n_flux)
        Thermal G over one h/e flux period, e^2/h.
    cal_he : ndarray (n_mfp, n_seed, n_eta, n_cal)
        T = 0 h/e rms at the realised-L_phi energies.
    info : dict
        Build information (``mean_radius_m`` etc. are added from the device if missing).
    """

    def __init__(self, *, device, grid, etas, amplitudes, thermal_errors, traces, cal_he, info):
        self.device_dict = device if isinstance(device, dict) else device.to_dict()
        self.grid = grid
        self.etas = np.asarray(etas, dtype=float)
        self.amplitudes = np.asarray(amplitudes, dtype=float)
        self.thermal_errors = np.asarray(thermal_errors, dtype=float)
        self.traces = np.asarray(traces, dtype=float)
        self.cal_he = np.asarray(cal_he, dtype=float)
        self.info = dict(info)
        geo = self.device_dict["geometry"]
        self.info.setdefault("r_in_m", float(geo["r_in"]))
        self.info.setdefault("r_out_m", float(geo["r_out"]))
        self.info.setdefault("mean_radius_m", 0.5 * (float(geo["r_in"]) + float(geo["r_out"])))
        self.temperatures = np.asarray(grid.temperatures, dtype=float)
        self.mean_free_paths = np.asarray(grid.mean_free_paths, dtype=float)
        self.seeds = np.asarray(grid.seeds, dtype=np.int64)
        d, s, i, t, q = self.amplitudes.shape
        if (d, s, t, q) != (self.mean_free_paths.size, self.seeds.size, self.temperatures.size, 3):
            raise ParameterError("amplitudes", self.amplitudes.shape, "must match the grid")
        self.l_phi_realised, self.l_phi_realised_err = self._realised()
        self._u = np.where(np.isfinite(self.l_phi_realised), 1.0 / self.l_phi_realised, 0.0)
        self._u = np.maximum.accumulate(self._u, axis=1)
        self._u += 1e-12 * np.arange(i)[None, :] * np.max(self._u)  # strictly increasing
        self._lt = np.log(self.temperatures)
        self._la = np.sqrt(np.maximum(self.amplitudes[..., :2], 0.0))

    def subset(self, seed_index) -> AmplitudeEmulator:
        """The emulator on a subset of its realizations (e.g. leave-one-seed-out checks)."""
        keep = np.asarray(seed_index, dtype=int)
        return AmplitudeEmulator(
            device=self.device_dict,
            grid=dataclasses.replace(self.grid, seeds=tuple(int(x) for x in self.seeds[keep])),
            etas=self.etas,
            amplitudes=self.amplitudes[:, keep],
            thermal_errors=self.thermal_errors[:, keep],
            traces=self.traces[:, keep],
            cal_he=self.cal_he[:, keep],
            info=self.info,
        )

    # ------------------------------------------------------------------ realised L_phi axis
    def _realised(self, n_boot: int = 400) -> tuple[np.ndarray, np.ndarray]:
        length = math.pi * self.info["mean_radius_m"]
        a2 = self.cal_he**2  # (d, s, i, c)
        rng = np.random.default_rng(0)
        ns = a2.shape[1]
        idx = rng.integers(0, ns, size=(n_boot, ns))
        per_seed = a2.sum(axis=3)  # (d, s, i)
        with np.errstate(divide="ignore", invalid="ignore"):
            lr = 0.5 * np.log(per_seed.sum(axis=1) / per_seed[:, :, :1].sum(axis=1))
            boot = per_seed[:, idx, :].sum(axis=2)  # (d, b, i)
            lrb = 0.5 * np.log(boot / boot[:, :, :1])
            lphi = np.where(lr < 0, length / -lr, np.inf)
            err = lphi * lrb.std(axis=1, ddof=1) / np.abs(lr)
        lphi[:, 0], err[:, 0] = np.inf, 0.0
        return lphi, np.where(np.isfinite(err), err, np.inf)

    @property
    def l_phi_range(self) -> tuple[float, float]:
        """Smallest realised L_phi valid at every node (m) and inf (coherent node)."""
        finite = np.where(np.isfinite(self.l_phi_realised), self.l_phi_realised, np.nan)
        return float(np.nanmax(np.nanmin(finite, axis=1))), math.inf

    @property
    def largest_finite_l_phi(self) -> float:
        """Largest finite realised L_phi common to all nodes (m)."""
        finite = np.where(np.isfinite(self.l_phi_realised), self.l_phi_realised, np.nan)
        return float(np.nanmin(np.nanmax(finite, axis=1)))

    @property
    def temperature_range(self) -> tuple[float, float]:
        return float(self.temperatures[0]), float(self.temperatures[-1])

    @property
    def mean_free_path_range(self) -> tuple[float, float]:
        return float(self.mean_free_paths[0]), float(self.mean_free_paths[-1])

    # ------------------------------------------------------------------------ interpolation
    def _check_t(self, temperature) -> np.ndarray:
        t = np.atleast_1d(np.asarray(temperature, dtype=float))
        lo, hi = self.temperature_range
        bad = ~((t >= lo * (1 - 1e-9)) & (t <= hi * (1 + 1e-9)))
        if np.any(bad) or t.size == 0:
            raise ParameterError(
                "temperature",
                t[bad][:3] if bad.any() else t,
                f"emulator covers [{lo:g}, {hi:g}]",
                "K",
            )
        return np.clip(t, lo, hi)

    def node_values(self, d: int, l_phi, temperature) -> np.ndarray:
        """Per-realization (h/e rms, h/2e rms, mean G) at node ``d``, shape (n_seed, J, 3).

        ``l_phi`` (m, inf allowed) and ``temperature`` (K) are paired arrays of length J.
        """
        t = self._check_t(temperature)
        lp = np.broadcast_to(np.asarray(l_phi, dtype=float), t.shape)
        u = np.where(np.isfinite(lp), 1.0 / lp, 0.0)
        if np.any(lp <= 0) or np.any(u > self._u[d, -1] * (1 + 1e-9)):
            raise ParameterError(
                "l_phi", lp, f"emulator covers L_phi >= {1 / self._u[d, -1]:.4g} m (realised)", "m"
            )
        vu = self._u_interpolator(d, t)(np.minimum(u, self._u[d, -1]))  # (s, J, J, 3)
        j = np.arange(t.size)
        out = vu[:, j, j, :]  # (s, J, 3)
        out[..., :2] = np.maximum(out[..., :2], 0.0) ** 2
        return out

    def _u_interpolator(self, d: int, t: np.ndarray) -> PchipInterpolator:
        """PCHIP along u of the values interpolated to temperatures ``t`` (cached per fit)."""
        key = (d, t.tobytes())
        cache = self.__dict__.setdefault("_cache", {})
        if key not in cache:
            if len(cache) > 64:
                cache.clear()
            vals = np.concatenate([self._la[d], self.amplitudes[d][..., 2:]], axis=-1)
            if self._lt.size > 1:
                vt = PchipInterpolator(self._lt, vals, axis=2)(np.log(t))  # (s, i, J, 3)
            else:
                vt = np.repeat(vals, t.size, axis=2)
            cache[key] = PchipInterpolator(self._u[d], vt, axis=1)
        return cache[key]

    def _nodes(self, mean_free_path: float) -> list[tuple[int, float]]:
        x = float(mean_free_path)
        lo, hi = self.mean_free_path_range
        if not (lo * (1 - 1e-9) <= x <= hi * (1 + 1e-9)):
            raise ParameterError("mean_free_path", x, f"emulator covers [{lo:.4g}, {hi:.4g}]", "m")
        lm = np.log(self.mean_free_paths)
        if lm.size == 1:
            return [(0, 1.0)]
        k = int(np.clip(np.searchsorted(lm, math.log(x)) - 1, 0, lm.size - 2))
        w = float(np.clip((math.log(x) - lm[k]) / (lm[k + 1] - lm[k]), 0.0, 1.0))
        return [(k, 1.0 - w), (k + 1, w)]

    # -------------------------------------------------------------------- distributions
    def quantiles(
        self, l_phi, temperature, mean_free_path: float, q=(0.16, 0.5, 0.84), noise_rms=None
    ) -> dict:
        """Model quantiles of each quantity at paired (l_phi, temperature), e^2/h.

        ``noise_rms`` (J, 2) adds a measurement noise floor to h/e and h/2e in power.
        Returns ``{quantity: ndarray (J, len(q))}`` (node quantiles interpolated in ln l).
        """
        q = np.asarray(q, dtype=float)
        out = None
        for d, w in self._nodes(mean_free_path):
            v = self._with_noise(self.node_values(d, l_phi, temperature), noise_rms)
            qs = np.moveaxis(np.quantile(v, q, axis=0), 0, -1)  # (J, 3, nq)
            out = w * qs if out is None else out + w * qs
        return {name: out[:, k, :] for k, name in enumerate(QUANTITIES)}

    @staticmethod
    def _with_noise(v: np.ndarray, noise_rms) -> np.ndarray:
        if noise_rms is None:
            return v
        n = np.asarray(noise_rms, dtype=float).reshape(1, v.shape[1], 2)
        out = v.copy()
        out[..., :2] = np.sqrt(v[..., :2] ** 2 + n**2)
        return out

    def summary(self, l_phi, temperature, mean_free_path: float, noise_rms=None, use=(0, 1, 2)):
        """Mean and covariance of ``y = (sqrt r_he, sqrt r_h2e, G)`` over all temperatures.

        Correlations shrunk (Schafer-Strimmer), times ``1 + 1/n``; for draws and plots (the
        likelihood uses :meth:`projected`). Returns ``(mean (J*len(use)), cov)`` ordered
        temperature-major.
        """
        use = list(use)
        mean, cov = 0.0, 0.0
        for d, w in self._nodes(mean_free_path):
            v = self._with_noise(self.node_values(d, l_phi, temperature), noise_rms)
            y = v[..., use].copy()
            amp = [k for k, u in enumerate(use) if u < 2]
            y[..., amp] = np.sqrt(np.maximum(y[..., amp], 0.0))
            y = y.reshape(y.shape[0], -1)
            n = y.shape[0]
            mean = mean + w * y.mean(axis=0)
            cov = cov + w * shrunk_covariance(y) * (1.0 + 1.0 / n)
        return mean, cov

    def interpolation_variance(self, d: int, l_phi, temperature) -> np.ndarray:
        """Variance (J, 3) of y from the emulator's interpolation at node ``d`` (see
        :mod:`ringkit.analysis._emulator_likelihood`, leave-one-node-out)."""
        cache = self.__dict__.setdefault("_ivar", {})
        if d not in cache:
            vals = np.concatenate([self._la[d], self.amplitudes[d][..., 2:]], axis=-1)
            cache[d] = _lik.interpolation_variance_tables(self._u[d], self._lt, vals)
        lp = np.asarray(l_phi, dtype=float)
        u = np.where(np.isfinite(lp), 1.0 / lp, 0.0)
        return _lik.variance_at(cache[d], self._u[d], self._lt, u, np.log(temperature))

    def projected(self, measured, l_phi, mean_free_path: float, use=(0, 1, 2), n_basis=None):
        """Measured summary ``z``, model mean and covariance of ``z``, n and extra variance.

        ``z = Q^T y`` per quantity, Q the orthonormal polynomials of degree < ``n_basis``
        (default :data:`~ringkit.analysis._emulator_likelihood.N_BASIS`) in ln T over the
        measured temperatures (module docstring of ``_emulator_likelihood``). The extra
        variance holds the measurement variances and the interpolation variance.
        """
        use = list(use)
        temps = np.array([m.temperature for m in measured])
        noise = np.array([[m.he_noise_rms, m.h2e_noise_rms] for m in measured])
        q = _lik.temperature_basis(temps, _lik.N_BASIS if n_basis is None else n_basis)
        y, var = measured_vector(measured, use)
        y, var = y.reshape(temps.size, len(use)), var.reshape(temps.size, len(use))
        amp = [k for k, u in enumerate(use) if u < 2]
        mean, cov, ivar = 0.0, 0.0, 0.0
        for d, w in self._nodes(mean_free_path):
            v = self._with_noise(self.node_values(d, l_phi, temps), noise)[..., use].copy()
            v[..., amp] = np.sqrt(np.maximum(v[..., amp], 0.0))
            zs = _lik.project(v, q)
            mean = mean + w * zs.mean(axis=0)
            cov = cov + w * _lik.sample_covariance(zs, shrunk_covariance)
            ivar = ivar + w * self.interpolation_variance(d, l_phi, temps)[:, use]
        extra = _lik.project_measurement_cov(var + ivar, q)
        return _lik.project(y, q), mean, cov, self.seeds.size, extra

    def logpdf(
        self, measured, l_phi, mean_free_path: float, use=(0, 1, 2), n_theta: int = 3
    ) -> float:
        """Log-likelihood of measured amplitudes (list of ``MeasuredAmplitudes``).

        ``l_phi`` gives L_phi (m) at each measured temperature; ``n_theta`` is the number of
        fitted parameters (enters the finite-ensemble correction). The density is that of the
        summary ``z`` (level and slope in ln T of ``y`` per quantity, :meth:`projected`):
        Gaussian with the sample covariance of the n realizations times
        ``(1 + 1/n) m1/alpha`` (Hartlap and Percival corrections,
        :func:`~ringkit.analysis._emulator_likelihood.covariance_factor`), plus the
        measurement variances (``*_err``) and the interpolation variance; with n < p + 5 a
        predictive Student t. Noise floors (``*_noise_rms``) are added to the model in power.
        """
        z, mean, cov, n, extra = self.projected(measured, l_phi, mean_free_path, use)
        return _lik.logpdf(z, mean, cov, n, extra, n_theta)

    def mahalanobis(self, measured, l_phi, mean_free_path: float, use=(0, 1, 2), n_theta=3):
        """Squared distance of the measured summary in the scale of :meth:`logpdf`, nu, p.

        Gaussian (nu = inf): d^2 ~ chi-square(p) at the truth; t: ``d^2/p`` ~ F(p, nu).
        """
        z, mean, cov, n, extra = self.projected(measured, l_phi, mean_free_path, use)
        d2, nu = _lik.distance(z, mean, cov, n, extra, n_theta)
        return d2, nu, z.size

    # ------------------------------------------------------------------------------- I/O
    def content_hash(self) -> str:
        h = hashlib.sha256()
        h.update(json.dumps(self.device_dict, sort_keys=True).encode())
        h.update(self.grid.to_json().encode())
        for arr in (self.etas, self.amplitudes, self.thermal_errors, self.traces, self.cal_he):
            h.update(np.ascontiguousarray(arr, dtype=np.float64).tobytes())
        return h.hexdigest()

    def to_dataset(self):
        """xarray Dataset (netCDF-safe) with grid, device, convention attributes and hash."""
        from ringkit.analysis._emulator_io import to_dataset

        return to_dataset(self)

    def save(self, path) -> None:
        """Write netCDF (h5netcdf engine), atomically."""
        from ringkit.analysis._emulator_io import save

        save(self, path)

    @classmethod
    def load(cls, path, *, device=None, grid: EmulatorGrid | None = None) -> AmplitudeEmulator:
        """Read a netCDF cache; refuse another format, a changed file, device or grid."""
        from ringkit.analysis._emulator_io import load

        return load(cls, path, device=device, grid=grid)

    def describe(self) -> dict:
        """Grid, ranges and realised L_phi per node (JSON-safe)."""
        return {
            "device": self.device_dict,
            "grid": json.loads(self.grid.to_json()),
            "l_phi_realised_m": np.where(
                np.isfinite(self.l_phi_realised), self.l_phi_realised, -1
            ).tolist(),
            "l_phi_realised_err_m": np.where(
                np.isfinite(self.l_phi_realised_err), self.l_phi_realised_err, -1
            ).tolist(),
            "temperature_range_K": list(self.temperature_range),
            "mean_free_path_range_m": list(self.mean_free_path_range),
            L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
            "content_sha256": self.content_hash(),
            "info": {k: v for k, v in self.info.items() if isinstance(v, (int, float, str))},
        }


def measured_vector(measured, use=(0, 1, 2)) -> tuple[np.ndarray, np.ndarray]:
    """``y`` and its measurement variances for a list of ``MeasuredAmplitudes``."""
    ys, vs = [], []
    for m in measured:
        vals = (m.he_rms, m.h2e_rms, m.mean_g)
        errs = (m.he_rms_err, m.h2e_rms_err, m.mean_g_err)
        floors = (m.he_noise_rms, m.h2e_noise_rms, 0.0)
        for k in use:
            if k < 2:
                r = max(vals[k], floors[k], _FLOOR)
                ys.append(math.sqrt(max(vals[k], 0.0)))
                vs.append(errs[k] ** 2 / (4.0 * r))
            else:
                ys.append(vals[k])
                vs.append(errs[k] ** 2)
    return np.array(ys), np.array(vs)
