"""Finite-temperature conductance: G(T, mu) = integral of G(E) (-df/dE) dE.

The integral runs on a uniform energy grid centred on mu (trapezoidal rule). Its spacing is
the smaller of ``k_B T`` and ``correlation_energy / points_per_correlation`` (the scale on
which G(E) changes: ballistic ``hbar v_F / L``, diffusive Thouless energy ``hbar D / L^2``), and
its half-width ``k_B T ln(2 / tail_tol)`` leaves out a kernel mass of ``tail_tol``. The
trapezoidal rule is spectrally accurate here: the kernel ``-df/dE = 1/(4 k_B T cosh^2(x/2))``
is analytic in a strip of half-width ``pi k_B T``, so the aliasing error of a signal
``cos(a E)`` is ~``2 pi^2 exp(-pi k_B T (2 pi/h - a))``: ~1e-7 for ``h = k_B T`` (default) and
~1e-16 for ``h = k_B T/2`` (``points_per_kt=2``), provided ``h <= 1/(4a)`` (tested against the
exact identity ``integral cos(a E)(-df/dE) dE = x/sinh x``, ``x = pi a k_B T``; physics notes
5.4). The weights are renormalised to sum to 1. Resolve the longest delay that matters:
resonant rings need ``correlation_energy ~ hbar v / (total loop length)``.
The number of energies is reported with every result.

Public API
----------
ThermalGrid, ThermalResult, thermal_weights, thermal_average, thermal_conductance,
thouless_energy
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.units import HBAR, K_B

__all__ = [
    "ThermalGrid",
    "ThermalResult",
    "thermal_weights",
    "thermal_average",
    "thermal_conductance",
    "thouless_energy",
    "fermi_window",
]


def fermi_window(energy, mu: float, kt: float) -> np.ndarray:
    """``-df/dE = 1 / (4 kT cosh^2((E - mu) / 2kT))`` (same units as ``energy``)."""
    x = (np.asarray(energy, dtype=float) - mu) / (2.0 * kt)
    return 1.0 / (4.0 * kt * np.cosh(np.clip(x, -350, 350)) ** 2)


@dataclass(frozen=True)
class ThermalGrid:
    """Energies and weights of the thermal average.

    Attributes
    ----------
    energies : ndarray
        Energy points (units of ``mu``).
    weights : ndarray
        Weights, summing to 1.
    mu : float
        Chemical potential.
    temperature : float
        Temperature in K.
    kt : float
        ``k_B T`` in the energy units of ``mu``.
    spacing : float
        Grid spacing (0 for a single energy).
    """

    energies: np.ndarray
    weights: np.ndarray
    mu: float
    temperature: float
    kt: float
    spacing: float

    @property
    def n_energies(self) -> int:
        """Number of energies (the cost is this many single-energy sweeps)."""
        return len(self.energies)


@dataclass(frozen=True)
class ThermalResult:
    """Thermally averaged quantity together with the grid that produced it."""

    value: np.ndarray
    grid: ThermalGrid

    @property
    def n_energies(self) -> int:
        return self.grid.n_energies


def thermal_weights(
    mu: float,
    temperature: float,
    *,
    energy_unit: float = 1.0,
    correlation_energy: float | None = None,
    points_per_correlation: float = 4.0,
    points_per_kt: float = 1.0,
    tail_tol: float = 1e-6,
    max_points: int = 4001,
) -> ThermalGrid:
    """Energy grid and weights for ``integral G(E) (-df/dE) dE``.

    Parameters
    ----------
    mu : float
        Chemical potential, in units of ``energy_unit``.
    temperature : float
        Temperature in K (0 gives the single energy ``mu``).
    energy_unit : float
        One energy unit in J (1.0: energies in J; the hopping t for lattice units).
    correlation_energy : float, optional
        Energy scale on which the integrand varies (same units as ``mu``).
    points_per_correlation : float
        Grid points per correlation energy (default 4).
    points_per_kt : float
        Grid points per k_B T (default 1: kernel error ~1e-8; 2 gives ~1e-16).
    tail_tol : float
        Kernel mass left outside the window (default 1e-6).
    max_points : int
        Refuse grids larger than this.

    Returns
    -------
    ThermalGrid
    """
    mu = float(mu)
    temperature = check_positive("temperature", temperature, "K", allow_zero=True)
    unit = check_positive("energy_unit", energy_unit, "J")
    if not 0 < tail_tol < 1:
        raise ParameterError("tail_tol", tail_tol, "must lie in (0, 1)")
    kt = K_B * temperature / unit
    if kt == 0.0:
        return ThermalGrid(np.array([mu]), np.array([1.0]), mu, temperature, 0.0, 0.0)
    h = kt / check_positive("points_per_kt", points_per_kt)
    if correlation_energy is not None:
        ec = check_positive("correlation_energy", correlation_energy, "energy units")
        h = min(h, ec / check_positive("points_per_correlation", points_per_correlation))
    half = kt * math.log(2.0 / tail_tol)
    m = int(math.ceil(half / h))
    n = 2 * m + 1
    if n > max_points:
        raise ParameterError(
            "temperature",
            temperature,
            f"needs {n} energies > max_points = {max_points} (raise max_points or the "
            "correlation energy)",
            "K",
        )
    energies = mu + h * np.arange(-m, m + 1)
    w = fermi_window(energies, mu, kt)
    w /= w.sum()
    return ThermalGrid(energies, w, mu, temperature, kt, h)


def thermal_average(
    func: Callable[[float], np.ndarray | float],
    mu: float,
    temperature: float,
    **grid_options,
) -> ThermalResult:
    """``sum_k w_k func(E_k)`` on the grid of :func:`thermal_weights`.

    Parameters
    ----------
    func : callable
        ``func(energy) -> array`` (e.g. G over a field sweep at that energy).
    mu, temperature, **grid_options
        Passed to :func:`thermal_weights`.
    """
    grid = thermal_weights(mu, temperature, **grid_options)
    acc = None
    for e, w in zip(grid.energies, grid.weights, strict=True):
        val = np.asarray(func(float(e)), dtype=float)
        acc = w * val if acc is None else acc + w * val
    return ThermalResult(acc, grid)


def thermal_conductance(sweeper, values, temperature: float, **grid_options) -> ThermalResult:
    """Thermally averaged :meth:`FieldSweeper.conductance` over ``values``.

    The sweeper's energy is the chemical potential. One sweeper per grid energy is made with
    :meth:`FieldSweeper.at_energy` (lead modes recomputed at every energy; the field model is
    shared).
    """
    mu = sweeper.energy

    def at(e: float) -> np.ndarray:
        sw = sweeper if e == mu else sweeper.at_energy(e)
        return sw.conductance(values)

    return thermal_average(at, mu, temperature, **grid_options)


def thouless_energy(
    length: float, *, fermi_velocity: float | None = None, diffusion_constant: float | None = None
) -> float:
    """Correlation energy of G(E) in J: ``hbar v_F / L`` (ballistic) or ``hbar D / L^2``.

    Parameters
    ----------
    length : float
        Relevant path length in m (e.g. the arm-length difference or the arm length).
    fermi_velocity : float, optional
        m/s (ballistic).
    diffusion_constant : float, optional
        m^2/s (diffusive).
    """
    length = check_positive("length", length, "m")
    if (fermi_velocity is None) == (diffusion_constant is None):
        raise ParameterError(
            "fermi_velocity/diffusion_constant", None, "give exactly one of the two"
        )
    if fermi_velocity is not None:
        return HBAR * check_positive("fermi_velocity", fermi_velocity, "m/s") / length
    return HBAR * check_positive("diffusion_constant", diffusion_constant, "m^2/s") / length**2
