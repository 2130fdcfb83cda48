"""Figures of a study (matplotlib through :mod:`ringkit.view`; Agg, no pyplot).

``conductance``
    G(B) per condition: a few single realizations (thin) and the ensemble average (thick),
    with the expected h/e and h/2e periods marked.
``spectra``
    Oscillation spectra (background removed) of realization 0 and of the ensemble average,
    with the h/e and h/2e bands of the ring shaded.
``amplitude``
    h/e and h/2e rms amplitudes versus the swept outer parameter (temperature, dephasing
    length, Fermi energy or gate potential); one line per combination of the other ones.

API
---
write_figures(plan, ds, fig_dir, *, fmt="png", dpi=120) -> dict of name -> Path
"""

from __future__ import annotations

import itertools
import math
import warnings
from pathlib import Path

import numpy as np

from ringkit.study.analyse import CONDITION_DIMS, reference_area
from ringkit.study.plan import StudyPlan
from ringkit.study.quantities import DIMENSIONS, format_quantity
from ringkit.units import PHI0

__all__ = ["write_figures", "MAX_PANELS"]

#: At most this many condition panels per figure (the first ones in axis order).
MAX_PANELS = 8

_DIM_OF = {
    "fermi_energy": "energy",
    "gate_potential": "energy",
    "temperature": "temperature",
    "l_phi": "length",
}
_SYMBOL = {
    "fermi_energy": "E_F",
    "gate_potential": "V_g",
    "temperature": "T",
    "l_phi": "L_phi",
}


def _label(ds, idx: tuple[int, ...], only: list[str]) -> str:
    parts = []
    for d, i in zip(CONDITION_DIMS, idx, strict=True):
        if d in only:
            v = float(ds[d].values[i])
            parts.append(f"{_SYMBOL[d]} = {format_quantity(v, _DIM_OF[d], 4)}")
    return ", ".join(parts) or "single condition"


def _conditions(ds) -> list[tuple[int, ...]]:
    shape = tuple(ds.sizes[d] for d in CONDITION_DIMS)
    return list(np.ndindex(*shape))[:MAX_PANELS]


def _grid(n: int, width: float, height: float):
    from ringkit.view.style import new_figure

    ncols = 1 if n == 1 else 2
    nrows = math.ceil(n / ncols)
    fig, axes = new_figure(nrows, ncols, size=(width * ncols, height * nrows))
    flat = list(axes.ravel())
    for ax in flat[n:]:
        ax.set_visible(False)
    return fig, flat


def _varying(ds) -> list[str]:
    return [d for d in CONDITION_DIMS if ds.sizes[d] > 1]


def _fig_conductance(plan: StudyPlan, ds, setup):
    from ringkit.view.plots import plot_conductance
    from ringkit.view.style import COLORS

    conds = _conditions(ds)
    fig, axes = _grid(len(conds), 5.2, 2.8)
    x = ds[plan.field_name].values
    g = ds["G"].transpose("realization", *CONDITION_DIMS, plan.field_name).values
    gm = ds["G_mean"].transpose(*CONDITION_DIMS, plan.field_name).values
    n_show = min(4, g.shape[0])
    vary = _varying(ds)
    for ax, idx in zip(axes, conds, strict=False):
        if plan.field_name == "flux":
            for r in range(n_show):
                ax.plot(x / PHI0, g[(r, *idx)], lw=0.6, alpha=0.6, color=COLORS["lattice"])
            ax.plot(x / PHI0, gm[idx], lw=1.6, color=COLORS["tightbinding"], label="ensemble mean")
            ax.set_xlabel("flux through the hole (h/e)")
            ax.set_ylabel("G (e²/h)")
        else:
            for r in range(n_show):
                plot_conductance(x, g[(r, *idx)], ax, kind="lattice", lw=0.6, alpha=0.6)
            plot_conductance(
                x,
                gm[idx],
                ax,
                kind="tightbinding",
                lw=1.6,
                period=setup.expected_period_he,
                label=f"mean of {g.shape[0]}",
            )
        ax.set_title(_label(ds, idx, vary), fontsize=8.5)
    return fig


def _fig_spectra(plan: StudyPlan, ds, setup):
    from ringkit.analysis.extract import extract_oscillations
    from ringkit.analysis.spectrum import ab_bands
    from ringkit.view.plots import plot_spectrum

    conds = _conditions(ds)
    fig, axes = _grid(len(conds), 5.2, 2.8)
    x = ds[plan.field_name].values
    field = x / reference_area(setup) if plan.field_name == "flux" else x
    g = ds["G"].transpose("realization", *CONDITION_DIMS, plan.field_name).values
    gm = ds["G_mean"].transpose(*CONDITION_DIMS, plan.field_name).values
    flux_mode = plan.field_name == "flux"
    # flux tube: equivalent-field frequencies -> oscillations per flux quantum h/e
    to_x = PHI0 / reference_area(setup) if flux_mode else 1.0
    bands = ab_bands(setup.r_in, setup.r_out, (1, 2))
    if flux_mode:  # every path encloses the same flux: lines at 1 and 2 per h/e
        bands = {1: (0.95, 1.05), 2: (1.95, 2.05)}
    a = plan.config["analysis"]
    vary = _varying(ds)
    for ax, idx in zip(axes, conds, strict=False):
        top = 0.0
        for trace, kind, label in (
            (g[(0, *idx)], "lattice", "realization 0"),
            (gm[idx], "tightbinding", "ensemble mean"),
        ):
            if np.ptp(trace) == 0:
                continue
            try:
                res = extract_oscillations(
                    field,
                    trace,
                    r_in=setup.r_in,
                    r_out=setup.r_out,
                    background=a["background"],
                    window=a["window"],
                )
            except ValueError:
                continue
            sp = res.spectrum
            top = max(top, float(np.max(sp.amplitude)))
            plot_spectrum(
                sp.frequency * to_x,
                sp.amplitude,
                ax,
                bands=bands,
                kind=kind,
                label=label,
                area_axis=not flux_mode,
            )
            if flux_mode:
                ax.set_xlabel("oscillations per flux quantum h/e")
        if top > 0:
            ax.set_ylim(0.0, 1.1 * top)
        ax.set_title(_label(ds, idx, vary), fontsize=8.5)
    return fig


