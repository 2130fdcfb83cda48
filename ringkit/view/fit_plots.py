"""Figures of the inverse fit (pyplot-free, ``ax=None`` style): measured amplitudes over the
model's quantile bands versus temperature, and profile likelihoods.

Public API
----------
plot_fit_overlay(overlay, ax=None)
    ``overlay``: the dict of :func:`ringkit.view.panels.outlook.measured_overlay`.
usable_profiles(profiles) -> dict
    Those with at least two finite points.
plot_profiles(profiles, axes=None)
    ``profiles``: ``{name: {"x": [...], "two_delta_loglike": [...]}}`` of a fit result.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from ringkit.view.style import COLORS, new_figure

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes

__all__ = ["plot_fit_overlay", "plot_profiles", "usable_profiles"]

_SERIES = (("he", "h/e", "o"), ("h2e", "h/2e", "^"))
_PROFILE_UNITS = {"l_phi_ref": "m", "p": "1", "mean_free_path": "m"}


def plot_fit_overlay(overlay: dict, ax: Axes | None = None) -> Axes:
    """Measured h/e and h/2e rms (e^2/h) versus T over the model's 16-84 % bands and median.

    The model is drawn as a vertical 16-84 % bar with its median at every temperature (so a
    single temperature shows too) and, with several temperatures, as a shaded band.
    """
    if ax is None:
        _, axes = new_figure(1, 1, size=(5.6, 3.6))
        ax = axes[0, 0]
    fresh = not ax.has_data()  # else keep the x range of what is already drawn
    t_meas = np.asarray(overlay["temperature"], float)
    for col, label, marker in _SERIES:
        color = COLORS[col]
        if "model_T" in overlay:
            t = np.asarray(overlay["model_T"], float)
            lo, med, hi = (np.asarray(overlay[f"{col}_{q}"], float) for q in ("q16", "q50", "q84"))
            if t.size > 1:
                ax.fill_between(t, lo, hi, color=color, alpha=0.18, lw=0)
            ax.errorbar(t, med, yerr=[med - lo, hi - med], fmt="_", color=color, capsize=5,
                        ms=12, label=f"model {label} (16-50-84 %)")  # fmt: skip
        ax.plot(t_meas, overlay[f"measured_{col}"], marker, color=color, mec="0.15",
                label=f"measured {label}")  # fmt: skip
    ax.set_xlabel("temperature (K)")
    ax.set_ylabel("rms amplitude (e²/h)")
    if t_meas.size == 1 and fresh:
        ax.set_xlim(0.8 * t_meas[0], 1.2 * t_meas[0])
    ax.legend(fontsize="x-small", frameon=False)
    return ax


def usable_profiles(profiles: dict) -> dict:
    """The profiles with at least two finite points (a one-node axis has none)."""

    def ok(v) -> bool:
        return len([u for u in (v or {}).get("two_delta_loglike") or [] if u is not None]) > 1

    return {k: v for k, v in (profiles or {}).items() if ok(v)}


def plot_profiles(profiles: dict, axes=None):
    """Profile likelihoods 2 delta(-log L) with the 68 % and 95 % levels (chi-square, 1 dof,
    Wilks' theorem); returns the axes (one per profile with two or more points)."""
    from scipy.stats import chi2

    prof = usable_profiles(profiles)
    if axes is None:
        _, grid = new_figure(1, max(len(prof), 1), size=(3.4 * max(len(prof), 1), 3.0))
        axes = grid[0]
    for ax, (name, pr) in zip(axes, prof.items(), strict=False):
        x = np.array([np.nan if v is None else float(v) for v in pr["x"]])
        y = np.array([np.nan if v is None else float(v) for v in pr["two_delta_loglike"]])
        ax.plot(x, y, "o-", color="0.2", ms=3)
        for level, ls in ((0.68, "--"), (0.95, ":")):
            ax.axhline(chi2.ppf(level, 1), color="0.5", ls=ls, lw=0.8,
                       label=f"{100 * level:.0f} %")  # fmt: skip
        if name in ("l_phi_ref", "mean_free_path"):
            ax.set_xscale("log")
        ax.set_xlabel(f"{name} ({_PROFILE_UNITS.get(name, '')})")
        ax.set_ylabel("2 Δ(−log L)")
        ax.legend(fontsize="x-small", frameon=False)
    return axes
