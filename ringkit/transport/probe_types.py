"""Probe types at finite temperature: energy-conserving dephasing probes and voltage probes.

* ``"dephasing"``: zero probe current at every energy -> Kron-reduce the conductance matrix at
  each energy, then average ``G_eff(E)`` with ``-df/dE``.
* ``"voltage"``: zero total probe current -> average the conductance MATRIX with ``-df/dE``,
  then Kron-reduce once.

:func:`thermal_probe_conductance` takes the energies and weights (or any averaging callable);
:func:`policy_probe_conductance` uses ringkit's thermal policy
(:func:`ringkit.thermal_policy.energy_average`) with its error control. See docs/probes.md
("Probe types"); re-exported by :mod:`ringkit.transport.probes`.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ringkit._validation import ParameterError, check_choice
from ringkit.transport.fastsweep import kron_reduce

__all__ = ["PROBE_TYPES", "thermal_probe_conductance", "policy_probe_conductance"]

PROBE_TYPES = ("dephasing", "voltage")
"""Energy-conserving dephasing probes (reduce at each energy, then average) and voltage probes
(average the conductance matrix, then reduce)."""


def thermal_probe_conductance(
    conductance_matrix_at: Callable[[float], np.ndarray],
    energies,
    weights=None,
    *,
    probe_type: str = "dephasing",
    source: int = 0,
    drain: int = 1,
    average: Callable[[np.ndarray], np.ndarray] | None = None,
) -> np.ndarray:
    """Finite-temperature two-terminal conductance with floating probes of either type.

    Parameters
    ----------
    conductance_matrix_at : callable
        ``energy -> C`` (…, n, n), the Büttiker conductance matrix at one energy (e.g.
        ``lambda e: sweeper.at_energy(e).conductance_matrix(fluxes)``), e^2/h per spin.
    energies : array_like or grid object
        Energy points; an object with ``.energies`` and ``.weights`` (e.g.
        :class:`ringkit.transport.thermal.ThermalGrid` or the energy policy's grid) may be
        passed instead of ``energies, weights``.
    weights : array_like, optional
        Weights of ``-df/dE`` on the grid (summing to 1).
    probe_type : {"dephasing", "voltage"}
        ``"dephasing"``: Kron-reduce at every energy, then average ``G_eff`` (energy-conserving
        dephasing probes). ``"voltage"``: average the conductance MATRIX, then Kron-reduce
        (zero total current).
    average : callable, optional
        Energy-average policy: maps an array with the energy on axis 0 to its average (default:
        ``tensordot(weights, values, 1)``). Use it to plug in another quadrature.

    Returns
    -------
    ndarray
        ``G_eff`` (…) in e^2/h per spin.
    """
    check_choice("probe_type", probe_type, PROBE_TYPES)
    if hasattr(energies, "energies") and hasattr(energies, "weights"):
        energies, weights = energies.energies, energies.weights
    e = np.atleast_1d(np.asarray(energies, dtype=float))
    if average is None:
        if weights is None:
            raise ParameterError("weights", None, "give weights, a grid object or average=")
        w = np.atleast_1d(np.asarray(weights, dtype=float))
        if w.shape != e.shape:
            raise ParameterError("weights", w.shape, f"must match energies {e.shape}")

        def average(values: np.ndarray) -> np.ndarray:
            return np.tensordot(w, values, axes=1)

    cm = np.stack([np.asarray(conductance_matrix_at(float(x)), dtype=float) for x in e])
    if probe_type == "voltage":
        return kron_reduce(average(cm), source, drain)
    return average(kron_reduce(cm, source, drain))


def policy_probe_conductance(
    conductance_matrix_at: Callable[[float], np.ndarray],
    mu: float,
    kt: float,
    *,
    probe_type: str = "dephasing",
    tol: float | None = None,
    method: str = "adaptive",
    source: int = 0,
    drain: int = 1,
):
    """Thermal two-terminal conductance with probes, through ringkit's thermal policy.

    The energies and the error control are those of
    :func:`ringkit.thermal_policy.energy_average` (adaptive Gauss-Kronrod, error below
    ``tol`` for every averaged component). ``"dephasing"`` averages ``G_eff(E)`` (Kron
    reduction at each energy); ``"voltage"`` averages the whole conductance MATRIX and reduces
    it afterwards. For voltage probes the error of ``G_eff`` is propagated from the errors of
    the matrix entries to first order: ``dG = v_L^T dC v_R`` with ``v_R = (1, 0, V_p)`` the
    terminal voltages of the floating condition and ``v_L`` those of the transposed problem.

    Parameters
    ----------
    conductance_matrix_at : callable
        ``energy -> C`` (…, n, n), e^2/h per spin.
    mu, kt : float
        Chemical potential and ``k_B T`` in the energy unit of ``conductance_matrix_at``.
    probe_type : {"dephasing", "voltage"}
    tol : float, optional
        Absolute error goal (e^2/h); default the policy's ``DEFAULT_TOL``.
    method : {"adaptive", "grid"}

    Returns
    -------
    ringkit.thermal_policy.EnergyAverage
        ``value`` = G_eff (e^2/h per spin), ``errors`` its error estimate, ``energies``/
        ``weights`` the rule used.
    """
    import dataclasses

    from ringkit.thermal_policy import DEFAULT_TOL, energy_average

    check_choice("probe_type", probe_type, PROBE_TYPES)
    tol = DEFAULT_TOL if tol is None else tol
    c0 = np.asarray(conductance_matrix_at(float(mu)), dtype=float)
    bound = max(1.0, 2.0 * float(np.abs(c0).max()))
    if probe_type == "dephasing":
        return energy_average(
            lambda e: kron_reduce(np.asarray(conductance_matrix_at(e), dtype=float), source, drain),
            mu,
            kt,
            tol=tol,
            method=method,
            bound=bound,
        )
    # the matrix entries are averaged to tol / (sensitivity of G_eff at mu), so that the
    # propagated error of G_eff stays near tol
    vl0, vr0 = _kron_vectors(c0, source, drain)
    sens = float(np.max(np.einsum("...i,...j->...", vl0, vr0))) if c0.ndim else 1.0
    res = energy_average(
        lambda e: np.asarray(conductance_matrix_at(e), dtype=float),
        mu,
        kt,
        tol=float(np.clip(tol / max(sens, 1.0), 1e-10, 0.1)),
        method=method,
        bound=bound,
    )
    c, dc = np.asarray(res.value), np.asarray(res.errors)
    g = kron_reduce(c, source, drain)
    vl, vr = _kron_vectors(c, source, drain)
    err = np.einsum("...i,...ij,...j->...", vl, dc, vr)
    return dataclasses.replace(res, value=g, errors=err)


def _kron_vectors(c: np.ndarray, source: int, drain: int) -> tuple[np.ndarray, np.ndarray]:
    """|v_L| and |v_R| of dG = v_L^T dC v_R for the Kron-reduced G (first-order propagation)."""
    n = c.shape[-1]
    flat = c.reshape(-1, n, n)
    coupled = np.any(flat != 0, axis=(0, 2)) | np.any(flat != 0, axis=(0, 1))
    others = [k for k in range(n) if k not in (source, drain) and coupled[k]]
    vr = np.zeros(c.shape[:-1])
    vl = np.zeros(c.shape[:-1])
    vr[..., source] = vl[..., source] = 1.0
    if others:
        cpp = c[..., others, :][..., :, others]
        vr[..., others] = np.linalg.solve(cpp, -c[..., others, source][..., None])[..., 0]
        ct = np.swapaxes(cpp, -1, -2)
        vl[..., others] = np.linalg.solve(ct, -c[..., source, others][..., None])[..., 0]
    return np.abs(vl), np.abs(vr)
