"""Statistics of ensembles of realizations: quantiles, bootstrap errors, exceedance, stopping.

kwant-free (works on any samples, simulated or measured). Used by
:mod:`ringkit.transport.amplitude_stats` for the h/e and h/2e amplitude distributions over
disorder realizations (docs/amplitude-statistics.md).

Public API
----------
bootstrap_quantiles(samples, q, *, n_boot=1000, seed=0) -> (quantiles, errors)
    Sample quantiles (``method="inverted_cdf"``: one order statistic) and their bootstrap
    standard errors.
exceedance_probability(samples, threshold, *, confidence=0.95) -> (p, low, high)
    Fraction above a threshold with the Wilson score interval.
StoppingRule
    Relative (and absolute) tolerance on every quantile's bootstrap error, batch size, minimum
    and maximum number of realizations; ``.check(q, err, n)`` -> (stop, reason).
variance_with_error(samples, *, n_boot=1000, seed=0) -> (var, err)
    Unbiased variance and its bootstrap standard error.
trace_amplitudes(field, traces, *, r_in, r_out) -> ndarray (n, 3)
    h/e rms, h/2e rms and mean G of each trace through :func:`extract_oscillations`.
averaged_amplitude(field, traces, sizes, *, r_in, r_out) -> dict
    rms h/e amplitude of averages of N traces versus N (the N^-1/2 law).
flux_to_equivalent_field(flux, r_mean) -> ndarray
    Flux (Wb) -> B = flux / (pi r_mean^2) in T, so flux-tube sweeps go through the same
    field-domain extraction.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError, check_positive, check_range

__all__ = [
    "DEFAULT_QUANTILES",
    "bootstrap_quantiles",
    "exceedance_probability",
    "StoppingRule",
    "variance_with_error",
    "trace_amplitudes",
    "averaged_amplitude",
    "flux_to_equivalent_field",
    "AMPLITUDE_COLUMNS",
]

#: Default quantiles: median and the 1-sigma band of a normal distribution (16 / 84 %).
DEFAULT_QUANTILES = (0.16, 0.5, 0.84)
#: Columns of :func:`trace_amplitudes` (all in the units of the trace, e.g. e^2/h).
AMPLITUDE_COLUMNS = ("amplitude_he_rms", "amplitude_h2e_rms", "mean_conductance")
#: Quantile estimator: one order statistic X_(ceil(n q)) (Hyndman & Fan definition 1), so the
#: estimator's exact distribution is that of an order statistic.
QUANTILE_METHOD = "inverted_cdf"


def _as_samples(samples) -> np.ndarray:
    x = np.asarray(samples, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2 or x.shape[0] < 2:
        raise ParameterError("samples", f"shape {x.shape}", "must be (n >= 2,) or (n >= 2, k)")
    if not np.all(np.isfinite(x)):
        raise ParameterError("samples", "non-finite values", "must all be finite")
    return x


def _check_q(q) -> np.ndarray:
    qq = np.atleast_1d(np.asarray(q, dtype=float))
    if qq.ndim != 1 or qq.size == 0 or np.any(~((qq > 0) & (qq < 1))):
        raise ParameterError("quantiles", q, "must be numbers in (0, 1)")
    return qq


def bootstrap_quantiles(
    samples, q=DEFAULT_QUANTILES, *, n_boot: int = 1000, seed: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Quantiles of each column and their bootstrap standard errors.

    Parameters
    ----------
    samples : array, shape (n,) or (n, k)
        Realizations along axis 0 (any unit).
    q : sequence of float
        Probabilities in (0, 1).
    n_boot : int
        Bootstrap resamples (>= 50); the relative error of the error is ~1/sqrt(2 n_boot).
    seed : int
        Seed of the resampling (results are reproducible).

    Returns
    -------
    quantiles, errors : ndarray, shape (k, len(q))
        Sample quantiles (``numpy.quantile(..., method="inverted_cdf")``) and the standard
        deviation of the quantile over bootstrap resamples (Efron & Tibshirani, *An
        Introduction to the Bootstrap*, 1993, ch. 6).
    """
    x = _as_samples(samples)
    qq = _check_q(q)
    n_boot = int(check_range("n_boot", n_boot, 50, 10**6))
    n = x.shape[0]
    rng = np.random.default_rng(seed)
    est = np.quantile(x, qq, axis=0, method=QUANTILE_METHOD).T
    errs = np.empty_like(est)
    # order statistic index of each quantile (numpy's inverted_cdf: k = ceil(n q) - 1, >= 0)
    k = np.clip(np.ceil(n * qq).astype(int) - 1, 0, n - 1)
    for j in range(x.shape[1]):
        boot = np.sort(x[rng.integers(0, n, size=(n_boot, n)), j], axis=1)[:, k]
        errs[j] = boot.std(axis=0, ddof=1)
    return est, errs


