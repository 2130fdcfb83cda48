"""Finite-temperature conductance, transport-facing side of :mod:`ringkit.thermal_policy`.

``G(T, mu) = integral G(E) (-df/dE) dE``. Which energies are used, how many, and the error
estimate are decided by the one policy of :mod:`ringkit.thermal_policy` (adaptive
Gauss-Kronrod subdivision of the window until the estimated error of every component is below
``tol``, default 1e-4; ``method="grid"`` is the dense uniform trapezoidal reference). This module
converts temperatures in K and energies in lattice units, and drives a sweeper (one sparse
factorization per energy). See ``docs/thermal.md``.

Public API
----------
thermal_average(func, mu, temperature, *, energy_unit=1.0, tol=1e-4, method="adaptive", ...)
    -> EnergyAverage (``value``, ``errors``, ``error``, ``n_energies``, ``energies``, ...)
thermal_conductance(sweeper, values, temperature, *, workers=None, **options) -> EnergyAverage
    Energies of each refinement round in parallel processes (:mod:`ringkit.transport.energy_pool`).
thermal_weights(mu, temperature, ...) -> ThermalGrid
    The former uniform grid (spacing ``min(k_B T, E_c/4)``), kept for comparisons and old
    scripts; it carries no error estimate and is not used by ringkit itself.
thouless_energy(length, fermi_velocity=... | diffusion_constant=...)
fermi_window, ThermalToleranceWarning, EnergyAverage (re-exported)
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.thermal_policy import (
    DEFAULT_TOL,
    EnergyAverage,
    ThermalToleranceWarning,
    energy_average,
    fermi_window,
)
from ringkit.units import HBAR, K_B

__all__ = [
    "DEFAULT_TOL",
    "EnergyAverage",
    "ThermalGrid",
    "ThermalResult",
    "ThermalToleranceWarning",
    "thermal_weights",
    "thermal_average",
    "thermal_conductance",
    "thouless_energy",
    "fermi_window",
]

ThermalResult = EnergyAverage
"""Former name of :class:`ringkit.thermal_policy.EnergyAverage`."""


@dataclass(frozen=True)
class ThermalGrid:
    """Energies and weights of the former uniform grid (:func:`thermal_weights`).

    Attributes
    ----------
    energies, weights : ndarray
        Energy points (units of ``mu``) and weights summing to 1.
    mu, temperature, kt, spacing : float
        Chemical potential, temperature (K), k_B T (units of ``mu``), grid step.
    """

    energies: np.ndarray
    weights: np.ndarray
    mu: float
    temperature: float
    kt: float
    spacing: float

    @property
    def n_energies(self) -> int:
        """Number of energies."""
        return len(self.energies)


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
    """The former uniform grid: step ``min(k_B T/points_per_kt, E_c/points_per_correlation)``,
    half-width ``k_B T ln(2/tail_tol)``, trapezoidal ``-df/dE`` weights normalised to 1.

    Not converged for resonant rings (no error estimate); use :func:`thermal_average`.
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
    m = int(math.ceil(kt * math.log(2.0 / tail_tol) / h))
    if 2 * m + 1 > max_points:
        raise ParameterError(
            "temperature",
            temperature,
            f"needs {2 * m + 1} energies > max_points = {max_points}",
            "K",
        )
    energies = mu + h * np.arange(-m, m + 1)
    w = fermi_window(energies, mu, kt)
    return ThermalGrid(energies, w / w.sum(), mu, temperature, kt, h)


def thermal_average(
    func: Callable,
    mu: float,
    temperature: float,
    *,
    energy_unit: float = 1.0,
    tol: float = DEFAULT_TOL,
    method: str = "adaptive",
    spacing: float | None = None,
    **options,
) -> EnergyAverage:
    """``integral func(E)(-df/dE) dE`` by the policy of :mod:`ringkit.thermal_policy`.

    Parameters
    ----------
    func : callable
        ``func(energy) -> array`` (e.g. G over a field sweep at that energy).
    mu : float
        Chemical potential in units of ``energy_unit``.
    temperature : float
        Temperature in K (0: the single energy ``mu``).
    energy_unit : float
        One energy unit in J (the hopping t for lattice units).
    tol : float
        Absolute error goal of every component (units of ``func``), in [1e-10, 0.1].
    method : {"adaptive", "grid"}
        Adaptive (default) or the dense uniform reference grid.
    spacing : float, optional
        Step of ``method="grid"`` in units of ``energy_unit`` (default k_B T/4).
    **options
        ``bound``, ``functionals``, ``batched``, ``max_energies`` of
        :func:`ringkit.thermal_policy.energy_average`.
    """
    temperature = check_positive("temperature", temperature, "K", allow_zero=True)
    kt = K_B * temperature / check_positive("energy_unit", energy_unit, "J")
    return energy_average(func, mu, kt, tol=tol, method=method, spacing=spacing, **options)


def thermal_conductance(
    sweeper, values, temperature: float, *, workers: int | None = None, **options
) -> EnergyAverage:
    """Thermally averaged :meth:`conductance` of a sweeper over ``values``.

    The sweeper's energy is the chemical potential; one sweeper per energy is made with
    ``sweeper.at_energy(E)`` (the field model is shared). The energies of each refinement round
    are evaluated by :class:`ringkit.transport.energy_pool.EnergyPool` in ``workers`` processes
    (default: ``RINGKIT_THERMAL_WORKERS`` or the usable cores, at most 4; serial for cheap
    energies); the result does not depend on the number of workers. ``options`` as in
    :func:`thermal_average`.
    """
    from ringkit.transport.energy_pool import EnergyPool

    with EnergyPool(sweeper, values, workers=workers) as pool:
        return thermal_average(pool, sweeper.energy, temperature, batched=True, **options)


def thouless_energy(
    length: float, *, fermi_velocity: float | None = None, diffusion_constant: float | None = None
) -> float:
    """Correlation energy of G(E) in J: ``hbar v_F / L`` (ballistic) or ``hbar D / L^2``.

    Parameters
    ----------
    length : float
        Relevant path length in m.
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
