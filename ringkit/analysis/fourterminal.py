"""Four-terminal magnetoresistance R_mn,kl(B): symmetrisation, h/e and h/2e amplitudes and phases.

numpy/scipy only (no kwant). Works on measured traces and on model output alike.

Public API
----------
relative_change(resistance, reference="mean") -> ndarray
    ``(R - R_ref)/R_ref``.
reciprocal_symmetrize(field, r, field_rev, r_rev, *, n_points=None) -> Symmetrized
    Onsager-Büttiker combination of R_mn,kl(B) and the reciprocal R_kl,mn(-B).
even_odd(field, r, *, n_points=None) -> Symmetrized
    Even and odd parts in B of a single configuration.
oscillation_phase(field, signal, frequency, *, window="hann") -> (amplitude, phase)
    Cosine amplitude and phase of one frequency, referred to B = 0.
analyze_four_terminal(field, resistance_ohm, *, contacts, ...) -> FourTerminalResult
    Everything above for one configuration; ``as_dict()`` for JSON.
phase_versus_gate(gates, field, signals, frequency, ...) -> xarray.Dataset
    Phase of the h/e component at each gate value (electric AB effect).

Conventions (docs/multiterminal.md)
-----------------------------------
* ``R_mn,kl = (V_k - V_l)/I`` with the current I from contact m to n (:mod:`ringkit.contacts`).
* Reciprocity (M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986)): R_mn,kl(B) = R_kl,mn(-B). With
  both configurations measured, ``R_sym(B) = [R_mn,kl(B) + R_kl,mn(-B)]/2`` is the best
  estimate of R_mn,kl(B) and ``R_res(B) = [R_mn,kl(B) - R_kl,mn(-B)]/2`` the reciprocity
  residual (zero for ideal linear-response data; it measures drift, heating or a
  non-linear response). With one configuration only, ``R_even = [R(B) + R(-B)]/2`` and
  ``R_odd = [R(B) - R(-B)]/2``; a two-terminal R has R_odd = 0 (phase rigidity), a
  four-terminal R in general not.
* Phase: ``s(B) ~ A cos(2 pi f B + phi)``; phi from the windowed projection
  ``sum w (s - <s>_w) exp(-2 pi i f B) / (sum w / 2)`` evaluated at f, referred to B = 0. For
  a signal even in B on a field grid symmetric about 0 the projection is real, so
  phi is 0 or pi exactly (up to rounding) — the two-terminal phase rigidity
  (Büttiker 1986; A. Yacoby et al., Phys. Rev. Lett. 74, 4047 (1995)). On a grid not centred
  on B = 0 a line between frequency bins is still evaluated exactly at f, so the phase refers
  to B = 0 without a bin offset.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import signal as _sig

from ringkit._validation import ParameterError, check_positive
from ringkit.analysis._common import validate_trace
from ringkit.analysis.extract import OscillationResult, extract_oscillations
from ringkit.contacts import Contacts
from ringkit.units import E2H

__all__ = [
    "Symmetrized",
    "FourTerminalResult",
    "relative_change",
    "reciprocal_symmetrize",
    "even_odd",
    "oscillation_phase",
    "analyze_four_terminal",
    "phase_versus_gate",
    "OHM_PER_H_E2",
]

OHM_PER_H_E2 = 1.0 / E2H
"""h/e^2 in ohm (CODATA via scipy.constants)."""


@dataclass(frozen=True)
class Symmetrized:
    """A trace split into a symmetric part and a remainder on a grid symmetric about B = 0.

    Attributes
    ----------
    field : ndarray
        Grid in T, symmetric about 0 (the overlap of the input ranges and their mirror).
    symmetric : ndarray
        Even part, or the Onsager-Büttiker combination (input units).
    remainder : ndarray
        Odd part, or the reciprocity residual (input units).
    kind : str
        ``"even/odd"`` or ``"reciprocal"``.
    """

    field: np.ndarray
    symmetric: np.ndarray
    remainder: np.ndarray
    kind: str

    @property
    def remainder_rms_fraction(self) -> float:
        """rms of the remainder over the rms of the symmetric part's variation."""
        var = np.std(self.symmetric)
        return float(np.sqrt(np.mean(self.remainder**2)) / var) if var > 0 else float("nan")