def _fig_amplitude(plan: StudyPlan, ds):
    from ringkit.view.style import AMPLITUDE_LABEL, COLORS, new_figure, style_context

    vary = _varying(ds)
    fig, axes = new_figure(1, 1, size=(5.6, 3.6))
    ax = axes[0, 0]
    with style_context():
        if not vary:  # nothing swept: amplitude of every realization
            r = ds["realization"].values
            for name, kind, lab in (
                ("amplitude_he_rms_single", "he", "h/e"),
                ("amplitude_h2e_rms_single", "h2e", "h/2e"),
            ):
                y = ds[name].values.reshape(len(r), -1)[:, 0]
                ax.plot(r, y, "o-", color=COLORS[kind], label=f"{lab}, single realization")
                m = float(ds[name.removesuffix("_single")].values.ravel()[0])
                ax.axhline(m, ls="--", color=COLORS[kind], label=f"{lab} of ensemble mean")
            ax.set_xlabel("realization")
            ax.set_xticks(r)
        else:
            xdim = vary[0]
            others = [d for d in CONDITION_DIMS if d != xdim]
            xv = ds[xdim].values.astype(float)
            finite = np.isfinite(xv)
            dim = _DIM_OF[xdim]
            unit = format_quantity(float(np.nanmax(np.abs(xv[finite]))) or 1.0, dim).split()[-1]
            factor = DIMENSIONS[dim][1][unit]
            xs = np.where(finite, xv / factor, np.nan)
            if not finite.all():  # infinite L_phi: draw at the right end, labelled
                top = np.nanmax(xs) * 1.5 if finite.any() else 1.0
                xs = np.where(finite, xs, top)
            styles = itertools.cycle(["-", ":", "-.", (0, (5, 1))])
            combos = list(np.ndindex(*(ds.sizes[d] for d in others)))
            for combo, ls in zip(combos, styles, strict=False):
                sel = dict(zip(others, combo, strict=True))
                tag = ", ".join(
                    f"{_SYMBOL[d]} = {format_quantity(float(ds[d].values[i]), _DIM_OF[d], 4)}"
                    for d, i in sel.items()
                    if ds.sizes[d] > 1
                )
                for name, kind, lab in (
                    ("amplitude_he_rms", "he", "h/e"),
                    ("amplitude_h2e_rms", "h2e", "h/2e"),
                ):
                    single = ds[f"{name}_single"].isel(sel).mean("realization").values
                    mean = ds[name].isel(sel).values
                    ax.plot(
                        xs,
                        single,
                        marker="o",
                        ls=ls,
                        color=COLORS[kind],
                        label=f"{lab} single" + (f" ({tag})" if tag else ""),
                    )
                    ax.plot(
                        xs,
                        mean,
                        marker="s",
                        ls=ls,
                        lw=0.8,
                        mfc="white",
                        color=COLORS[kind],
                        label=f"{lab} of <G>" + (f" ({tag})" if tag else ""),
                    )
            ax.set_xlabel(f"{_SYMBOL[xdim]} ({unit})")
            labels = [
                "inf (coherent)" if not fin else f"{x:.4g}"
                for x, fin in zip(xs, finite, strict=True)
            ]
            ax.set_xticks(xs, labels)
            ax.minorticks_off()
        ax.set_ylabel(AMPLITUDE_LABEL)
        vals = np.concatenate(
            [ds[n].values.ravel() for n in ("amplitude_he_rms_single", "amplitude_h2e_rms_single")]
        )
        vals = vals[np.isfinite(vals)]
        if vals.size and np.all(vals > 0):  # NaN: band not resolved (see summary.json)
            ax.set_yscale("log")
        ax.legend(loc="best", fontsize=6.5)
    return fig


def _fig_resistance(ds):
    """R_mn,kl(B) of every configuration, first condition, mean over the realizations."""
    from ringkit.study.multiterminal import first_condition
    from ringkit.view.plots import plot_resistance_configs

    return plot_resistance_configs(first_condition(ds)).figure


def write_figures(
    plan: StudyPlan, ds, fig_dir: Path, *, fmt: str = "png", dpi: int = 120, setup=None
) -> dict[str, Path]:
    """Draw the study figures into ``fig_dir``; returns ``{name: path}``."""
    from ringkit.view.style import style_context

    out: dict[str, Path] = {}
    makers = {
        "conductance": lambda: _fig_conductance(plan, ds, setup),
        "spectra": lambda: _fig_spectra(plan, ds, setup),
        "amplitude": lambda: _fig_amplitude(plan, ds),
    }
    if "R_ohm" in ds:
        makers["resistance"] = lambda: _fig_resistance(ds)
    for name, make in makers.items():
        with warnings.catch_warnings():
            # analysis caveats are reported once in summary.json, not per figure
            warnings.simplefilter("ignore", UserWarning)
            fig = make()
        path = Path(fig_dir) / f"{name}.{fmt}"
        with style_context():
            fig.savefig(path, format=fmt, dpi=dpi)
        out[name] = path
    return out
