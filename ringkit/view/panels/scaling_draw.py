"""Size-scaling panel, figure part: simulated quantile bands and the fitted law versus radius.

:func:`plot_size_bands` draws on a Matplotlib ``Axes`` (no pyplot): for h/e and h/2e the
16-84 % band of the simulated rms amplitudes (shaded) with the median and its bootstrap error
(markers), and the law solid over the simulated radii and dashed outside them (extrapolated).
The law is continuous in r (docs/amplitude-model.md), so no regime boundary is drawn; the
nominal crossover l = pi r of the smooth ballistic weight is marked as a dotted line.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ringkit.view.style import AMPLITUDE_LABEL, COLORS, RADIUS_LABEL, style_context

__all__ = ["plot_size_bands"]

_NAMES = {"he": "h/e", "h2e": "h/2e"}
_KEYS = {"he": "amplitude_he_rms", "h2e": "amplitude_h2e_rms"}


def plot_size_bands(ax, law, data: dict | None, *, show_bands: bool = True) -> dict[str, Any]:
    """Draw bands (if ``data`` and ``show_bands``) and the law; returns the artists.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    law : xarray.Dataset
        :func:`ringkit.view.panels.scaling_bands.law_curves` output (``inside_simulated``).
    data : dict or None
        Size dataset (:func:`ringkit.view.panels.scaling_bands.size_dataset`).
    show_bands : bool
        False when the bands belong to other rings than the panel's settings.

    Returns
    -------
    dict
        ``"he"``, ``"h2e"``: law lines over the whole radius range (solid where simulated);
        ``"he_extrapolated"``, ``"h2e_extrapolated"``: dashed parts; ``"he_band"``,
        ``"h2e_band"``: band polygons; ``"he_median"``, ``"h2e_median"``: median markers;
        ``"crossover"``: the l = pi r line (or None).
    """
    art: dict[str, Any] = {}
    with style_context():
        for name in ("he", "h2e"):
            color = COLORS[name]
            if law is None:  # bands only (h/e prefactor unconstrained)
                _bands(ax, art, name, data, show_bands)
                continue
            r = law["radius"].values
            inside = np.asarray(law["inside_simulated"].values, dtype=bool)
            y = law[_KEYS[name]].values
            solid = np.where(inside, y, np.nan)
            dashed = np.where(inside, np.nan, y)
            if inside.any():  # join the dashed parts to the solid one
                idx = np.flatnonzero(inside)
                dashed[idx[0]], dashed[idx[-1]] = y[idx[0]], y[idx[-1]]
            art[name] = ax.plot(r * 1e6, solid, color=color, label=f"{_NAMES[name]} law")[0]
            art[f"{name}_extrapolated"] = ax.plot(
                r * 1e6, dashed, color=color, ls="--", label=f"{_NAMES[name]} law, extrapolated"
            )[0]
            _bands(ax, art, name, data, show_bands)
        art["crossover"] = None
        boundary = np.nan if law is None else float(law.attrs["regime_boundary_radius"])
        if law is not None and law["radius"].values[0] <= boundary <= law["radius"].values[-1]:
            art["crossover"] = ax.axvline(
                boundary * 1e6, color="0.5", ls=":", lw=1, label="l = πr (smooth crossover)"
            )
        ax.set_yscale("log")
        ax.set_xlabel(RADIUS_LABEL)
        ax.set_ylabel(AMPLITUDE_LABEL)
        ax.legend(loc="best", fontsize=6, ncol=2)
    return art


def _bands(ax, art: dict, name: str, data: dict | None, show: bool) -> None:
    """16-84 % band and median (with bootstrap error) of one harmonic."""
    if data is None or not show:
        return
    color = COLORS[name]
    rs = np.asarray(data["radius_m"]) * 1e6
    art[f"{name}_band"] = ax.fill_between(
        rs,
        data[f"{name}_q16"],
        data[f"{name}_q84"],
        color=color,
        alpha=0.22,
        lw=0,
        label=f"{_NAMES[name]} simulated 16-84 %",
    )
    art[f"{name}_median"] = ax.errorbar(
        rs,
        data[f"{name}_median"],
        yerr=data[f"{name}_median_err"],
        fmt="o",
        ms=4,
        capsize=2,
        color=color,
        mfc="white",
        label=f"{_NAMES[name]} simulated median",
    )
