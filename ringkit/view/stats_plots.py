"""Figures of amplitude statistics over disorder realizations (pyplot-free, ``ax=None`` style).

Public API
----------
plot_amplitude_histogram(samples, ax=None, *, quantiles=None, noise_floor=None, ...)
    Histogram of per-realization amplitudes with quantile lines and an optional noise floor.
plot_statistics(stats, axes=None)
    h/e rms, h/2e rms and mean G histograms of an
    :class:`ringkit.transport.amplitude_stats.AmplitudeStatistics`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from ringkit.view.style import COLORS, new_figure

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes

__all__ = ["plot_amplitude_histogram", "plot_statistics"]

_LABELS = {
    "amplitude_he_rms": ("h/e rms amplitude (e²/h)", COLORS["he"]),
    "amplitude_h2e_rms": ("h/2e rms amplitude (e²/h)", COLORS["h2e"]),
    "mean_conductance": ("mean G (e²/h)", "0.35"),
}


def plot_amplitude_histogram(
    samples,
    ax: Axes | None = None,
    *,
    quantiles: dict | None = None,
    noise_floor: float | None = None,
    xlabel: str = "h/e rms amplitude (e²/h)",
    color: str | None = None,
    bins: int | str = "auto",
) -> Axes:
    """Histogram of one amplitude over realizations.

    Parameters
    ----------
    samples : array (n,)
        Values in e^2/h.
    quantiles : dict, optional
        ``{probability: (value, error)}``; each is drawn as a vertical line with a shaded
        +-error band and labelled in percent.
    noise_floor : float, optional
        Drawn as a dashed line (e^2/h).
    """
    if ax is None:
        _, axes = new_figure(1, 1, size=(5.0, 3.2))
        ax = axes[0, 0]
    x = np.asarray(samples, dtype=float)
    c = color or COLORS["he"]
    if not np.ptp(x) > 1e-9 * max(float(np.max(np.abs(x))), 1e-300):
        bins = 1  # (nearly) all equal: numpy's bin rules need a resolvable range
    ax.hist(x, bins=bins, color=c, alpha=0.55, edgecolor="white", label=f"{x.size} realizations")
    for p, (val, err) in sorted((quantiles or {}).items()):
        ax.axvspan(val - err, val + err, color="0.5", alpha=0.2, lw=0)
        ax.axvline(val, color="0.15", lw=1.0)
        ax.annotate(
            f"{100 * p:.0f} %",
            (val, 1.0),
            xycoords=("data", "axes fraction"),
            ha="center",
            va="bottom",
            fontsize="small",
        )
    if noise_floor is not None:
        ax.axvline(noise_floor, color="0.3", ls="--", lw=1.0, label="noise floor")
    ax.set_xlabel(xlabel)
    ax.set_ylabel("realizations")
    ax.legend(loc="upper right", fontsize="small", frameon=False)
    return ax


def plot_statistics(stats, axes=None):
    """Three histograms (h/e rms, h/2e rms, mean G) of an AmplitudeStatistics; returns axes."""
    from ringkit.analysis.ensemble_stats import AMPLITUDE_COLUMNS

    if axes is None:
        _, grid = new_figure(1, 3, size=(11.0, 3.2))
        axes = grid[0]
    floor = None if stats.exceedance is None else stats.exceedance["noise_floor"]
    for j, (ax, col) in enumerate(zip(axes, AMPLITUDE_COLUMNS, strict=True)):
        label, color = _LABELS[col]
        qs = {
            float(p): (float(stats.quantiles[j, k]), float(stats.quantile_errors[j, k]))
            for k, p in enumerate(stats.q)
        }
        plot_amplitude_histogram(
            stats.samples[:, j],
            ax,
            quantiles=qs,
            noise_floor=floor if j == 0 else None,
            xlabel=label,
            color=color,
        )
    return axes