def relative_change(resistance, reference: str | float = "mean") -> np.ndarray:
    """``(R - R_ref)/R_ref`` with ``R_ref`` the mean (default), ``"zero"`` (value nearest
    the middle of the array, e.g. B = 0 of a symmetric sweep) or a number in the units of R."""
    r = np.asarray(resistance, dtype=float)
    if r.ndim != 1 or r.size == 0 or not np.all(np.isfinite(r)):
        raise ParameterError("resistance", r.shape, "must be a finite 1D array")
    if reference == "mean":
        ref = float(r.mean())
    elif reference == "zero":
        ref = float(r[r.size // 2])
    else:
        try:
            ref = float(reference)
        except (TypeError, ValueError):
            raise ParameterError(
                "reference", reference, "must be 'mean', 'zero' or a number"
            ) from None
    if ref == 0 or not np.isfinite(ref):
        raise ParameterError("reference", ref, "must be a finite non-zero resistance")
    return (r - ref) / ref


def _symmetric_grid(b1: np.ndarray, b2: np.ndarray, n_points: int | None) -> np.ndarray:
    """Grid symmetric about 0 inside ``b1`` and ``-b2`` (the mirrored second trace)."""
    lo = max(b1[0], -b2[-1])
    hi = min(b1[-1], -b2[0])
    half = min(-lo, hi) if lo < 0 < hi else 0.0
    if half <= 0:
        raise ParameterError(
            "field",
            (float(b1[0]), float(b1[-1])),
            "must cover both signs of B (the trace and its mirror must overlap around B = 0)",
            "T",
        )
    n = n_points or max(len(b1), len(b2))
    n = int(n) + (1 - int(n) % 2)  # odd: B = 0 on the grid
    return np.linspace(-half, half, n)


def reciprocal_symmetrize(field_a, r_a, field_b, r_b, *, n_points: int | None = None):
    """Onsager-Büttiker combination of R_mn,kl(B) (``field_a``, ``r_a``) and R_kl,mn
    (``field_b``, ``r_b``): :class:`Symmetrized` with ``[R_a(B) + R_b(-B)]/2`` and the
    residual ``[R_a(B) - R_b(-B)]/2`` on a common symmetric grid (linear interpolation)."""
    ba, sa = validate_trace(field_a, r_a)
    bb, sb = validate_trace(field_b, r_b)
    grid = _symmetric_grid(ba, bb, n_points)
    ra = np.interp(grid, ba, sa)
    rb = np.interp(-grid, bb, sb)
    return Symmetrized(grid, 0.5 * (ra + rb), 0.5 * (ra - rb), "reciprocal")


def even_odd(field_b, r, *, n_points: int | None = None) -> Symmetrized:
    """Even ``[R(B) + R(-B)]/2`` and odd ``[R(B) - R(-B)]/2`` parts of one configuration."""
    b, s = validate_trace(field_b, r)
    grid = _symmetric_grid(b, b, n_points)
    rp, rm = np.interp(grid, b, s), np.interp(-grid, b, s)
    return Symmetrized(grid, 0.5 * (rp + rm), 0.5 * (rp - rm), "even/odd")


def oscillation_phase(field_b, signal, frequency: float, *, window: str = "hann"):
    """Cosine amplitude and phase (rad, in (-pi, pi]) of ``signal`` at ``frequency`` [1/T].

    See the module docstring for the projection; ``window`` is any scipy.signal window
    (evaluated on the sample index; ``"boxcar"`` for an integer number of periods).
    Works along the last axis of ``signal`` (several traces on one field grid).
    """
    b = np.asarray(field_b, dtype=float)
    s = np.asarray(signal, dtype=float)
    if b.ndim != 1 or s.shape[-1] != b.size or b.size < 4:
        raise ParameterError("signal", s.shape, f"last axis must match the field ({b.size})")
    if not (np.all(np.isfinite(b)) and np.all(np.isfinite(s))):
        raise ParameterError("signal", "array", "must be finite")
    f = check_positive("frequency", frequency, "1/T")
    try:
        w = _sig.get_window(window, b.size, fftbins=False)
    except (ValueError, TypeError) as err:
        raise ParameterError("window", window, f"must be a scipy.signal window ({err})") from None
    mean = (s * w).sum(axis=-1, keepdims=True) / w.sum()
    c = ((s - mean) * w * np.exp(-2j * np.pi * f * b)).sum(axis=-1) / (w.sum() / 2)
    return np.abs(c), np.angle(c)


@dataclass(frozen=True)
class FourTerminalResult:
    """Analysis of one four-terminal magnetoresistance trace (SI: T, ohm, rad).

    Attributes
    ----------
    contacts : Contacts
    mean_ohm : float
        Mean resistance in ohm.
    relative_change_rms : float
        rms of ``(R - <R>)/<R>``.
    symmetrized : Symmetrized
        Reciprocal combination (if the reverse configuration was given) or even/odd parts.
    reciprocity_residual_ohm : float or None
        rms of the reciprocity residual (reverse configuration given), else None.
    odd_fraction : float
        rms of the odd part (or residual) over the rms variation of the symmetric part.
    oscillations : OscillationResult
        h/e, h/2e content of the analysed trace (:func:`ringkit.analysis.extract_oscillations`),
        amplitudes in ohm.
    phase_he, phase_h2e : float
        Phases of the h/e and h/2e components at the extracted frequencies (rad, B = 0).
    amplitude_he_ohm, amplitude_h2e_ohm : float
        Cosine amplitudes of the projection at those frequencies in ohm.
    """

    contacts: Contacts
    mean_ohm: float
    relative_change_rms: float
    symmetrized: Symmetrized
    reciprocity_residual_ohm: float | None
    odd_fraction: float
    oscillations: OscillationResult
    phase_he: float
    phase_h2e: float
    amplitude_he_ohm: float
    amplitude_h2e_ohm: float
    notes: tuple = field(default_factory=tuple)

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready summary (new keys for the measured-data output)."""
        osc = self.oscillations
        return {
            "contacts": str(self.contacts),
            "configuration": self.contacts.label,
            "mean_resistance_ohm": self.mean_ohm,
            "relative_change_rms": self.relative_change_rms,
            "symmetrization": self.symmetrized.kind,
            "reciprocity_residual_ohm": self.reciprocity_residual_ohm,
            "odd_fraction": self.odd_fraction,
            "period_he_T": osc.period_he,
            "amplitude_he_ohm": self.amplitude_he_ohm,
            "amplitude_h2e_ohm": self.amplitude_h2e_ohm,
            "amplitude_he_rms_ohm": osc.amplitude_he_rms,
            "amplitude_h2e_rms_ohm": osc.amplitude_h2e_rms,
            "relative_amplitude_he": osc.relative_amplitude_he,
            "relative_amplitude_h2e": osc.relative_amplitude_h2e,
            "phase_he_rad": self.phase_he,
            "phase_h2e_rad": self.phase_h2e,
            "notes": list(self.notes) + list(osc.notes),
        }


def analyze_four_terminal(
    field_b,
    resistance_ohm,
    *,
    contacts: Contacts | str,
    reverse: tuple | None = None,
    symmetrize: str = "none",
    r_in: float | None = None,
    r_out: float | None = None,
    allow_shared: bool = False,
    **extract_options,
) -> FourTerminalResult:
    """Analyse a measured (or modelled) four-terminal trace R_mn,kl(B) in ohm.

    Parameters
    ----------
    field_b, resistance_ohm : array_like
        Field in T and R_mn,kl in ohm.
    contacts : Contacts or str
        The configuration (``"m,n,k,l"``); also accepts two/three-terminal ones.
    reverse : (field, resistance_ohm), optional
        The reciprocal configuration R_kl,mn(B) measured as well: the Onsager-Büttiker
        combination is analysed and the residual reported.
    symmetrize : {"none", "even", "odd"}
        With one configuration: analyse the trace as measured (default), or its even or odd
        part in B.
    r_in, r_out : float, optional
        Ring radii in m (h/e band from the geometry), see
        :func:`ringkit.analysis.extract_oscillations` (other options pass through).
    allow_shared : bool
        Accept a voltage contact equal to a current contact (two/three-terminal data).

    Returns
    -------
    FourTerminalResult
    """
    c = Contacts.parse(contacts)
    c.check(max(c.current + c.voltage) + 1, allow_shared=allow_shared)
    b, r = validate_trace(field_b, resistance_ohm)
    if symmetrize not in ("none", "even", "odd"):
        raise ParameterError("symmetrize", symmetrize, "must be one of 'none', 'even', 'odd'")
    notes: list[str] = []
    residual = None
    if reverse is not None:
        if symmetrize != "none":
            raise ParameterError(
                "symmetrize", symmetrize, "must be 'none' when the reverse configuration is given"
            )
        sym = reciprocal_symmetrize(b, r, reverse[0], reverse[1])
        residual = float(np.sqrt(np.mean(sym.remainder**2)))
        b_an, r_an = sym.field, sym.symmetric
        notes.append(f"Onsager-Büttiker combination of {c.label}(B) and {c.reversed().label}(-B)")
    else:
        sym = even_odd(b, r)
        if symmetrize == "none":
            b_an, r_an = b, r
        else:
            b_an = sym.field
            r_an = sym.symmetric if symmetrize == "even" else sym.remainder
            notes.append(f"analysed the {symmetrize} part in B")
    mean = float(np.mean(r))
    osc = extract_oscillations(
        b_an, r_an, r_in=r_in, r_out=r_out, mean_conductance=mean, **extract_options
    )
    bg = osc.background
    ok = bg.valid
    amps, phases = [], []
    for order in (1, 2):
        f = order * osc.frequency_he
        if np.isfinite(f) and f > 0:
            a, p = oscillation_phase(bg.field[ok], bg.residual[ok], f)
        else:
            a, p = np.nan, np.nan
        amps.append(float(a))
        phases.append(float(p))
    return FourTerminalResult(
        contacts=c,
        mean_ohm=mean,
        relative_change_rms=float(np.std(relative_change(r))),
        symmetrized=sym,
        reciprocity_residual_ohm=residual,
        odd_fraction=sym.remainder_rms_fraction,
        oscillations=osc,
        phase_he=phases[0],
        phase_h2e=phases[1],
        amplitude_he_ohm=amps[0],
        amplitude_h2e_ohm=amps[1],
        notes=tuple(notes),
    )


def phase_versus_gate(gates, field_b, signals, frequency: float, *, window: str = "hann"):
    """Phase of the component at ``frequency`` [1/T] for every gate value (electric AB effect).

    Parameters
    ----------
    gates : array_like (n_gates,)
        Gate values (J, V or any unit; stored as given).
    field_b : array_like (n_fields,)
        Field (T) or flux (Wb, then ``frequency`` in 1/Wb: 1/(h/e) for h/e).
    signals : array_like (n_gates, n_fields)
        R(B) or G(B) at each gate value.

    Returns
    -------
    xarray.Dataset
        ``amplitude`` and ``phase`` (rad in (-pi, pi]) and ``phase_unwrapped`` (continuous
        along the gate axis, starting from the first value) on the ``gate`` coordinate.
    """
    import xarray as xr

    vg = np.asarray(gates, dtype=float)
    s = np.asarray(signals, dtype=float)
    if s.ndim != 2 or s.shape[0] != vg.size:
        raise ParameterError("signals", s.shape, f"must be (n_gates={vg.size}, n_fields)")
    amp, ph = oscillation_phase(field_b, s, frequency, window=window)
    return xr.Dataset(
        {
            "amplitude": ("gate", amp, {"long_name": "cosine amplitude at the frequency"}),
            "phase": ("gate", ph, {"units": "rad", "long_name": "phase referred to B = 0"}),
            "phase_unwrapped": ("gate", np.unwrap(ph), {"units": "rad"}),
        },
        coords={"gate": ("gate", vg)},
        attrs={"frequency": float(frequency), "window": str(window)},
    )
