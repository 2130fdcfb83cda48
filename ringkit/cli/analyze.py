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

Cross-checks (:mod:`ringkit.analysis.checks`; docs/measured-data.md "Cross-checks") run on
every trace; their findings are in ``checks`` (level, code, message) and ``warnings``. A
refusal of the reported trace (period outside the radii's band, no line above the noise
floor, amplitude above the mean G, implausible G, rows with R below the series resistance)
ends with exit status 2 unless ``--force``; unit options contradicting the header are
refused by the loader unless ``--force``. Radii need a unit (``600nm``).

Added keys (the keys above are unchanged): ``checks``, ``refused``; for resistance data
``mean_resistance_ohm``, ``amplitude_he_ohm``, ``amplitude_h2e_ohm`` (rms dR),
``amplitude_*_pp_ohm``, ``relative_he_percent``, ``relative_h2e_percent`` (dR/R);
with ``--current/--noise/--bandwidth`` a ``detectability`` object (signal and in-band noise
in V, S/N, ``exceeds_noise`` per band; :mod:`ringkit.analysis.labunits`); with
``--group-by temperature`` an ``l_phi_series`` object (points, fit values and errors,
``l_phi_ref_m``, ``l_phi_ref_err_m``, path length, ``l_phi_convention``).

Bad input (unreadable or malformed file, unknown unit, field range too short, sampling too
coarse, a refused check) ends with one ``ringkit: error: ...`` line and exit status 2.
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
from ringkit.cli import _analyze_contacts as four_t
from ringkit.cli._analyze_text import clean_json, series_lines, summary_lines, trace_record

__all__ = ["register", "run", "parse_length"]

_LENGTH_UNITS = {"m": 1.0, "mm": 1e-3, "um": 1e-6, "µm": 1e-6, "nm": 1e-9}


def parse_length(text: str) -> float:
    """Length in m from ``"630nm"``, ``"0.63um"``, ``"0.63 µm"`` or ``"6.3e-7m"``.

    A bare number is refused with a message naming the unit to write (``600`` could be nm
    or m; read as metres it gives a ring of 600 m and an unrelated sampling error).
    """
    m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*([a-zµ]*)\s*", text)
    if not m or m[2] not in ("", *_LENGTH_UNITS):
        raise argparse.ArgumentTypeError(f"not a length: {text!r} (e.g. 630nm, 0.63um, 6.3e-7m)")
    try:
        number = float(m[1])
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a length: {text!r}") from None
    if not m[2]:
        guess = f"{m[1]}nm" if abs(number) >= 1 else f"{m[1]}m"
        raise argparse.ArgumentTypeError(
            f"length {text!r} has no unit: write it with one, e.g. {guess} (units: nm, um, mm, m)"
        )
    value = number * _LENGTH_UNITS[m[2]]
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"length must be > 0: {text!r}")
    return value


def _quantity(kind: str):
    def parse(text: str) -> float:
        from ringkit.analysis.labunits import parse_quantity

        try:
            return parse_quantity(text, kind)
        except ValueError as err:
            raise argparse.ArgumentTypeError(str(err)) from None

    parse.__name__ = kind
    return parse


