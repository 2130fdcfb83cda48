"""Figure functions over plain arrays (SI in, display units out).

Every function takes ``ax=None`` (a new pyplot-free figure is made when omitted), draws in the
ringkit style (:mod:`ringkit.view.style`) and returns the Axes it drew on (``ax.figure`` is the
Figure). Inputs are SI: field in T, radius in m, area in m^2, conductance in e^2/h, frequency
in 1/T.

Public API
----------
plot_conductance(field, conductance, ax=None, *, period=None, ...)
    G(B) with an optional h/e period mark (and h/2e mark).
mark_period(ax, period, *, field_unit, label="h/e", ...)
    Scale bar one period long, labelled with its value (``update_period_mark`` moves it).
plot_spectrum(frequency, amplitude, ax=None, *, bands=None, ...)
    Oscillation spectrum with the h/e and h/2e bands shaded and a top axis in enclosed area.
plot_ring_sites(positions, ax=None, *, values=None, lead_sites=None, probe_sites=None)
    Lattice sites of the ring coloured by a per-site value (e.g. disorder potential).
plot_ring_sketch(r_in, r_out, ax=None, *, lead_angles=(pi, 0), lead_width=None, gate_arm=None)
    Outline of an annular ring with its leads and a scale bar (no lattice needed).
plot_background(field, signal, background, residual, axes=None)
    Measured trace with its background (top) and the residual (bottom).
plot_amplitude_scaling(radius, amplitudes, ax=None, *, points=None)
    Predicted h/e and h/2e amplitudes versus radius, with optional simulated points.
set_headroom(ax, fraction, ys=None)
    Extend the y range so the top ``fraction`` of the axes stays free for period marks.
plot_twin(ax, field, values, *, ylabel, kind, ...)
    A second curve versus field on a right-hand y axis of its own (e.g. a simulation beside
    a measurement); returns the twin Axes.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np

from ringkit.units import PHI0
from ringkit.view.style import (
    AMPLITUDE_LABEL,
    AREA_LABEL,
    COLORS,
    CONDUCTANCE_LABEL,
    DELTA_G_LABEL,
    FREQUENCY_LABEL,
    RADIUS_LABEL,
    field_label,
    field_scale,
    field_unit_for,
    new_figure,
    style_context,
)

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes
    from matplotlib.lines import Line2D
    from matplotlib.text import Annotation

__all__ = [
    "plot_conductance",
    "mark_period",
    "update_period_mark",
    "set_headroom",
    "plot_spectrum",
    "plot_ring_sites",
    "plot_ring_sketch",
    "plot_background",
    "plot_amplitude_scaling",
    "plot_twin",
    "plot_resistance_configs",
]

_ORDER_NAMES = {1: "h/e", 2: "h/2e"}
_ORDER_COLORS = {1: COLORS["he"], 2: COLORS["h2e"]}


def _axes(ax: Axes | None, size: tuple[float, float] = (6.4, 3.4)) -> Axes:
    if ax is not None:
        return ax
    _, axes = new_figure(1, 1, size=size)
    return axes[0, 0]


def _unit(field: np.ndarray, field_unit: str) -> str:
    return field_unit_for(field) if field_unit == "auto" else field_unit


def _fmt_field(value_t: float) -> str:
    """Readable field value with a unit (mT below 0.5 T)."""
    unit = field_unit_for(value_t)
    return f"{value_t * field_scale(unit):.3g} {unit}"


def plot_conductance(
    field: np.ndarray,
    conductance: np.ndarray,
    ax: Axes | None = None,
    *,
    label: str | None = None,
    kind: str = "model",
    field_unit: str = "auto",
    period: float | None = None,
    mark_h2e: bool = True,
    delta: bool = False,
    **line_kw,
) -> Axes:
    """Plot G(B).

    Parameters
    ----------
    field : ndarray
        Magnetic field in T.
    conductance : ndarray
        Conductance in e^2/h (or its oscillating part when ``delta=True``).
    ax : Axes, optional
    label : str, optional
        Legend label.
    kind : str
        Key of :data:`~ringkit.view.style.COLORS` choosing the colour.
    field_unit : {"auto", "mT", "T"}
    period : float, optional
        h/e field period in T; draws period marks (h/e and, if ``mark_h2e``, h/2e).
    delta : bool
        Label the y axis as the oscillating part ``delta G``.
    **line_kw
        Passed to :meth:`Axes.plot`.

    Returns
    -------
    Axes
    """
    ax = _axes(ax)
    b = np.asarray(field, dtype=float)
    unit = _unit(b, field_unit)
    with style_context():
        line_kw.setdefault("color", COLORS.get(kind, COLORS["model"]))
        ax.plot(b * field_scale(unit), np.asarray(conductance, dtype=float), label=label, **line_kw)
        ax.set_xlabel(field_label(unit))
        ax.set_ylabel(DELTA_G_LABEL if delta else CONDUCTANCE_LABEL)
        if period is not None and period > 0:
            set_headroom(ax, 0.4)
            mark_period(ax, period, field_unit=unit, label="h/e", kind="he", y=0.93)
            if mark_h2e:
                mark_period(ax, period / 2, field_unit=unit, label="h/2e", kind="h2e", y=0.83)
        if label:
            ax.legend(loc="upper right")
    return ax


def set_headroom(ax: Axes, fraction: float, ys: Sequence[np.ndarray] | None = None) -> None:
    """Extend the y range upwards so the top ``fraction`` of the axes is free for marks.

    ``ys`` are the data to fit (default: the y data of all lines of ``ax``).
    """
    if ys is None:
        ys = [np.asarray(ln.get_ydata(), dtype=float) for ln in ax.get_lines()]
    ys = [np.asarray(y, dtype=float) for y in ys]
    ys = [y[np.isfinite(y)] for y in ys if np.size(y)]
    if not ys or not any(y.size for y in ys):
        return
    lo = min(float(y.min()) for y in ys if y.size)
    hi = max(float(y.max()) for y in ys if y.size)
    span = hi - lo if hi > lo else max(abs(hi), 1.0) * 0.1
    lo -= 0.05 * span
    hi += 0.05 * span
    ax.set_ylim(lo, lo + (hi - lo) / (1.0 - fraction))


def mark_period(
    ax: Axes,
    period: float,
    *,
    field_unit: str,
    label: str = "h/e",
    kind: str = "he",
    y: float = 0.93,
    x0: float | None = None,
) -> tuple[Line2D, Annotation]:
    """Draw a scale bar exactly one ``period`` (T) long near the top of ``ax``.

    The bar sits at axes height ``y`` starting at data x ``x0`` (default: 5 % into the
    current x range) and is annotated ``"<label>: <period>"``.

    Returns
    -------
    (Line2D, Annotation)
        The bar (gid ``"period-<label>"``) and its label; :func:`update_period_mark` moves them.
    """
    from matplotlib.transforms import blended_transform_factory

    trans = blended_transform_factory(ax.transData, ax.transAxes)
    color = COLORS.get(kind, COLORS["he"])
    with style_context():
        (bar,) = ax.plot(
            [0.0, 1.0], [y, y], transform=trans, color=color, lw=2.2, solid_capstyle="butt",
            marker="|", markersize=7, gid=f"period-{label}",
        )  # fmt: skip
        note = ax.annotate(
            "", (0.0, y), xycoords=trans, xytext=(4, 0), textcoords="offset points",
            va="center", fontsize=8, color=color,
        )  # fmt: skip
    update_period_mark(ax, (bar, note), period, field_unit=field_unit, label=label, x0=x0)
    return bar, note


def update_period_mark(
    ax: Axes,
    mark: tuple[Line2D, Annotation],
    period: float,
    *,
    field_unit: str,
    label: str = "h/e",
    x0: float | None = None,
) -> None:
    """Move/resize a mark made by :func:`mark_period` to ``period`` (T) in the current x range."""
    bar, note = mark
    scale = field_scale(field_unit)
    lo, hi = ax.get_xlim()
    start = lo + 0.05 * (hi - lo) if x0 is None else x0
    end = start + period * scale
    bar.set_xdata([start, end])
    y = bar.get_ydata()[0]
    note.xy = (end, y)
    note.set_text(f"{label}: {_fmt_field(period)}")
    ax.set_xlim(lo, hi)


def plot_spectrum(
    frequency: np.ndarray,
    amplitude: np.ndarray,
    ax: Axes | None = None,
    *,
    bands: Mapping[int, tuple[float, float]] | None = None,
    label: str | None = None,
    kind: str = "model",
    fmax: float | None = None,
    area_axis: bool = True,
    **line_kw,
) -> Axes:
    """Plot an oscillation spectrum with the h/e and h/2e bands shaded.

    Parameters
    ----------
    frequency : ndarray
        Frequency in 1/T (Fourier conjugate of B).
    amplitude : ndarray
        Cosine amplitude in e^2/h at each frequency.
    bands : mapping order -> (f_low, f_high), optional
        Frequency bands in 1/T (e.g. from :func:`ringkit.analysis.ab_bands`); order 1 is
        labelled h/e, order 2 h/2e.
    fmax : float, optional
        Upper x limit in 1/T; default 1.3 x the top of the highest band (or all data).
    area_axis : bool
        Add a top axis with the enclosed area ``f h/e`` in µm^2.

    Returns
    -------
    Axes
    """
    ax = _axes(ax)
    f = np.asarray(frequency, dtype=float)
    with style_context():
        line_kw.setdefault("color", COLORS.get(kind, COLORS["model"]))
        ax.plot(f, np.asarray(amplitude, dtype=float), label=label, **line_kw)
        for order, (lo, hi) in sorted((bands or {}).items()):
            name = _ORDER_NAMES.get(order, f"h/{order}e")
            ax.axvspan(
                lo, hi, color=_ORDER_COLORS.get(order, "#cccccc"), alpha=0.25, lw=0,
                gid=f"band-{order}",
            )  # fmt: skip
            ax.annotate(
                name, ((lo + hi) / 2, 0.97), xycoords=("data", "axes fraction"), ha="center",
                va="top", fontsize=8, color=_ORDER_COLORS.get(order, "k"), gid=f"band-{order}",
            )  # fmt: skip
        if fmax is None and bands:
            fmax = 1.3 * max(hi for _, hi in bands.values())
        if fmax is not None:
            ax.set_xlim(0.0, fmax)
        ax.set_ylim(bottom=0.0)
        ax.set_xlabel(FREQUENCY_LABEL)
        ax.set_ylabel(AMPLITUDE_LABEL)
        if area_axis and not any(getattr(c, "_ringkit_area", False) for c in ax.child_axes):
            sec = ax.secondary_xaxis(
                "top", functions=(lambda x: x * PHI0 * 1e12, lambda a: a / (PHI0 * 1e12))
            )
            sec.set_xlabel(AREA_LABEL)
            sec._ringkit_area = True  # type: ignore[attr-defined]
        if label:
            ax.legend(loc="upper right")
    return ax


def plot_ring_sites(
    positions: np.ndarray,
    ax: Axes | None = None,
    *,
    values: np.ndarray | None = None,
    value_label: str = "on-site disorder (meV)",
    lead_sites: Sequence[np.ndarray] | None = None,
    probe_sites: np.ndarray | None = None,
    colorbar: bool = True,
) -> Axes:
    """Draw the lattice sites of a ring (positions in m, shown in nm).

    Parameters
    ----------
    positions : ndarray, shape (N, 2)
        Site coordinates in m.
    values : ndarray, shape (N,), optional
        Per-site value used as colour (e.g. disorder potential already in meV).
    lead_sites : sequence of (M, 2) arrays, optional
        Coordinates (m) of the lead interface sites; drawn as blue squares.
    probe_sites : ndarray, shape (P, 2), optional
        Coordinates (m) of dephasing-probe sites; drawn as red circles.
    """
    ax = _axes(ax, size=(4.0, 4.0))
    pos = np.asarray(positions, dtype=float) * 1e9
    size = max(0.3, min(12.0, 4e3 / max(len(pos), 1)))
    with style_context():
        if values is None:
            ax.scatter(pos[:, 0], pos[:, 1], s=size, color=COLORS["lattice"], lw=0)
        else:
            sc = ax.scatter(pos[:, 0], pos[:, 1], s=size, c=values, cmap="RdBu_r", lw=0)
            if colorbar:
                ax.figure.colorbar(sc, ax=ax, label=value_label, shrink=0.8)
        for lead in lead_sites or ():
            lp = np.asarray(lead, dtype=float) * 1e9
            ax.scatter(lp[:, 0], lp[:, 1], s=max(size, 6), marker="s", color=COLORS["lead"])
        if probe_sites is not None and len(probe_sites):
            pp = np.asarray(probe_sites, dtype=float) * 1e9
            ax.scatter(pp[:, 0], pp[:, 1], s=30, facecolor="none", edgecolor=COLORS["probe"])
        ax.set_aspect("equal")
        ax.set_xlabel("x (nm)")
        ax.set_ylabel("y (nm)")
        ax.grid(False)
    return ax


def plot_ring_sketch(
    r_in: float,
    r_out: float,
    ax: Axes | None = None,
    *,
    lead_angles: tuple[float, float] = (math.pi, 0.0),
    lead_width: float | None = None,
    gate_arm: str | None = None,
    probes: int = 0,
    scale_bar: bool = True,
    leads: Sequence[dict] | None = None,
) -> Axes:
    """Outline of an annular ring (radii in m, drawn in nm) with its leads.

    The upper arm runs counter-clockwise from the right lead (``lead_angles[1]``) to the left
    lead; a gate on ``gate_arm`` ("upper"/"lower") is drawn as a shaded arc and ``probes``
    dephasing probes as red dots on the mean circle. With ``scale_bar`` (default) the axes
    are hidden and a labelled scale bar (1, 2 or 5 x 10^n nm) is drawn instead of x/y axes
    in nm. ``leads`` (``RingGeometry.lead_outlines()``: one dict per lead with a ``polygon``
    in m) draws every lead of a multi-terminal ring as its horizontal strip, numbered by its
    terminal index (docs/multiterminal.md "Lead layout"); without it the two leads at
    ``lead_angles`` are drawn as radial strips.
    """
    from matplotlib.patches import Circle, Wedge

    ax = _axes(ax, size=(4.0, 4.0))
    ri, ro = r_in * 1e9, r_out * 1e9
    a_l, a_r = lead_angles
    w_lead = (lead_width if lead_width else (r_out - r_in)) * 1e9
    with style_context():
        if ro - ri > 1e-6 * ro:
            ax.add_patch(Wedge((0, 0), ro, 0, 360, width=ro - ri, color="#c9d6ea", lw=0))
        else:  # a chain (single-channel ring): its circle
            ax.add_patch(Circle((0, 0), ro, fill=False, color="#7f9cc8", lw=2.5))
        if gate_arm in ("upper", "lower"):
            t1, t2 = np.degrees(a_r), np.degrees(a_l)
            if gate_arm == "lower":
                t1, t2 = t2, t1 + 360.0
            ax.add_patch(
                Wedge((0, 0), ro, t1, t2, width=ro - ri, color=COLORS["he"], alpha=0.5, lw=0)
            )
        for lead in leads or ():
            poly = np.asarray(lead["polygon"], dtype=float) * 1e9
            if lead["width"] > 0:
                ax.fill(poly[:, 0], poly[:, 1], color=COLORS["lead"], alpha=0.6, lw=0,
                        gid=f"lead-{lead['index']}")  # fmt: skip
            else:  # chain lead: a line
                ax.plot(poly[:2, 0], poly[:2, 1], color=COLORS["lead"], lw=2.5,
                        gid=f"lead-{lead['index']}")  # fmt: skip
            x_end = poly[:, 0][np.argmax(np.abs(poly[:, 0]))]
            ax.text(x_end + math.copysign(0.05 * ro, x_end), poly[:, 1].mean(),
                    str(lead["index"]), fontsize=8, va="center",
                    ha="right" if x_end < 0 else "left",
                    gid=f"lead-label-{lead['index']}")  # fmt: skip
        for ang in () if leads else (a_l, a_r):
            u = np.array([math.cos(ang), math.sin(ang)])
            n = np.array([-u[1], u[0]])
            p0, p1 = u * (ri + ro) / 2, u * ro * 1.6
            corners = np.array(
                [p0 + n * w_lead / 2, p1 + n * w_lead / 2, p1 - n * w_lead / 2, p0 - n * w_lead / 2]
            )
            ax.fill(corners[:, 0], corners[:, 1], color=COLORS["lead"], alpha=0.6, lw=0)
        if probes:
            ang = np.linspace(0, 2 * math.pi, probes, endpoint=False) + math.pi / probes
            rm = (ri + ro) / 2
            ax.plot(rm * np.cos(ang), rm * np.sin(ang), "o", color=COLORS["probe"], ms=4)
        lim = max([ro * 1.7] + [1.12e9 * np.abs(ld["polygon"]).max() for ld in leads or ()])
        ax.set_xlim(-lim, lim)
        ax.set_ylim(-lim, lim)
        ax.set_aspect("equal")
        ax.grid(False)
        if scale_bar:
            # a scale bar instead of axes: an outline needs no coordinates, and tick labels
            # would cost ~40 ms per redraw of an interactive panel
            ax.set_axis_off()
            length = _nice_length(0.5 * ro)
            x0, y0 = -0.92 * lim, -0.9 * lim
            ax.plot([x0, x0 + length], [y0, y0], color="k", lw=2.5, solid_capstyle="butt",
                    gid="scale-bar")  # fmt: skip
            ax.text(x0 + length / 2, y0 + 0.04 * lim, _fmt_length(length), ha="center",
                    va="bottom", fontsize=8)  # fmt: skip
        else:
            ax.set_xlabel("x (nm)")
            ax.set_ylabel("y (nm)")
    return ax


def plot_resistance_configs(ds, ax: Axes | None = None) -> Axes:
    """R_mn,kl(B) in ohm of every configuration of a ``resistance_field_sweep`` dataset.

    One line per configuration (label ``R_mn,kl``), field in the unit that suits the sweep
    (flux sweeps in h/e). docs/multiterminal.md.
    """
    from ringkit.contacts import Contacts

    ax = _axes(ax, size=(6.0, 3.6))
    with style_context():
        if "B" in ds.coords:
            x = np.asarray(ds["B"].values, dtype=float)
            unit = field_unit_for(x)
            xs, xlabel = x * field_scale(unit), f"B ({unit})"
        else:
            xs, xlabel = np.asarray(ds["flux"].values, dtype=float) / PHI0, "Φ (h/e)"
        for cfg in ds["config"].values:
            ax.plot(xs, ds["R_ohm"].sel(config=cfg).values, lw=1.0,
                    label=Contacts.parse(str(cfg)).label)  # fmt: skip
        ax.set_xlabel(xlabel)
        ax.set_ylabel("R (Ω)")
        ax.legend(fontsize=8)
    return ax


def _nice_length(target: float) -> float:
    """Largest 1, 2 or 5 x 10^n not above ``target`` (same unit)."""
    exp = math.floor(math.log10(target))
    for m in (5.0, 2.0, 1.0):
        if m * 10**exp <= target:
            return m * 10**exp
    return 10**exp


def _fmt_length(nm: float) -> str:
    return f"{nm / 1000:g} µm" if nm >= 1000 else f"{nm:g} nm"


def plot_background(
    field: np.ndarray,
    signal: np.ndarray,
    background: np.ndarray,
    residual: np.ndarray,
    axes: Sequence[Axes] | None = None,
    *,
    field_unit: str = "auto",
    period: float | None = None,
) -> tuple[Axes, Axes]:
    """Trace with its background (top) and the residual oscillation (bottom).

    Parameters
    ----------
    field : ndarray
        Field in T.
    signal, background, residual : ndarray
        Conductance, background and ``signal - background`` in e^2/h.
    axes : pair of Axes, optional
    period : float, optional
        h/e period in T, marked on the residual panel.
    """
    if axes is None:
        _, grid = new_figure(2, 1, size=(6.4, 4.6), sharex=True)
        axes = (grid[0, 0], grid[1, 0])
    top, bottom = axes
    b = np.asarray(field, dtype=float)
    unit = _unit(b, field_unit)
    with style_context():
        s = field_scale(unit)
        top.plot(b * s, signal, color=COLORS["measured"], label="trace")
        top.plot(b * s, background, color=COLORS["background"], ls="--", label="background")
        top.set_ylabel(CONDUCTANCE_LABEL)
        top.legend(loc="best")
        bottom.plot(b * s, residual, color=COLORS["residual"], label="residual")
        bottom.set_ylabel(DELTA_G_LABEL)
        bottom.set_xlabel(field_label(unit))
        if period is not None and period > 0:
            set_headroom(bottom, 0.4)
            mark_period(bottom, period, field_unit=unit, label="h/e", kind="he", y=0.93)
            mark_period(bottom, period / 2, field_unit=unit, label="h/2e", kind="h2e", y=0.83)
    return top, bottom


def plot_amplitude_scaling(
    radius: np.ndarray,
    amplitudes: Mapping[int, np.ndarray],
    ax: Axes | None = None,
    *,
    points: Mapping[int, tuple[np.ndarray, np.ndarray, np.ndarray | None]] | None = None,
    logy: bool = True,
) -> Axes:
    """Predicted oscillation amplitudes versus ring radius.

    Parameters
    ----------
    radius : ndarray
        Ring radii in m (shown in µm).
    amplitudes : mapping order -> ndarray
        Predicted amplitude (e^2/h) of the h/e (order 1) and h/2e (order 2) oscillations.
    points : mapping order -> (radius [m], amplitude [e^2/h], error or None), optional
        Simulated ensemble points drawn with error bars.
    logy : bool
        Logarithmic amplitude axis (exp(-L/L_phi) decays are straight lines).
    """
    ax = _axes(ax)
    r = np.asarray(radius, dtype=float) * 1e6
    with style_context():
        for order, amp in sorted(amplitudes.items()):
            ax.plot(
                r,
                amp,
                color=_ORDER_COLORS.get(order, "k"),
                label=f"{_ORDER_NAMES.get(order, order)} model",
            )
        for order, (pr, pa, perr) in sorted((points or {}).items()):
            ax.errorbar(
                np.asarray(pr) * 1e6,
                pa,
                yerr=perr,
                fmt="o",
                ms=4,
                capsize=2,
                color=_ORDER_COLORS.get(order, "k"),
                mfc="white",
                label=f"{_ORDER_NAMES.get(order, order)} simulated",
            )
        if logy:
            ax.set_yscale("log")
        ax.set_xlabel(RADIUS_LABEL)
        ax.set_ylabel(AMPLITUDE_LABEL)
        ax.legend(loc="best")
    return ax


def plot_twin(
    ax: Axes,
    field: np.ndarray,
    values: np.ndarray,
    *,
    ylabel: str,
    kind: str = "simulation",
    label: str | None = None,
    field_unit: str = "auto",
    headroom: float = 0.4,
    **line_kw,
) -> Axes:
    """Plot ``values(field)`` on a right-hand y axis of ``ax`` (own scale, coloured label).

    Parameters
    ----------
    ax : Axes
        Axes whose x axis (field in ``field_unit``) is shared.
    field : ndarray
        Field in T.
    values : ndarray
        Values in the unit named by ``ylabel``.
    ylabel : str
        Label of the right-hand axis (with unit).
    headroom : float
        Fraction of the height kept free at the top (for period marks of ``ax``).

    Returns
    -------
    Axes
        The twin axes.
    """
    b = np.asarray(field, dtype=float)
    unit = _unit(b, field_unit)
    color = COLORS.get(kind, COLORS["simulation"])
    line_kw.setdefault("color", color)
    line_kw.setdefault("lw", 1.0)
    with style_context():
        twin = ax.twinx()
        twin.plot(b * field_scale(unit), np.asarray(values, dtype=float), label=label, **line_kw)
        twin.set_ylabel(ylabel, color=color)
        twin.tick_params(axis="y", colors=color)
        twin.grid(False)
        if headroom:
            set_headroom(twin, headroom)
        if label:
            twin.legend(loc="lower right", fontsize=7)
    return twin
