"""``ringkit analyze FILE``: h/e and h/2e analysis of a measured (or exported) trace file.

Prints a readable summary, or with ``--json`` exactly one JSON object on stdout with at
least ``period_he_T``, ``area_m2``, ``radius_m``, ``amplitude_he_e2h`` and
``amplitude_h2e_e2h`` (rms of the band content, e^2/h), ``n_points_used`` and
``n_points_dropped``. ``--figures DIR`` writes one PNG per trace (trace and background,
residual with the h/e band content, spectrum with the bands marked). NaN becomes ``null``
(e.g. an h/2e amplitude the field step cannot resolve; the reason is in ``warnings``).

The top-level numbers are those of the trace chosen with ``--trace`` (default 0, the first
sweep); ``traces`` lists every trace. ``n_points_used`` counts the points of that trace that
entered the spectrum; ``n_points_dropped`` counts the rows of the file that the loader
dropped (NaN, unusable values, too-short sweeps; reasons in ``drop_reasons``) plus the
points of that trace trimmed by the background removal (moving-average edges).

Bad input (unreadable or malformed file, unknown unit, field range too short, sampling too
coarse) ends with one ``ringkit: error: ...`` line and exit status 2.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys
import warnings
from pathlib import Path
from typing import Any

from ringkit.cli import UserError

__all__ = ["register", "run", "parse_length"]

_LENGTH_UNITS = {"m": 1.0, "mm": 1e-3, "um": 1e-6, "µm": 1e-6, "nm": 1e-9}


def parse_length(text: str) -> float:
    """Length in m from ``"6.3e-7"``, ``"630nm"``, ``"0.63um"`` or ``"0.63 µm"``."""
    m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*([a-zµ]*)\s*", text)
    if not m or m[2] not in ("", *_LENGTH_UNITS):
        raise argparse.ArgumentTypeError(f"not a length: {text!r} (e.g. 630nm, 0.63um, 6.3e-7)")
    try:
        value = float(m[1]) * (_LENGTH_UNITS[m[2]] if m[2] else 1.0)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a length: {text!r}") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"length must be > 0: {text!r}")
    return value


def _column(text: str) -> str | int:
    return int(text) if text.isdigit() else text


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``analyze`` subcommand."""
    p = subparsers.add_parser(
        "analyze",
        help="h/e and h/2e analysis of a magnetoresistance file",
        description=(
            "Read a delimited text file of B and R (or G) columns, remove the background and "
            "report the h/e period, effective area and radius, and the h/e and h/2e "
            "amplitudes of every sweep. Units come from headers such as 'B [mT]', "
            "'R (kOhm)', 'G (e^2/h)' or from --field-unit/--signal-unit."
        ),
    )
    p.add_argument("file", help="data file (or folder of .txt/.dat/.csv/.tsv files)")
    g = p.add_argument_group("reading the file")
    g.add_argument("--field", type=_column, help="field column (name or 0-based index)")
    g.add_argument("--signal", type=_column, help="R or G column (name or 0-based index)")
    g.add_argument("--field-unit", help="unit of the field column, e.g. T, mT, G")
    g.add_argument("--signal-unit", help="unit of the signal column, e.g. Ohm, kOhm, S, e^2/h")
    g.add_argument("--group-by", type=_column, help="column splitting the traces (e.g. T)")
    g.add_argument("--delimiter", help="column delimiter, e.g. ',' or tab (default: detected)")
    g.add_argument("--decimal", default=".", help="decimal mark ('.' or ',')")
    g.add_argument(
        "--series-resistance", type=float, default=0.0, help="Ohm subtracted before G = 1/R"
    )
    g.add_argument(
        "--four-terminal", action="store_true", help="four-terminal data (flagged caveat)"
    )
    g.add_argument(
        "--reference-resistance",
        type=float,
        help="two-terminal R (Ohm) for the linearised four-terminal conversion",
    )
    g.add_argument("--no-split", action="store_true", help="do not split up/down sweeps")
    a = p.add_argument_group("analysis")
    a.add_argument("--r-in", type=parse_length, help="ring inner radius (e.g. 600nm)")
    a.add_argument("--r-out", type=parse_length, help="ring outer radius (e.g. 660nm)")
    a.add_argument(
        "--background",
        default="polynomial",
        choices=("polynomial", "savgol", "moving_average", "none"),
        help="background removal (default polynomial)",
    )
    a.add_argument("--degree", type=int, default=3, help="polynomial degree (default 3)")
    a.add_argument(
        "--method", default="fft", choices=("fft", "lombscargle"), help="spectrum method"
    )
    a.add_argument("--window", default="hann", help="spectral window (scipy name)")
    a.add_argument(
        "--dominant-order",
        type=int,
        default=1,
        choices=(1, 2),
        help="without --r-in/--r-out: the dominant peak is h/e (1) or h/2e (2)",
    )
    a.add_argument("--trace", type=int, default=0, help="trace reported in --json (default 0)")
    o = p.add_argument_group("output")
    o.add_argument("--json", action="store_true", help="print one JSON object")
    o.add_argument("--figures", metavar="DIR", help="write PNG figures into DIR")
    p.set_defaults(func=run)


