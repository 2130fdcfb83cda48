"""Path-length convention of the phase-coherence length ``l_phi`` (the one place it lives).

Every ringkit result that contains a phase-coherence length uses this convention and carries
the string :data:`L_PHI_CONVENTION` (key ``l_phi_convention``); fits
(:mod:`ringkit.analysis.fitting`), amplitude predictions (:mod:`ringkit.analysis.scaling`)
and the dephasing-probe calibration (:mod:`ringkit.transport.probes`) all import it from here.

Convention
----------
The amplitude of an interference term is damped as ``exp(-L/l_phi)``, where ``L`` is the
*explicit* length of the interfering paths (``l_phi`` is the length over which the coherent
intensity of one partial wave falls by 1/e):

* h/e (two paths through different arms of a ring of radius r): ``L = pi r`` (one arm,
  half the circumference) — :func:`path_length` with ``order=1``;
* h/2e (Altshuler-Aronov-Spivak pair, a closed loop and its time-reversed partner):
  ``L = 2 pi r`` (the circumference) — ``order=2``;
* n-th harmonic in general: ``L = n pi r``.

Other conventions exist in the literature: diffusive-ring theory damps h/e as
``exp(-2 pi R/L_phi)`` (circumference; from memory, Ludwig and Mirlin, Phys. Rev. B 69,
193306 (2004)). An ``l_phi`` quoted in that convention equals 2x the ringkit value for the
same h/e damping; :func:`convert_l_phi` converts between explicit path-length choices.
See ``docs/conventions.md`` ("Phase-coherence length").
"""

from __future__ import annotations

import numpy as np

from ringkit._validation import ParameterError, check_positive

__all__ = [
    "L_PHI_CONVENTION",
    "L_PHI_CONVENTION_KEY",
    "path_length",
    "coherent_damping",
    "convert_l_phi",
]

L_PHI_CONVENTION: str = (
    "exp(-L/l_phi), L = explicit path length of the interfering paths; "
    "default L = pi r (h/e, one arm), 2 pi r (h/2e AAS loop), n pi r (n-th harmonic)"
)
"""Text stated with every output that contains a phase-coherence length."""

L_PHI_CONVENTION_KEY: str = "l_phi_convention"
"""Key under which :data:`L_PHI_CONVENTION` is stored in results, attrs and JSON."""


def path_length(radius: float | np.ndarray, order: int = 1) -> float | np.ndarray:
    """Default length ``order * pi * r`` (m) of the interfering paths of harmonic ``order``.

    Parameters
    ----------
    radius : float or array
        Ring radius in m (> 0).
    order : int
        1 for h/e (one arm, ``pi r``), 2 for h/2e (AAS loop, ``2 pi r``), n >= 1 in general.

    Returns
    -------
    float or ndarray
        Path length in m.
    """
    if isinstance(order, bool) or int(order) != order or order < 1:
        raise ParameterError("order", order, "must be an integer >= 1 (1: h/e, 2: h/2e)")
    r = np.asarray(radius, dtype=float)
    if np.any(~np.isfinite(r)) or np.any(r <= 0):
        raise ParameterError("radius", radius, "must be finite and > 0", "m")
    out = order * np.pi * r
    return float(out) if out.ndim == 0 else out


def coherent_damping(length: float | np.ndarray, l_phi: float | np.ndarray) -> np.ndarray:
    """Damping factor ``exp(-L/l_phi)`` of an interference term (``l_phi = inf`` gives 1).

    Parameters
    ----------
    length : float or array
        Path length L in m (>= 0), e.g. from :func:`path_length`.
    l_phi : float or array
        Phase-coherence length in m (> 0, inf allowed).
    """
    length = np.asarray(length, dtype=float)
    lp = np.asarray(l_phi, dtype=float)
    if np.any(~np.isfinite(length)) or np.any(length < 0):
        raise ParameterError("length", length, "must be finite and >= 0", "m")
    if np.any(np.isnan(lp)) or np.any(lp <= 0):
        raise ParameterError("l_phi", l_phi, "must be > 0 (inf allowed)", "m")
    return np.exp(-length / lp)


def convert_l_phi(l_phi: float, from_length: float, to_length: float) -> float:
    """Re-express ``l_phi`` quoted for path length ``from_length`` for ``to_length``.

    The same damping ``exp(-from_length/l_phi)`` equals ``exp(-to_length/l_phi')`` with
    ``l_phi' = l_phi * to_length/from_length``. Example: an h/e value ``l`` quoted with the
    circumference ``2 pi R`` corresponds to the ringkit value (``L = pi R``)
    ``convert_l_phi(l, 2*pi*R, pi*R) == l/2``.
    """
    check_positive("from_length", from_length, "m")
    check_positive("to_length", to_length, "m")
    lp = float(l_phi)
    if not lp > 0:
        raise ParameterError("l_phi", l_phi, "must be > 0 (inf allowed)", "m")
    return lp * float(to_length) / float(from_length)