def exceedance_probability(
    samples, threshold: float, *, confidence: float = 0.95
) -> tuple[float, float, float]:
    """Fraction of samples above ``threshold`` with its Wilson score interval.

    Parameters
    ----------
    samples : array, shape (n,)
    threshold : float
        E.g. a noise floor in e^2/h.
    confidence : float
        Two-sided confidence level in (0, 1).

    Returns
    -------
    p, low, high : float
        Point estimate k/n and the Wilson interval (E. B. Wilson, J. Am. Stat. Assoc. 22, 209
        (1927)), which stays inside [0, 1] and is not empty at k = 0 or k = n.
    """
    from scipy.stats import norm

    x = np.asarray(samples, dtype=float).ravel()
    if x.size == 0 or not np.all(np.isfinite(x)):
        raise ParameterError("samples", f"{x.size} values", "must be finite and not empty")
    thr = float(threshold)
    if not math.isfinite(thr):
        raise ParameterError("threshold", threshold, "must be finite")
    conf = check_range("confidence", confidence, 0.0, 1.0, inclusive=(False, False))
    n = x.size
    k = int(np.count_nonzero(x > thr))
    z = float(norm.ppf(0.5 + 0.5 * conf))
    p = k / n
    den = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return p, max(0.0, centre - half), min(1.0, centre + half)


def variance_with_error(samples, *, n_boot: int = 1000, seed: int = 0):
    """Unbiased variance of each column and its bootstrap standard error (arrays, shape (k,))."""
    x = _as_samples(samples)
    n_boot = int(check_range("n_boot", n_boot, 50, 10**6))
    rng = np.random.default_rng(seed)
    var = x.var(axis=0, ddof=1)
    idx = rng.integers(0, x.shape[0], size=(n_boot, x.shape[0]))
    boot = np.stack([x[i].var(axis=0, ddof=1) for i in idx])
    return var, boot.std(axis=0, ddof=1)


@dataclass(frozen=True)
class StoppingRule:
    """When an ensemble is large enough: every quantile error below its tolerance.

    A quantile ``Q`` with bootstrap error ``s`` is converged when ``s <= rel_tol |Q|`` or
    ``s <= abs_tol``. Realizations are added ``batch`` at a time from ``min_realizations``
    until all are converged or ``max_realizations`` is reached (then the result says so and a
    :class:`ConvergenceWarning` is issued -- never silently).

    Parameters
    ----------
    rel_tol : float
        Relative tolerance of the bootstrap error (default 0.05), in (0, 1].
    abs_tol : float
        Absolute tolerance in sample units (default 0: off).
    min_realizations, batch, max_realizations : int
        First ensemble size (>= 5), increment (>= 1) and cap.
    """

    rel_tol: float = 0.05
    abs_tol: float = 0.0
    min_realizations: int = 20
    batch: int = 20
    max_realizations: int = 400
    require_convergence: bool = True

    def __post_init__(self) -> None:
        check_range("rel_tol", self.rel_tol, 0.0, 1.0, inclusive=(False, True))
        check_positive("abs_tol", self.abs_tol, allow_zero=True)
        check_range("min_realizations", self.min_realizations, 5, 10**7)
        check_range("batch", self.batch, 1, 10**7)
        check_range("max_realizations", self.max_realizations, self.min_realizations, 10**7)

    def converged(self, quantiles, errors) -> np.ndarray:
        """Boolean array: which quantiles meet the tolerance."""
        q = np.abs(np.asarray(quantiles, dtype=float))
        e = np.asarray(errors, dtype=float)
        return (e <= self.rel_tol * q) | (e <= self.abs_tol)

    def check(self, quantiles, errors, n: int) -> tuple[bool, str]:
        """(stop, reason): ``"converged"``, ``"max_realizations"``, ``"fixed_size"`` or ``""``."""
        if not self.require_convergence:
            return (n >= self.max_realizations), (
                "fixed_size" if n >= self.max_realizations else ""
            )
        if np.all(self.converged(quantiles, errors)):
            return True, "converged"
        if n >= self.max_realizations:
            return True, "max_realizations"
        return False, ""

    def next_size(self, n: int) -> int:
        """Ensemble size after the next batch."""
        if n < self.min_realizations:
            return int(self.min_realizations)
        return int(min(n + self.batch, self.max_realizations))

    @classmethod
    def fixed(cls, n: int) -> StoppingRule:
        """A fixed ensemble of ``n`` realizations (errors reported, convergence not required)."""
        return cls(min_realizations=n, batch=n, max_realizations=n, require_convergence=False)