def _clean(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _trace_record(index: int, trace, res, report, error: str | None) -> dict[str, Any]:
    rec: dict[str, Any] = {
        "index": index,
        "label": trace.label,
        "direction": trace.direction,
        "temperature_K": trace.temperature,
        "n_points_trace": len(trace),
    }
    if error is not None:
        rec["error"] = error
        return rec
    trimmed = len(trace) - res.n_points
    rec.update(
        period_he_T=res.period_he,
        period_he_err_T=res.period_he_err,
        frequency_he_per_T=res.frequency_he,
        area_m2=res.area,
        area_err_m2=res.area_err,
        radius_m=res.radius,
        radius_err_m=res.radius_err,
        amplitude_he_e2h=res.amplitude_he_rms,
        amplitude_h2e_e2h=res.amplitude_h2e_rms,
        amplitude_he_pp_e2h=res.amplitude_he_pp,
        amplitude_h2e_pp_e2h=res.amplitude_h2e_pp,
        relative_amplitude_he=res.relative_amplitude_he,
        relative_amplitude_h2e=res.relative_amplitude_h2e,
        noise_he_rms_e2h=res.noise_he_rms,
        noise_h2e_rms_e2h=res.noise_h2e_rms,
        mean_conductance_e2h=res.mean_conductance,
        peak_significance=res.peak_significance,
        band_source=res.band_source,
        bands_per_T={"h/e": list(res.bands[1]), "h/2e": list(res.bands[2])},
        background=res.background.method if res.background is not None else "none",
        background_gain_he=res.background_gain_he,
        background_gain_h2e=res.background_gain_h2e,
        n_points_used=res.n_points,
        n_points_trimmed_background=trimmed,
        n_points_dropped=report.n_dropped + trimmed,
        notes=list(res.notes),
    )
    return rec


def _summary_lines(rec: dict[str, Any]) -> list[str]:
    head = f"trace {rec['index']}: {rec['label']} ({rec['n_points_trace']} points"
    if rec.get("temperature_K") is not None:
        head += f", T = {rec['temperature_K']:g} K"
    lines = [head + ")"]
    if "error" in rec:
        return [*lines, f"  not analysed: {rec['error']}"]

    def num(x: float | None, fmt: str) -> str:
        return "n/a" if x is None or not math.isfinite(x) else format(x, fmt)

    b1, b2 = rec["bands_per_T"]["h/e"], rec["bands_per_T"]["h/2e"]
    rel = rec["relative_amplitude_he"]
    lines += [
        f"  bands ({rec['band_source']}): h/e {b1[0]:.4g}-{b1[1]:.4g} 1/T, "
        f"h/2e {b2[0]:.4g}-{b2[1]:.4g} 1/T",
        f"  h/e period      {rec['period_he_T'] * 1e3:.5g} mT +- "
        f"{rec['period_he_err_T'] * 1e3:.2g} mT",
        f"  area            {rec['area_m2'] * 1e12:.5g} um^2 +- {rec['area_err_m2'] * 1e12:.2g}",
        f"  radius          {rec['radius_m'] * 1e6:.5g} um +- {rec['radius_err_m'] * 1e6:.2g}",
        f"  h/e amplitude   rms {num(rec['amplitude_he_e2h'], '.4g')} e^2/h, "
        f"pp {num(rec['amplitude_he_pp_e2h'], '.4g')} e^2/h, dG/G = "
        + ("n/a" if rel is None or not math.isfinite(rel) else f"{100 * rel:.3g} %"),
        f"  h/2e amplitude  rms {num(rec['amplitude_h2e_e2h'], '.4g')} e^2/h, "
        f"pp {num(rec['amplitude_h2e_pp_e2h'], '.4g')} e^2/h",
        f"  noise in bands  {num(rec['noise_he_rms_e2h'], '.2g')} / "
        f"{num(rec['noise_h2e_rms_e2h'], '.2g')} e^2/h rms; peak/floor "
        f"{num(rec['peak_significance'], '.3g')}",
        f"  points          {rec['n_points_used']} used, "
        f"{rec['n_points_trimmed_background']} trimmed by the background",
    ]
    return lines


def run(args: argparse.Namespace) -> int:
    """Run ``ringkit analyze``."""
    from ringkit.analysis import extract_oscillations, load_traces

    if (args.r_in is None) != (args.r_out is None):
        raise UserError("give both --r-in and --r-out, or neither")
    if args.r_in is not None and args.r_out < args.r_in:
        raise UserError(f"--r-out ({args.r_out:g} m) must be >= --r-in ({args.r_in:g} m)")
    path = Path(args.file)
    if not path.exists():
        raise UserError(f"{path}: no such file or folder")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        loaded = load_traces(
            path,
            field=args.field,
            signal=args.signal,
            field_unit=args.field_unit,
            signal_unit=args.signal_unit,
            group_by=args.group_by,
            delimiter={"\\t": "\t", "tab": "\t"}.get(args.delimiter, args.delimiter),
            decimal=args.decimal,
            series_resistance=args.series_resistance,
            terminals="four" if args.four_terminal else "two",
            reference_resistance=args.reference_resistance,
            split_sweeps=not args.no_split,
        )
        if not 0 <= args.trace < len(loaded.traces):
            raise UserError(f"--trace {args.trace}: the file has {len(loaded.traces)} trace(s)")
        records, results = [], []
        geometry = {} if args.r_in is None else {"r_in": args.r_in, "r_out": args.r_out}
        for i, tr in enumerate(loaded.traces):
            opts = {"degree": args.degree} if args.background == "polynomial" else {}
            try:
                res = extract_oscillations(
                    tr.field,
                    tr.conductance,
                    background=args.background,
                    background_options=opts,
                    method=args.method,
                    window=args.window,
                    dominant_order=args.dominant_order,
                    **geometry,
                )
                error = None
            except ValueError as err:
                if i == args.trace:
                    raise UserError(f"{tr.label}: {err}") from err
                res, error = None, str(err)
            records.append(_trace_record(i, tr, res, loaded.report, error))
            results.append(res)
    messages = list(dict.fromkeys(str(w.message) for w in caught))
    figures: list[str] = []
    if args.figures:
        out = Path(args.figures)
        out.mkdir(parents=True, exist_ok=True)
        for tr, res in zip(loaded.traces, results, strict=True):
            if res is not None:
                figures.append(str(write_figure(out, tr, res)))
    report = loaded.report
    if args.json:
        top = dict(records[args.trace])
        top.update(
            file=str(path),
            n_traces=len(records),
            n_points_file=report.n_points,
            n_points_dropped_loader=report.n_dropped,
            drop_reasons=report.dropped,
            adjusted=report.adjusted,
            caveats=list(report.caveats),
            warnings=messages,
            figures=figures,
            traces=records,
        )
        json.dump(_clean(top), sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
        return 0
    print(f"file: {path}")
    print(report.summary())
    for rec in records:
        print("\n".join(_summary_lines(rec)))
    for m in messages:
        print(f"warning: {m}")
    for f in figures:
        print(f"figure: {f}")
    return 0


def write_figure(directory: Path, trace, res) -> Path:
    """Write one PNG (trace + background, residual, spectrum with bands); returns its path.

    matplotlib is imported here only (Agg canvas, no pyplot).
    """
    import numpy as np
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from ringkit.analysis import band_filter, oscillation_spectrum
    from ringkit.units import PHI0

    fig = Figure(figsize=(7.0, 8.0), layout="constrained")
    FigureCanvasAgg(fig)
    ax1, ax2, ax3 = fig.subplots(3, 1)
    bg = res.background
    b_mt = trace.field * 1e3
    ax1.plot(b_mt, trace.conductance, lw=0.8, color="0.2", label="data")
    if bg is not None:
        ax1.plot(bg.field * 1e3, bg.background, lw=1.2, color="tab:orange", label="background")
    ax1.set(xlabel="B (mT)", ylabel="G (e$^2$/h)", title=trace.label)
    ax1.legend(fontsize=8)
    if bg is not None:
        fb, rr = bg.field[bg.valid], bg.residual[bg.valid]
    else:
        fb, rr = trace.field, trace.conductance - np.mean(trace.conductance)
    ax2.plot(fb * 1e3, rr, lw=0.6, color="0.4", label="residual")
    if math.isfinite(res.amplitude_he_rms):
        grid, filt, _ = band_filter(fb, rr, res.bands[1], margin=res.band_margin or None)
        ax2.plot(grid * 1e3, filt, lw=1.0, color="tab:blue", label="h/e band content")
    ax2.set(xlabel="B (mT)", ylabel="$\\delta$G (e$^2$/h)")
    ax2.legend(fontsize=8)
    sp = res.spectrum
    if sp.method == "fft":  # zero-padded copy for display only (band numbers unchanged)
        sp = oscillation_spectrum(fb, rr, window=sp.window, pad=4)
    ax3.plot(sp.frequency, sp.amplitude, lw=0.9, color="0.2")
    for n, color in ((1, "tab:blue"), (2, "tab:red")):
        lo, hi = res.bands[n]
        label = ("h/e band" if n == 1 else "h/2e band") + f" ({res.band_source})"
        ax3.axvspan(lo, hi, color=color, alpha=0.2, label=label)
    top = 1.5 * res.bands[2][1]
    ax3.set(xlim=(0, min(top, float(sp.frequency[-1]))), xlabel="frequency (1/T)")
    ax3.set_ylabel("amplitude (e$^2$/h)")
    ax3.legend(fontsize=8)
    sec = ax3.secondary_xaxis(
        "top",
        functions=(
            lambda f: np.sqrt(np.maximum(f, 0) * PHI0 / np.pi) * 1e6,
            lambda r: np.pi * (np.asarray(r) * 1e-6) ** 2 / PHI0,
        ),
    )
    sec.set_xlabel("radius of an h/e line (um)")
    name = re.sub(r"[^A-Za-z0-9._-]+", "_", trace.label).strip("_") or "trace"
    path = Path(directory) / f"{name}.png"
    fig.savefig(path, dpi=90)
    return path
