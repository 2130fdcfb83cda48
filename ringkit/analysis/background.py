"""Removal of the smooth magnetoresistance background under the oscillations.

Public API
----------
remove_background(field, signal, *, method="polynomial"|"savgol"|"moving_average", ...)
    -> :class:`BackgroundResult` (background, residual, valid mask, residual_gain(f)).

Effect of each method on oscillation amplitudes
-----------------------------------------------
All three methods are linear in the signal, so their effect on an oscillation at frequency f
is a gain ``g(f)`` (amplitude kept in the residual / amplitude in the input), available
exactly for the actual grid as :meth:`BackgroundResult.residual_gain` (the tests check it
against closed forms):

* ``"moving_average"`` (boxcar of width ``w = periods * period``): background transfer
  ``sin(pi f w)/(pi f w)``, so ``g(f) = 1 - sinc(f w)``. It is exactly 1 at ``f = n/w``:
  a boxcar of exactly one h/e period leaves the h/e line and all its harmonics (h/2e, ...)
  intact (docs/physics.md §12.3). Between those frequencies it is not 1: ``g = 0.89`` at
  ``0.9/w`` and ``1.09`` at ``1.1/w``, i.e. +-10 % across a wide h/e band, and a
  low-frequency part is removed (``g = 0.36`` at ``0.5/w``). The first and last half
  window are undefined (``valid`` is False there). Best for thin rings with a known period.
* ``"savgol"`` (Savitzky-Golay, cubic by default, window 10 periods by default): the
  transfer ripples. Measured on a 100-period trace (edges included), polyorder 3:
  window 10 periods ``g = 1.009`` at ``1/period``, ``0.987``-``0.990`` at 0.9 and 1.1 times
  it, ``1.005`` at ``2/period``; window 5 periods ``g = 0.963`` at ``1/period`` and
  ``0.92``-``1.09`` across +-10 %; window 3 periods ``g = 0.906``.
* ``"polynomial"`` (least-squares polynomial over the whole range, degree 3 by default):
  at ``f = 1/period``, ``g = 0.990`` with 10 periods in the range, ``0.9975`` with 20 and
  ``0.9994`` with 40 (degree 7: 0.970, 0.991, 0.998). It cannot follow backgrounds with
  structure on the scale of a few periods.

A method with ``|g - 1| > 2 %`` at the h/e frequency is flagged by
:func:`ringkit.analysis.extract_oscillations`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from numpy.polynomial import Polynomial
from scipy.interpolate import CubicSpline
from scipy.signal import savgol_filter

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.analysis._common import is_uniform, validate_trace

__all__ = ["BackgroundResult", "remove_background"]


@dataclass(frozen=True)
class BackgroundResult:
    """Background estimate of a trace and the residual oscillations.

    Attributes
    ----------
    field : ndarray
        Field in T (increasing).
    signal : ndarray
        Input signal (e.g. e^2/h).
    background : ndarray
        Smooth background; NaN where undefined (moving-average edges).
    residual : ndarray
        ``signal - background``; NaN where undefined.
    valid : ndarray of bool
        Points where the background is defined.
    method : str
        Method name.
    parameters : dict
        Method parameters actually used (window in T, samples, degree, ...).
    """

    field: np.ndarray
    signal: np.ndarray
    background: np.ndarray
    residual: np.ndarray
    valid: np.ndarray
    method: str
    parameters: dict
    _operator: Callable[[np.ndarray], np.ndarray] = field(repr=False, compare=False)

    @property
    def n_valid(self) -> int:
        """Number of points where the residual is defined."""
        return int(np.count_nonzero(self.valid))

    def residual_gain(self, frequency: float | np.ndarray) -> np.ndarray | float:
        """Fraction of an oscillation at ``frequency`` (1/T) kept in the residual.

        Computed by applying the same (linear) background operator to ``cos(2 pi f B)`` and
        ``sin(2 pi f B)`` on this field grid and projecting the residual back onto them
        (mean of the two in-phase gains). 1 means untouched.
        """
        f = np.atleast_1d(np.asarray(frequency, dtype=float))
        b = self.field
        v = self.valid
        out = np.empty(f.size)
        for i, fi in enumerate(f):
            gains = []
            for probe in (np.cos(2 * np.pi * fi * b), np.sin(2 * np.pi * fi * b)):
                res = probe - self._operator(probe)
                norm = float(np.dot(probe[v], probe[v]))
                gains.append(float(np.dot(res[v], probe[v])) / norm if norm > 0 else np.nan)
            out[i] = np.mean(gains)
        return out if np.ndim(frequency) else float(out[0])


def _uniform_grid(
    b: np.ndarray, step: float
) -> tuple[np.ndarray, Callable[[np.ndarray], np.ndarray]]:
    """A uniform grid with the given step from b[0], and a resampler onto it."""
    n = int(np.floor((b[-1] - b[0]) / step * (1 + 1e-12))) + 1
    grid = b[0] + step * np.arange(n)
    if n == b.size and np.allclose(grid, b, rtol=0, atol=1e-9 * step):
        return b, lambda y: y
    return grid, lambda y: CubicSpline(b, y)(grid)


def remove_background(
    field: np.ndarray,
    signal: np.ndarray,
    *,
    method: Literal["polynomial", "savgol", "moving_average"] = "polynomial",
    degree: int = 3,
    period: float | None = None,
    periods: int = 1,
    window: float | None = None,
    polyorder: int = 3,
) -> BackgroundResult:
    """Estimate and subtract a smooth background.

    Parameters
    ----------
    field, signal : array_like
        Field in T (strictly monotonic; uneven steps allowed) and signal (e.g. e^2/h).
    method : {"polynomial", "savgol", "moving_average"}
        See the module docstring for the effect of each on amplitudes.
    degree : int
        Polynomial degree (``"polynomial"``).
    period : float, optional
        Expected h/e period in T. Required for ``"moving_average"`` (window =
        ``periods * period``); sets the default Savitzky-Golay window (10 periods).
    periods : int
        Moving-average window in periods (an integer keeps h/e and its harmonics intact).
    window : float, optional
        Savitzky-Golay window in T (overrides ``10 * period``).
    polyorder : int
        Savitzky-Golay polynomial order.

    Returns
    -------
    BackgroundResult

    Notes
    -----
    The moving average is a trapezoid-weighted boxcar of exactly the window width on a
    uniform grid with an integer number of steps per window (the data grid itself when it
    is uniform with such a step, otherwise a cubic-spline resampling at least as fine as the
    median data step); the background is interpolated back onto the data points. With an
    odd number of steps the kernel is additionally averaged over two neighbouring samples,
    which keeps its zeros at ``n/window``.
    """
    b, s = validate_trace(field, signal)
    check_choice("method", method, ("polynomial", "savgol", "moving_average"))
    params: dict[str, object] = {}
    median_step = float(np.median(np.diff(b)))
    frange = float(b[-1] - b[0])

    if method == "polynomial":
        if int(degree) != degree or not 0 <= degree < b.size - 1:
            raise ParameterError("degree", degree, f"must be an integer in [0, {b.size - 2}]")
        degree = int(degree)
        params["degree"] = degree

        def operator(y: np.ndarray) -> np.ndarray:
            return Polynomial.fit(b, y, degree)(b)

        valid = np.ones(b.size, dtype=bool)

    elif method == "savgol":
        if window is None:
            if period is None:
                raise ParameterError(
                    "window", None, "give window (T) or period (T) for method='savgol'", "T"
                )
            window = 10.0 * check_positive("period", period, "T")
        window = check_positive("window", window, "T")
        if int(polyorder) != polyorder or polyorder < 0:
            raise ParameterError("polyorder", polyorder, "must be an integer >= 0")
        grid, to_grid = _uniform_grid(b, median_step)
        step = median_step if grid is not b else float((b[-1] - b[0]) / (b.size - 1))
        wl = int(round(window / step)) + 1  # window span (wl - 1) steps
        wl += 1 - wl % 2
        if not polyorder + 2 <= wl <= grid.size:
            raise ParameterError(
                "window",
                window,
                f"must span between {polyorder + 2} samples and the field range {frange:g} T",
                "T",
            )
        params.update(window=(wl - 1) * step, window_length=wl, polyorder=int(polyorder))

        def operator(y: np.ndarray) -> np.ndarray:
            bg = savgol_filter(to_grid(y), wl, int(polyorder), mode="interp")
            return bg if grid is b else CubicSpline(grid, bg)(b)

        valid = np.ones(b.size, dtype=bool)

    else:
        if period is None:
            raise ParameterError(
                "period", None, "give the expected h/e period (T) for 'moving_average'", "T"
            )
        width = check_positive("period", period, "T") * int(periods)
        if int(periods) != periods or periods < 1:
            raise ParameterError("periods", periods, "must be an integer >= 1")
        if width >= frange:
            raise ParameterError(
                "period",
                period,
                f"window {width:g} T must be shorter than the field range {frange:g} T",
                "T",
            )
        if is_uniform(b) and abs(width / median_step - round(width / median_step)) < 1e-6:
            m = int(round(width / median_step))
            grid, to_grid = b, (lambda y: y)
        else:
            m = max(int(np.ceil(width / median_step - 1e-9)), 4)
            grid, to_grid = _uniform_grid(b, width / m)
        kernel = np.full(m + 1, 1.0 / m)
        kernel[[0, -1]] = 0.5 / m
        if m % 2:
            kernel = np.convolve(kernel, [0.5, 0.5])
        half = (kernel.size - 1) // 2
        if grid.size <= kernel.size:
            raise ParameterError("period", period, "leaves no point for the moving average", "T")
        lo, hi = grid[half], grid[grid.size - 1 - half]
        valid = (b >= lo - 1e-12 * frange) & (b <= hi + 1e-12 * frange)
        params.update(window=width, samples_per_window=m, kernel_taps=kernel.size)

        def operator(y: np.ndarray) -> np.ndarray:
            bg_grid = np.convolve(to_grid(y), kernel, mode="valid")
            out = np.full(b.size, np.nan)
            if grid is b:
                out[half : b.size - half] = bg_grid
            else:
                inner = grid[half : grid.size - half]
                out[valid] = CubicSpline(inner, bg_grid)(np.clip(b[valid], inner[0], inner[-1]))
            return out

    bg = operator(s)
    bg[~valid] = np.nan
    return BackgroundResult(
        field=b,
        signal=s,
        background=bg,
        residual=s - bg,
        valid=valid,
        method=method,
        parameters=params,
        _operator=operator,
    )