class ConvergenceWarning(RuntimeWarning):
    """The maximum number of realizations was reached before the quantiles converged."""


def flux_to_equivalent_field(flux, r_mean: float) -> np.ndarray:
    """Flux (Wb) through the hole -> equivalent uniform field B = flux/(pi r_mean^2) in T."""
    r = check_positive("r_mean", r_mean, "m")
    return np.asarray(flux, dtype=float) / (math.pi * r * r)


def trace_amplitudes(
    field,
    traces,
    *,
    r_in: float,
    r_out: float,
    background: str = "polynomial",
    notes: list | None = None,
) -> np.ndarray:
    """h/e rms, h/2e rms and mean of every trace (one per row), via extract_oscillations.

    Parameters
    ----------
    field : array, shape (m,)
        Field in T (for flux-tube sweeps use :func:`flux_to_equivalent_field`).
    traces : array, shape (n, m)
        Conductance in e^2/h (or any signal).
    r_in, r_out : float
        Inner and outer radius in m (the h/e and h/2e bands, :func:`ringkit.analysis.ab_bands`).
    background : str
        Background removal of :func:`extract_oscillations` (``"none"`` for strictly periodic
        flux-tube sweeps over whole periods).
    notes : list, optional
        Warnings raised by the extraction are recorded here (message with the row index)
        instead of being emitted once per row.

    Returns
    -------
    ndarray, shape (n, 3)
        Columns :data:`AMPLITUDE_COLUMNS` (``amplitude_*_rms`` as defined in
        :mod:`ringkit.analysis.extract`: band rms, a cosine of amplitude A gives A/sqrt 2).
    """
    from ringkit.analysis.extract import extract_oscillations

    g = np.atleast_2d(np.asarray(traces, dtype=float))
    out = np.empty((g.shape[0], 3))
    for i, row in enumerate(g):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            res = extract_oscillations(field, row, r_in=r_in, r_out=r_out, background=background)
        if notes is not None:
            notes.extend(f"row {i}: {type(w.message).__name__}: {w.message}" for w in caught)
        out[i] = res.amplitude_he_rms, res.amplitude_h2e_rms, float(np.mean(row))
    return out


def averaged_amplitude(
    field, traces, sizes, *, r_in: float, r_out: float, background: str = "polynomial"
) -> dict:
    """rms h/e amplitude of the average of N traces, for each N in ``sizes``.

    The traces are cut into ``n // N`` disjoint groups of N (in order); each group's average
    trace goes through :func:`trace_amplitudes`. For an ensemble of rings whose h/e term has a
    random phase the rms falls as N^(-1/2) (Umbach et al., Phys. Rev. B 30, 4048 (1984)).

    Returns
    -------
    dict
        ``sizes``, ``rms_he`` (e^2/h), ``rms_he_err`` (delta method: rms * sd(a^2)/(2 mean(a^2)
        sqrt(groups))), ``n_groups``, ``slope`` and ``slope_err`` of log rms versus log N
        (weighted least squares).
    """
    g = np.asarray(traces, dtype=float)
    n = g.shape[0]
    sizes = np.asarray(sizes, dtype=int)
    if sizes.ndim != 1 or sizes.size < 2 or np.any(sizes < 1) or np.any(n // sizes < 2):
        raise ParameterError("sizes", sizes.tolist(), f"need >= 2 sizes, each <= {n // 2}")
    rms, err, groups = [], [], []
    for size in sizes:
        m = n // size
        avg = g[: m * size].reshape(m, size, -1).mean(axis=1)
        a2 = trace_amplitudes(field, avg, r_in=r_in, r_out=r_out, background=background, notes=[])
        a2 = a2[:, 0] ** 2
        r = math.sqrt(float(a2.mean()))
        rms.append(r)
        err.append(r * float(a2.std(ddof=1)) / (2 * float(a2.mean()) * math.sqrt(m)))
        groups.append(m)
    rms_a, err_a = np.array(rms), np.array(err)
    w = (rms_a / np.maximum(err_a, 1e-300)) ** 2  # 1/var of log rms
    x = np.log(sizes)
    cov = np.linalg.inv(np.array([[w.sum(), (w * x).sum()], [(w * x).sum(), (w * x * x).sum()]]))
    coef = cov @ np.array([(w * np.log(rms_a)).sum(), (w * x * np.log(rms_a)).sum()])
    return {
        "sizes": sizes,
        "rms_he": rms_a,
        "rms_he_err": err_a,
        "n_groups": np.array(groups),
        "slope": float(coef[1]),
        "slope_err": float(math.sqrt(cov[1, 1])),
    }
