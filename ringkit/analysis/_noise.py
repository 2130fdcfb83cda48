"""Noise floor of a periodogram and the noise-driven error of a band centroid (numpy only).

Derivations: ``docs/physics.md``, sections "Periodogram statistics" and "Centroid
uncertainty".

* Noise floor. For Gaussian noise each periodogram bin away from 0 and Nyquist is the squared
  modulus of a circular complex Gaussian variable: ``P = F E`` with ``E`` exponentially
  distributed (chi-square with 2 degrees of freedom divided by 2; any window or zero padding
  only correlates neighbouring bins, the distribution of one bin is unchanged). Its median is
  ``ln 2`` times its mean ``F`` (e.g. Press et al., Numerical Recipes, chapter "Spectral
  analysis", the periodogram section; from memory), so ``F = median / ln 2``. The median is
  used because it is robust against the few bins that hold signal.
* Centroid. ``f_c = sum_k f_k (P_k - F) / sum_k (P_k - F)`` over the band. For a signal with
  complex band amplitudes ``s_k`` plus Gaussian noise with bin correlation
  ``rho_jk = E[n_j n_k^*] / F`` (fixed by the window and the sample positions), the exact
  covariance of two bins is ``Cov(P_j, P_k) = F^2 |rho_jk|^2 + 2 F Re(s_j^* s_k rho_jk)``.
  Replacing ``s`` by the observed amplitudes ``X`` (which include the noise) gives the
  unbiased estimate ``2 F Re(X_j^* X_k rho_jk) - F^2 |rho_jk|^2``; the first-order
  (delta-method) error of the ratio is then ``var f_c = g^T Cov g`` with
  ``g_k = (f_k - f_c) / sum (P - F)``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["MEDIAN_TO_MEAN", "noise_floor", "centroid_error"]

MEDIAN_TO_MEAN: float = 1.0 / np.log(2.0)
"""Mean over median of an exponential (chi-square, 2 degrees of freedom) variable."""


def noise_floor(power: np.ndarray, mask: np.ndarray, min_bins: int = 8) -> float:
    """Mean noise power per bin, ``median(power[mask]) / ln 2`` (0 with < ``min_bins`` bins)."""
    sel = np.asarray(power)[np.asarray(mask, dtype=bool)]
    if sel.size < min_bins:
        return 0.0
    return float(np.median(sel) * MEDIAN_TO_MEAN)


def _dft(f0: float, df: float, k: int, field: np.ndarray, values: np.ndarray) -> np.ndarray:
    """``sum_t values_t exp(-2 pi i (f0 + j df) B_t)`` for j = 0..k-1 (phase recurrence)."""
    out = np.empty(k, dtype=complex)
    step = np.exp(-2j * np.pi * df * field)
    for j in range(k):
        if j % 64 == 0:  # re-anchor to keep the recurrence at machine precision
            ph = values * np.exp(-2j * np.pi * (f0 + j * df) * field)
        out[j] = ph.sum()
        ph = ph * step
    return out


def centroid_error(
    field: np.ndarray,
    residual: np.ndarray,
    weights: np.ndarray,
    frequency: np.ndarray,
    power: np.ndarray,
    floor: float,
) -> float:
    """1-sigma noise error (1/T) of the noise-subtracted power centroid of a band.

    Parameters
    ----------
    field : ndarray
        Sample positions in T of the analysed (background-free) trace.
    residual : ndarray
        Analysed signal at those positions.
    weights : ndarray
        Window value at each sample (the same window as the spectrum).
    frequency : ndarray
        Equally spaced band frequencies in 1/T (the spectrum's bins in the band).
    power : ndarray
        Spectrum power of those bins (any normalisation; the amplitudes are matched to it).
    floor : float
        Mean noise power per bin in the same normalisation (:func:`noise_floor`).

    Returns
    -------
    float
        Standard deviation of the centroid in 1/T (NaN when the band holds no power above
        the floor).
    """
    f = np.asarray(frequency, dtype=float)
    p = np.asarray(power, dtype=float)
    excess = p - floor
    total = float(np.sum(excess))
    if f.size == 0 or not total > 0:
        return float("nan")
    if floor <= 0:
        return 0.0
    b = np.asarray(field, dtype=float)
    w = np.asarray(weights, dtype=float)
    y = np.asarray(residual, dtype=float)
    x = w * (y - np.sum(w * y) / np.sum(w))
    df = float(f[1] - f[0]) if f.size > 1 else 0.0
    amp = _dft(float(f[0]), df, f.size, b, x)
    norm = float(np.sum(p) / np.sum(np.abs(amp) ** 2))
    s = amp * np.sqrt(norm)  # complex band amplitudes in power units: |s_k|^2 ~ P_k
    # bin correlation rho(m) = sum w^2 exp(-2 pi i m df B) / sum w^2, m = 0..K-1
    rho_m = _dft(0.0, df, f.size, b, w**2) / np.sum(w**2)
    idx = np.arange(f.size)
    lag = idx[:, None] - idx[None, :]
    rho = np.where(lag >= 0, rho_m[np.abs(lag)], np.conj(rho_m[np.abs(lag)]))
    fc = float(np.sum(f * excess) / total)
    g = (f - fc) / total
    noise_noise = floor**2 * float(g @ (np.abs(rho) ** 2) @ g)
    cross = 2.0 * floor * float(g @ np.real(np.conj(s)[:, None] * s[None, :] * rho) @ g)
    var = max(cross - noise_noise, noise_noise)
    return float(np.sqrt(var))
