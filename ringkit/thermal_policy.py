"""The one thermal-averaging policy of ringkit: which energies, how many, and how accurate.

Every thermal average in ringkit (the transport engine, studies, the explorer panels and the
single-channel preview of :mod:`ringkit.analysis.network1d`) is

    <X>_T = integral X(E) (-df/dE) dE,      -df/dE = 1 / (4 k_B T cosh^2((E - mu) / 2 k_B T)),

computed here. The module needs numpy only (no kwant), so the analysis layer can use it.

Methods
-------
``"adaptive"`` (default)
    Globally adaptive Gauss-Kronrod (7/15-point) subdivision of the energy window, on the
    vector of all components (e.g. G at every field point, plus linear band projections), in
    rounds: each round bisects the intervals of largest error (in decreasing order, until the
    error left in the others is at most 0.8 of the goal) until the estimated error of *every*
    component is below ``tol``. The energies of a round are requested in one call of a
    ``batched`` function, so a caller can evaluate them in parallel
    (:mod:`ringkit.transport.energy_pool`). Narrow resonances show up as large Kronrod-Gauss
    differences and are bisected until resolved. See ``docs/thermal.md`` ("Adaptive rule").
``"grid"``
    The dense reference: uniform trapezoidal grid of spacing ``spacing`` (default ``k_B T/4``),
    weights from ``-df/dE`` renormalised to 1; error estimate = difference to the same rule
    on every second point (the classical halving estimate).

Tails: the window is ``|E - mu| <= L`` with ``L = k_B T ln(20 bound / tol)``; the kernel mass
outside is ``2/(1 + exp(L/k_B T)) < tol/(10 bound)``. The average is renormalised to the mass
inside the window, so with ``|X| <= bound`` the tails change the result by less than
``tol/10`` (and not at all for X constant across the tails); this bound is added to the error
estimate.

Public API
----------
DEFAULT_TOL, THERMAL_METHODS, ThermalToleranceWarning, EnergyAverage, fermi_window,
thermal_window, energy_average, budget_grid, check_tol

References
----------
A. S. Kronrod, Nodes and Weights of Quadrature Formulas (Consultants Bureau, 1965);
R. Piessens, E. de Doncker-Kapenga, C. W. Ueberhuber, D. K. Kahaner, QUADPACK (Springer, 1983)
(the 15-point Kronrod extension of the 7-point Gauss rule and the globally adaptive strategy,
as in ``scipy.integrate.quad_vec``).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.gauss_kronrod import kronrod_rule

__all__ = [
    "DEFAULT_TOL",
    "THERMAL_METHODS",
    "ThermalToleranceWarning",
    "EnergyAverage",
    "fermi_window",
    "thermal_window",
    "sampled_half_width",
    "energy_average",
    "budget_grid",
    "check_tol",
]

DEFAULT_TOL = 1e-4
"""Default absolute tolerance of a thermal average (units of the averaged quantity, e^2/h)."""
THERMAL_METHODS = ("adaptive", "grid")
TOL_RANGE = (1e-10, 1e-1)

# Gauss-Kronrod 7/15 rule on [-1, 1] (ringkit.gauss_kronrod; equals the QUADPACK table of
# Piessens et al. 1983 to 1e-15, tested). Higher orders were measured and rejected
# (docs/thermal.md, "Rejected").
_GAUSS_N = 7
_XK, _WK, _WG = kronrod_rule(_GAUSS_N)
_BATCH_FRACTION = 0.8
# at most this many bisections per round (None: no limit). 1 reproduces the former strict
# one-interval-at-a-time rule of quad_vec, kept for the benchmark's comparison
_MAX_PER_ROUND: int | None = None


class ThermalToleranceWarning(RuntimeWarning):
    """The thermal average did not reach ``tol`` within the energy budget (error stored)."""


@dataclass(frozen=True)
class EnergyAverage:
    """A thermal average with its error estimate and the energies that produced it.

    Attributes
    ----------
    value : ndarray
        ``integral X(E)(-df/dE) dE`` (shape of one evaluation of X).
    errors : ndarray
        Estimated absolute error per component (same shape as ``value``), tails included.
    extra : ndarray or None
        Averages of the linear functionals given to :func:`energy_average` (e.g. band
        projections); ``extra_errors`` their error estimates.
    extra_errors : ndarray or None
    energies : ndarray
        Every energy at which X was evaluated (ascending; the cost is their number).
    weights : ndarray
        Weights with ``value == sum_k weights[k] X(energies[k])`` (zero for energies of
        superseded coarse rules).
    mu, kt : float
        Chemical potential and k_B T (units of the energies).
    method : str
    tol : float
    converged : bool
        Whether ``error <= tol`` was reached.
    """

    value: np.ndarray
    errors: np.ndarray
    extra: np.ndarray | None
    extra_errors: np.ndarray | None
    energies: np.ndarray
    weights: np.ndarray
    mu: float
    kt: float
    method: str
    tol: float
    converged: bool

    @property
    def n_energies(self) -> int:
        """Number of energies evaluated (one factorization each in the lattice engine)."""
        return int(self.energies.size)

    @property
    def error(self) -> float:
        """Largest error estimate over all components and functionals."""
        e = float(np.max(self.errors)) if self.errors.size else 0.0
        if self.extra_errors is not None and self.extra_errors.size:
            e = max(e, float(np.max(self.extra_errors)))
        return e


def fermi_window(energy, mu: float, kt: float) -> np.ndarray:
    """``-df/dE = 1 / (4 kT cosh^2((E - mu) / 2kT))`` (same units as ``energy``)."""
    x = (np.asarray(energy, dtype=float) - mu) / (2.0 * kt)
    return 1.0 / (4.0 * kt * np.cosh(np.clip(x, -350, 350)) ** 2)


def check_tol(tol: float) -> float:
    """Validate an absolute tolerance (``ParameterError`` naming ``tol``)."""
    try:
        val = float(tol)
    except (TypeError, ValueError):
        raise ParameterError("tol", tol, f"must be a number in {TOL_RANGE}") from None
    if not (TOL_RANGE[0] <= val <= TOL_RANGE[1]):
        raise ParameterError("tol", tol, f"must lie in [{TOL_RANGE[0]:g}, {TOL_RANGE[1]:g}]")
    return val


def thermal_window(kt: float, tol: float = DEFAULT_TOL, bound: float = 1.0) -> float:
    """Half-width ``L = k_B T ln(20 bound / tol)`` of the energy window (units of ``kt``).

    The kernel mass outside ``|E - mu| > L`` is ``2/(1 + exp(L/kT)) < tol/(10 bound)``.
    """
    return float(kt) * math.log(20.0 * max(float(bound), 1e-300) / check_tol(tol))


def _as_rows(vals: np.ndarray, n: int) -> np.ndarray:
    vals = np.asarray(vals, dtype=float)
    if vals.shape[0] != n:
        raise ParameterError("func", f"shape {vals.shape}", f"must return {n} rows")
    return vals.reshape(n, -1)


class _Evaluator:
    """Caches X(E) and applies the linear functionals; counts distinct energies."""

    def __init__(self, func, batched: bool, functionals, max_energies: int):
        self.func, self.batched, self.functionals = func, batched, functionals
        self.cache: dict[float, np.ndarray] = {}
        self.max_energies = max_energies
        self.shape: tuple[int, ...] | None = None
        self.n_main = 0

    def __call__(self, energies: np.ndarray) -> np.ndarray:
        new = [float(e) for e in energies if float(e) not in self.cache]
        if new:
            if self.batched:
                rows = np.asarray(self.func(np.asarray(new)), dtype=float)
                rows = rows.reshape(len(new), *rows.shape[1:])
            else:
                rows = np.stack([np.asarray(self.func(e), dtype=float) for e in new])
            if self.shape is None:
                self.shape = rows.shape[1:]
                self.n_main = int(np.prod(self.shape, dtype=int))
            flat = rows.reshape(len(new), -1)
            if not np.all(np.isfinite(flat)):
                raise ParameterError("func", "non-finite value", "must return finite values")
            if self.functionals is not None:
                ext = np.asarray(self.functionals(rows), dtype=float).reshape(len(new), -1)
                flat = np.concatenate([flat, ext], axis=1)
            for e, row in zip(new, flat, strict=True):
                self.cache[e] = row
        return np.stack([self.cache[float(e)] for e in energies])


def _gk_round(ev: _Evaluator, intervals, weight) -> list:
    """Kronrod value, |Kronrod - Gauss| per component and the nodes/weights of each interval,
    with the energies of all intervals evaluated in one call (one round)."""
    nodes = [0.5 * (a + b) + 0.5 * (b - a) * _XK for a, b in intervals]
    rows = ev(np.concatenate(nodes))
    out = []
    for j, ((a, b), e) in enumerate(zip(intervals, nodes, strict=True)):
        wts = 0.5 * (b - a) * weight(e)
        f = rows[j * _XK.size : (j + 1) * _XK.size] * wts[:, None]
        k = _WK @ f
        out.append((a, b, k, np.abs(k - _WG @ f), (e, _WK * wts)))
    return out


def _select(parts: list, total: np.ndarray, target: float, room: int) -> list[int]:
    """Intervals to bisect in this round: by decreasing max-norm error, until the error left in
    the others is <= ``_BATCH_FRACTION * target`` (at most ``room`` intervals, at least 1)."""
    order = sorted(range(len(parts)), key=lambda i: -float(np.max(parts[i][3])))
    chosen, rest = [], total.copy()
    for i in order[: max(room, 1)]:
        chosen.append(i)
        rest = rest - parts[i][3]
        if float(np.max(rest)) <= _BATCH_FRACTION * target:
            break
    return chosen


def _adaptive(ev, mu, kt, tol, lo, hi, n_init, max_energies):
    weight = lambda e: fermi_window(e, mu, kt)  # noqa: E731
    edges = np.linspace(lo, hi, n_init + 1)
    parts = _gk_round(ev, list(zip(edges[:-1], edges[1:], strict=True)), weight)
    target = 0.9 * tol
    per_child = 2 * _XK.size
    while True:
        total = np.sum([p[3] for p in parts], axis=0)
        room = (max_energies - len(ev.cache)) // per_child
        if _MAX_PER_ROUND is not None:
            room = min(room, _MAX_PER_ROUND)
        if float(np.max(total)) <= target or room < 1:
            break
        chosen = _select(parts, total, target, room)
        halves = []
        for i in chosen:
            a, b = parts[i][0], parts[i][1]
            m = 0.5 * (a + b)
            halves += [(a, m), (m, b)]
        keep = [p for i, p in enumerate(parts) if i not in set(chosen)]
        parts = keep + _gk_round(ev, halves, weight)
    value = np.sum([p[2] for p in parts], axis=0)
    total_err = np.sum([p[3] for p in parts], axis=0)
    wmap: dict[float, float] = dict.fromkeys(ev.cache, 0.0)
    for _, _, _, _, (nodes, wts) in parts:
        for e, w in zip(nodes, wts, strict=True):
            wmap[float(e)] += float(w)
    return value, total_err, wmap


def _grid_steps(half: float, spacing: float) -> int:
    """Steps of the grid rule on each side: ``half`` rounded up to an even number (so that
    every second point is a grid of spacing 2h centred on mu)."""
    m = max(1, int(math.ceil(half / spacing)))
    return m + m % 2


def sampled_half_width(
    kt: float, tol: float, bound: float = 1.0, method: str = "adaptive", spacing=None
) -> float:
    """Half-width of the energies :func:`energy_average` can ask for (units of ``kt``).

    :func:`thermal_window`; the grid rule rounds it up to an even number of steps of
    ``spacing`` (default ``kt/4``). A relative margin of 1e-9 covers rounding. What an engine
    that serves a whole window at once must cover.
    """
    half = thermal_window(kt, tol, bound)
    if method == "grid":
        h = kt / 4.0 if spacing is None else check_positive("spacing", spacing)
        half = _grid_steps(half, h) * h
    return half * (1.0 + 1e-9)


def _grid(ev, mu, kt, lo, hi, spacing):
    m = _grid_steps(hi - mu, spacing)
    energies = mu + spacing * np.arange(-m, m + 1)
    vals = ev(energies)
    w = fermi_window(energies, mu, kt)
    w /= w.sum()
    w2 = fermi_window(energies[::2], mu, kt)
    w2 /= w2.sum()
    value = w @ vals
    err = np.abs(value - w2 @ vals[::2])
    return value, err, {float(e): float(x) for e, x in zip(energies, w, strict=True)}


def energy_average(
    func: Callable,
    mu: float,
    kt: float,
    *,
    tol: float = DEFAULT_TOL,
    method: str = "adaptive",
    bound: float = 1.0,
    spacing: float | None = None,
    functionals: Callable[[np.ndarray], np.ndarray] | None = None,
    batched: bool = False,
    max_energies: int = 2000,
) -> EnergyAverage:
    """Thermal average ``integral X(E)(-df/dE) dE`` with an error estimate below ``tol``.

    Parameters
    ----------
    func : callable
        ``func(E) -> array`` (or, with ``batched=True``, ``func(energies) -> array`` with one
        row per energy). Zeros are fine (e.g. no open channel); values must be finite.
    mu, kt : float
        Chemical potential and ``k_B T`` (same energy unit as ``func``'s argument). ``kt = 0``
        returns ``func(mu)`` with zero error.
    tol : float
        Absolute error goal for every component (and functional), in [1e-10, 0.1].
    method : {"adaptive", "grid"}
        See the module docstring.
    bound : float
        Upper bound of ``|X|`` (e.g. ``2 N_modes`` for G in e^2/h); sets the window half-width
        :func:`thermal_window` so that the tails stay below ``tol/10``.
    spacing : float, optional
        Grid step for ``method="grid"`` (default ``kt/4``).
    functionals : callable, optional
        Linear map ``rows -> rows'`` applied to the values at each energy (e.g. h/e and h/2e band
        projections of G over the field axis); their averages and errors are controlled too.
    batched : bool
        Whether ``func`` takes an array of energies.
    max_energies : int
        Budget. If the adaptive rule needs more, it stops, warns once
        (:class:`ThermalToleranceWarning`, with the achieved error) and sets ``converged=False``.

    Returns
    -------
    EnergyAverage
    """
    tol = check_tol(tol)
    check_choice("method", method, THERMAL_METHODS)
    kt = check_positive("kt", kt, allow_zero=True)
    bound = check_positive("bound", bound)
    max_energies = int(max_energies)
    if max_energies < 31:
        raise ParameterError("max_energies", max_energies, "must be >= 31")
    ev = _Evaluator(func, batched, functionals, max_energies)
    mu = float(mu)
    if kt == 0.0:
        row = ev(np.array([mu]))[0]
        return _result(ev, row, np.zeros_like(row), {mu: 1.0}, mu, 0.0, method, tol, True)
    half = thermal_window(kt, tol, bound)
    tail = 2.0 / (1.0 + math.exp(half / kt)) * bound
    if method == "grid":
        h = kt / 4.0 if spacing is None else check_positive("spacing", spacing)
        value, err, wmap = _grid(ev, mu, kt, mu - half, mu + half, h)
    else:
        # initial intervals of width ~ 2 k_B T (about the kernel's full width at half maximum)
        n_init = max(1, min(int(round(half / kt)), max_energies // 15))
        value, err, wmap = _adaptive(ev, mu, kt, tol, mu - half, mu + half, n_init, max_energies)
        # renormalise the weights to sum 1 (as the grid does; the exact mass inside the window
        # is tanh(L/2kT)): exact for constant X, and the tail error stays below bound * tail
        scale = 1.0 / math.fsum(wmap.values())
        value, err = value * scale, err * scale
        wmap = {e: w * scale for e, w in wmap.items()}
    err = err + tail
    converged = bool(float(np.max(err)) <= tol)
    res = _result(ev, value, err, wmap, mu, kt, method, tol, converged)
    if not converged:
        warnings.warn(
            f"thermal average not converged: estimated error {res.error:.3g} > tol = {tol:g} "
            f"after {res.n_energies} energies (max_energies = {max_energies}); the error "
            "estimate is stored with the result",
            ThermalToleranceWarning,
            stacklevel=3,
        )
    return res


def _result(ev, value, err, wmap, mu, kt, method, tol, converged) -> EnergyAverage:
    n = ev.n_main
    energies = np.array(sorted(ev.cache))
    weights = np.array([wmap.get(float(e), 0.0) for e in energies])
    shape = ev.shape or ()
    value, err = np.asarray(value, float), np.asarray(err, float)
    ext = ext_err = None
    if value.size > n:
        ext, ext_err = value[n:], err[n:]
    return EnergyAverage(
        value=value[:n].reshape(shape),
        errors=err[:n].reshape(shape),
        extra=ext,
        extra_errors=ext_err,
        energies=energies,
        weights=weights,
        mu=mu,
        kt=kt,
        method=method,
        tol=tol,
        converged=converged,
    )


def budget_grid(
    mu: float, kt: float, max_energies: int, *, tol: float = DEFAULT_TOL, bound: float = 1.0
) -> tuple[np.ndarray, np.ndarray]:
    """Energies and weights of a uniform trapezoidal rule with a fixed number of energies.

    For previews with a fixed cost only (no error control): ``n`` = the largest odd number
    <= ``max_energies`` of equally spaced energies on the window of :func:`thermal_window`
    (centred on ``mu``), weights ``-df/dE`` renormalised to 1; ``mu`` alone if ``n < 3``.
    """
    kt = check_positive("kt", kt, allow_zero=True)
    n = int(max_energies)
    if n < 1:
        raise ParameterError("max_energies", max_energies, "must be >= 1")
    if kt == 0.0 or n < 3:
        return np.array([float(mu)]), np.array([1.0])
    m = (n - 1) // 2
    x = np.linspace(-1.0, 1.0, 2 * m + 1) * thermal_window(kt, tol, bound)
    w = fermi_window(x, 0.0, kt)
    return float(mu) + x, w / w.sum()