def _temperature(text: str) -> float:
    from ringkit.analysis._textfile import header_temperature

    kelvin, problem = header_temperature(text)
    if kelvin is None or kelvin <= 0:
        raise argparse.ArgumentTypeError(problem or f"temperature must be > 0: {text!r}")
    return kelvin


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
    g.add_argument(
        "--group-by",
        type=_column,
        help="column splitting the traces, or 'temperature': the file's temperature column "
        "(default when there is one) or each file's header/name temperature; a temperature "
        "series is then fitted for L_phi(T)",
    )
    g.add_argument("--temperature", type=_temperature, help="temperature of every trace, e.g. 0.3K")
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
    four_t.add_arguments(g)
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
    a.add_argument(
        "--force",
        action="store_true",
        help="report results the cross-checks refuse (and unit options that contradict the "
        "header); the refusals are kept as warnings",
    )
    lab = p.add_argument_group("lab units and detectability (resistance in Ohm, noise floor)")
    lab.add_argument("--current", type=_quantity("current"), help="measurement current, e.g. 10nA")
    lab.add_argument(
        "--noise", type=_quantity("noise"), help="voltage noise density, e.g. 5nV/rtHz"
    )
    lab.add_argument(
        "--bandwidth",
        type=_quantity("bandwidth"),
        help="equivalent noise bandwidth of one reading, e.g. 1Hz",
    )
    t = p.add_argument_group("temperature series: L_phi(T)")
    t.add_argument(
        "--thermal",
        default="none",
        choices=("none", "ballistic", "diffusive"),
        help="thermal averaging factor of the L_phi(T) fit (default none)",
    )
    t.add_argument(
        "--thermal-energy",
        type=_quantity("energy"),
        help="E_c of the thermal factor, e.g. 2K or 0.17meV (fitted if omitted)",
    )
    t.add_argument("--exponent", type=float, help="fix p of L_phi ~ T^-p (fitted if omitted)")
    t.add_argument(
        "--fit",
        default="he",
        choices=("he", "joint"),
        help="h/e amplitudes alone (default) or the joint h/e + h/2e fit that separates "
        "thermal averaging from dephasing (use with --thermal ballistic or diffusive)",
    )
    o = p.add_argument_group("output")
    o.add_argument("--json", action="store_true", help="print one JSON object")
    o.add_argument("--figures", metavar="DIR", help="write PNG figures into DIR")
    p.set_defaults(func=run)


def _load(args: argparse.Namespace, path: Path, series: bool):
    from ringkit.analysis import load_traces

    group = args.group_by
    if series or group is None:
        group = "auto"
    return load_traces(
        path,
        field=args.field,
        signal=args.signal,
        field_unit=args.field_unit,
        signal_unit=args.signal_unit,
        group_by=group,
        delimiter={"\\t": "\t", "tab": "\t"}.get(args.delimiter, args.delimiter),
        decimal=args.decimal,
        series_resistance=args.series_resistance,
        terminals="four" if args.four_terminal else "two",
        reference_resistance=args.reference_resistance,
        split_sweeps=not args.no_split,
        temperature=args.temperature,
        override_units=args.force,
    )


def _lab_record(args: argparse.Namespace, trace, res) -> dict[str, Any]:
    """dR in Ohm, dR/R in % and (with --current/--noise/--bandwidth) detectability."""
    from ringkit.analysis.labunits import detectability, lab_amplitudes

    if res.mean_conductance <= 0 or (
        trace.metadata.get("quantity") != "R" and args.current is None
    ):
        return {}
    rec: dict[str, Any] = dict(lab_amplitudes(res, trace))
    if args.current is not None:
        nyq = 0.5 / res.field_step
        widths = {
            key: res.bands[n][1] - res.bands[n][0] + 2 * res.band_margin
            for n, key in ((1, "he"), (2, "h2e"))
        }
        rec["detectability"] = detectability(
            {"he": rec["amplitude_he_ohm"], "h2e": rec["amplitude_h2e_ohm"]},
            current=args.current,
            noise_density=args.noise,
            bandwidth=args.bandwidth,
            band_widths=widths,
            nyquist=nyq,
        )
    return rec


def _series(args, traces, records) -> dict[str, Any]:
    from ringkit.analysis.tseries import l_phi_from_series

    usable = [r for r in records if "error" not in r and not r.get("refused")]
    if not usable:
        raise UserError("temperature series: no trace passed the analysis and its checks")
    if args.r_in is not None:
        radius = 0.5 * (args.r_in + args.r_out)
    else:
        radius = sum(r["radius_m"] for r in usable) / len(usable)
    temps = [r["temperature_K"] if r in usable else None for r in records]
    joint = {}
    if args.fit == "joint":
        joint = {
            "amplitudes_h2e_rms": [r.get("amplitude_h2e_e2h", float("nan")) for r in records],
            "noise_h2e_rms": [r.get("noise_h2e_rms_e2h", float("nan")) for r in records],
        }
    try:
        out = l_phi_from_series(
            temps,
            [r.get("amplitude_he_e2h", float("nan")) for r in records],
            [r.get("noise_he_rms_e2h", float("nan")) for r in records],
            radius=radius,
            thermal=args.thermal,
            thermal_energy=args.thermal_energy,
            p=args.exponent,
            **joint,
        )
    except ValueError as err:
        raise UserError(f"temperature series: {err}") from err
    out["radius_m"] = radius
    out["n_traces_left_out"] = len(records) - sum(q["n_traces"] for q in out["points"])
    return out


def run(args: argparse.Namespace) -> int:
    """Run ``ringkit analyze``."""
    from ringkit.analysis import extract_oscillations
    from ringkit.analysis.checks import check_result, refusals

    if (args.r_in is None) != (args.r_out is None):
        raise UserError("give both --r-in and --r-out, or neither")
    if args.r_in is not None and args.r_out < args.r_in:
        raise UserError(f"--r-out ({args.r_out:g} m) must be >= --r-in ({args.r_in:g} m)")
    lab = (args.current, args.noise, args.bandwidth)
    if any(x is not None for x in lab) and any(x is None for x in lab):
        raise UserError("give --current, --noise and --bandwidth together (e.g. 10nA 5nV/rtHz 1Hz)")
    series = isinstance(args.group_by, str) and args.group_by.lower() in ("temperature", "temp")
    path = Path(args.file)
    if not path.exists():
        raise UserError(f"{path}: no such file or folder")
    radii = None if args.r_in is None else (args.r_in, args.r_out)
    terminals = "four" if args.four_terminal else "two"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        loaded = _load(args, path, series)
        if not 0 <= args.trace < len(loaded.traces):
            raise UserError(f"--trace {args.trace}: the file has {len(loaded.traces)} trace(s)")
        records, results, findings = [], [], []
        geometry = {} if radii is None else {"r_in": args.r_in, "r_out": args.r_out}
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
            rec = trace_record(i, tr, res, loaded.report, error)
            found = []
            if res is not None:
                found = check_result(
                    res,
                    radii=radii,
                    terminals=terminals,
                    series_resistance=args.series_resistance,
                    n_below_series=loaded.report.dropped.get("resistance <= series resistance", 0),
                    n_points=loaded.report.n_points,
                )
                rec["checks"] = [f.as_dict() for f in found]
                rec["refused"] = bool(refusals(found)) and not args.force
                rec.update(_lab_record(args, tr, res))
            findings.append(found)
            records.append(rec)
            results.append(res)
        if args.group_by is not None and not series:  # a temperature column named by the user
            series = all(
                str(tr.metadata.get("temperature_source", "")).startswith("column")
                for tr in loaded.traces
            )
        top_refusals = refusals(findings[args.trace])
        if top_refusals and not args.force:
            raise UserError(
                f"{loaded.traces[args.trace].label}: {top_refusals[0].message} "
                "(--force reports the numbers anyway)"
            )
        l_phi_series = _series(args, loaded.traces, records) if series else None
        four = four_t.four_terminal_record(args, loaded, lambda p: _load(args, p, False))
    messages = list(dict.fromkeys(str(w.message) for w in caught))
    for tr, found in zip(loaded.traces, findings, strict=True):
        for f in found:
            prefix = "forced past refusal: " if f.level == "refuse" else ""
            messages.append(f"{tr.label}: {prefix}{f.message}")
    messages = list(dict.fromkeys(messages))
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
            columns=list(report.headers),
            warnings=messages,
            figures=figures,
            traces=records,
        )
        if l_phi_series is not None:
            top["l_phi_series"] = l_phi_series
        four_t.merge_record(top, four)
        json.dump(clean_json(top), sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
        return 0
    print(f"file: {path}")
    print(report.summary())
    for rec in records:
        print("\n".join(summary_lines(rec)))
    if l_phi_series is not None:
        print("\n".join(series_lines(l_phi_series)))
    for line in four_t.four_terminal_lines(four):
        print(line)
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
