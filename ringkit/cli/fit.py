"""``ringkit fit TRACE... --device DEVICE.toml --out DIR``: device parameters from measured traces.

Steps (docs/outlook-and-fit-usage.md, "ringkit fit"):

1. the device is read from a study TOML (:func:`ringkit.study.config.load_config`, device
   part through :func:`ringkit.study.setup.make_device`; a file without a ``[field]`` section
   gets a placeholder window, the fit does not use it);
2. every TRACE is read by the measured-data loader (:func:`ringkit.analysis.load_traces`);
   its temperature comes from the file (header, column or name) or from ``--temperature``
   (``FILE=0.3K`` or one plain value per file, in order); a trace without one is refused;
3. each file is checked against the device before anything is computed, by
   :func:`ringkit.analysis.inverse_fit.measured_amplitudes_from_traces` (at least 4 h/e
   periods in the field range; the measured h/e period inside the bracket of the device's
   inner and outer radius); the same function gives the h/e, h/2e rms amplitudes with
   errors, noise floors and mean G per temperature;
4. the amplitude emulator of the device is built or loaded (``DIR/emulator.nc``; finished
   work units in ``DIR/emulator.nc.units/``, so an interrupted build resumes; ``--restart``
   discards both), and the likelihood fit runs on it;
5. ``fit.json``, ``report.md`` and ``figures/`` are written (:mod:`ringkit.cli._fit_report`).

Every refusal is one ``ringkit: error: ...`` line naming the file (exit status 2).
"""

from __future__ import annotations

import argparse
import math
import re
import shutil
import sys
import warnings
from pathlib import Path

from ringkit.cli import UserError

__all__ = ["register", "run", "load_device", "measured_records", "temperatures"]

_PLACEHOLDER_FIELD = {"field.start": "-10 mT", "field.stop": "10 mT"}


def _temperature_item(text: str) -> tuple[str | None, float]:
    from ringkit.analysis._textfile import header_temperature

    name, sep, value = text.rpartition("=")
    name = name.strip() if sep else None
    kelvin, problem = header_temperature(value.strip())
    if kelvin is None or not kelvin > 0:
        raise argparse.ArgumentTypeError(problem or f"temperature must be > 0 K: {text!r}")
    return name, kelvin


def _lengths(text: str) -> list[float]:
    from ringkit.cli.analyze import parse_length

    return [parse_length(x) for x in re.split(r"[,;]", text) if x.strip()]


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``fit`` subcommand."""
    p = subparsers.add_parser(
        "fit",
        help="fit L_phi(T), mean free path and area of a device to measured traces",
        description=(
            "Read measured traces (one or several temperatures), check them against the "
            "device of DEVICE.toml (a study file), build or load the amplitude emulator of "
            "the device (resumable, in DIR) and fit the parameters by the likelihood of the "
            "measured h/e, h/2e amplitudes and mean G under the ensemble distribution. "
            "Writes fit.json, report.md and figures/ into DIR."
        ),
    )
    p.add_argument("traces", nargs="+", metavar="TRACE", help="measured trace files")
    p.add_argument("--device", required=True, metavar="DEVICE.toml", help="study file (device)")
    p.add_argument("--out", required=True, metavar="DIR", help="output directory")
    p.add_argument(
        "--temperature",
        type=_temperature_item,
        action="append",
        default=[],
        metavar="[FILE=]T",
        help="temperature of a trace file, e.g. --temperature run3.csv=0.3K (repeatable); "
        "plain values (0.3K) are given to the files in order, one per file",
    )
    g = p.add_argument_group("reading the files (as ringkit analyze)")
    g.add_argument("--field", help="field column (name or 0-based index)")
    g.add_argument("--signal", help="R or G column (name or 0-based index)")
    g.add_argument("--field-unit", help="unit of the field column, e.g. T, mT, G")
    g.add_argument("--signal-unit", help="unit of the signal column, e.g. Ohm, kOhm, e^2/h")
    g.add_argument("--series-resistance", type=float, default=0.0, help="Ohm subtracted")
    e = p.add_argument_group("emulator (model ensembles, cached in DIR)")
    e.add_argument("--l-phi", type=_lengths, metavar="LIST",
                   help="L_phi grid, e.g. '0.3um,1um,3um' (default: 6 values from pi r/2 to "
                   "10 pi r of the device)")  # fmt: skip
    e.add_argument("--mean-free-path", type=_lengths, metavar="LIST",
                   help="mean-free-path grid, e.g. '100nm,300nm' (default: the device's "
                   "x 0.5, 1, 2)")  # fmt: skip
    e.add_argument("--realizations", type=int, default=40, help="realizations per grid node")
    e.add_argument("--probes", type=int, default=100, help="dephasing probes (default 100)")
    e.add_argument("--flux-points", type=int, default=24, help="flux points per h/e period")
    e.add_argument("--thermal-tol", type=float, default=2e-3,
                   help="tolerance of the thermal average, e^2/h (default 2e-3)")  # fmt: skip
    e.add_argument("--profile-points", type=int, default=11,
                   help="coarse profile-likelihood points per parameter (default 11)")  # fmt: skip
    e.add_argument("--workers", type=int, metavar="N", help="worker processes (default: cores)")
    e.add_argument("--restart", action="store_true", help="discard the emulator cache in DIR")
    p.add_argument("--quiet", action="store_true", help="no progress bars or status lines")
    p.set_defaults(func=run)


def load_device(path: str | Path):
    """The :class:`ringkit.device.RingDevice` of a study TOML (device part)."""
    from ringkit.study.config import load_config
    from ringkit.study.setup import make_device, study_names

    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise UserError(f"--device {p}: cannot read the study file ({err})") from None
    overrides = {} if re.search(r"^\s*\[field\]", text, re.M) else dict(_PLACEHOLDER_FIELD)
    try:
        cfg = load_config(p, overrides=overrides)
        with study_names():
            return make_device(cfg.physics(), None, 0.0)
    except ValueError as err:
        msg = str(err)
        raise UserError(msg if msg.startswith(str(p)) else f"{p}: {msg}") from err


def temperatures(files: list[str], items: list[tuple[str | None, float]]) -> dict[str, float]:
    """``{file: K}`` from ``--temperature`` items (``FILE=T`` or plain values in order)."""
    named = [(n, t) for n, t in items if n is not None]
    plain = [t for n, t in items if n is None]
    if plain and len(plain) != len(files):
        raise UserError(
            f"--temperature: {len(plain)} plain value(s) for {len(files)} file(s); give one "
            "per file, in order, or write FILE=T (e.g. run3.csv=0.3K)"
        )
    out = dict(zip(files, plain, strict=False))
    for name, t in named:
        hits = [f for f in files if f == name or Path(f).name == name]
        if not hits:
            raise UserError(f"--temperature {name}={t:g}K: {name} is not one of the TRACE files")
        out[hits[0]] = t
    return out


def measured_records(files: list[str], device, args: argparse.Namespace):
    """Load and check every trace file; ``(trace records, MeasuredAmplitudes list)``.

    The checks and the amplitudes are those of
    :func:`ringkit.analysis.inverse_fit.measured_amplitudes_from_traces` (too few periods,
    period outside the device's bracket, missing temperature), run file by file first so
    that a refusal names the file.
    """
    from ringkit.analysis import load_traces
    from ringkit.analysis.inverse_fit import measured_amplitudes_from_traces

    temps = temperatures(files, args.temperature)
    records, pairs, kelvins = [], [], []
    for f in files:
        path = Path(f)
        if not path.is_file():
            raise UserError(f"{f}: no such file")
        try:
            loaded = load_traces(
                path, field=_col(args.field), signal=_col(args.signal),
                field_unit=args.field_unit, signal_unit=args.signal_unit,
                series_resistance=args.series_resistance, temperature=temps.get(f),
            )  # fmt: skip
        except ValueError as err:
            msg = str(err)
            raise UserError(msg if str(path) in msg else f"{f}: {msg}") from err
        mine = [(tr.field, tr.conductance) for tr in loaded.traces]
        t_file = [tr.temperature for tr in loaded.traces]
        for tr in loaded.traces:
            if tr.temperature is None:
                raise UserError(
                    f"{f}: missing temperature for trace {tr.label} (none in the file header, "
                    f"columns or name); give --temperature {path.name}=0.3K"
                )
        try:
            measured_amplitudes_from_traces(mine, t_file, device=device)
        except ValueError as err:
            raise UserError(f"{f}: {err}") from err
        for tr in loaded.traces:
            records.append({
                "file": str(path), "label": tr.label, "temperature_K": float(tr.temperature),
                "temperature_source": str(tr.metadata.get("temperature_source", "option")),
                "n_points": int(len(tr)),
                "field_range_T": float(tr.field[-1] - tr.field[0]),
            })  # fmt: skip
        pairs += mine
        kelvins += t_file
    measured = measured_amplitudes_from_traces(pairs, kelvins, device=device)
    return records, measured


def _col(text: str | None) -> str | int | None:
    return int(text) if text is not None and text.isdigit() else text


def _grids(device, records, args) -> dict[str, list[float]]:
    geo = device.geometry
    r_m = math.sqrt(geo.area_mean / math.pi)
    l_phi = args.l_phi or [math.pi * r_m * x for x in (0.5, 1, 2, 3, 5, 10)]
    mfp = args.mean_free_path
    if not mfp:
        base = device.material.elastic_mean_free_path
        if base is None:
            raise UserError("the device has no mean free path or mobility; give --mean-free-path")
        mfp = [base * x for x in (0.5, 1.0, 2.0)]
    temps = sorted({m.temperature for m in records})
    return {"temperatures": temps, "l_phi_values": l_phi, "disorder_values": mfp}


def run(args: argparse.Namespace) -> int:
    """Run ``ringkit fit``."""
    from ringkit._validation import ParameterError
    from ringkit.cli import _fit_report as report
    from ringkit.study.cost import check_workers_option

    check_workers_option(args.workers)
    if not 4 <= args.realizations <= 10**5:
        raise UserError(f"--realizations {args.realizations}: must lie in [4, 100000]")
    if not 3 <= args.profile_points <= 1000:
        raise UserError(f"--profile-points {args.profile_points}: must lie in [3, 1000]")
    echo = (lambda m: None) if args.quiet else (lambda m: print(f"ringkit: {m}", file=sys.stderr))
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UserError(f"--out {out}: exists and is not a directory")
    device = load_device(args.device)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        records, measured = measured_records(list(args.traces), device, args)
    notes = list(dict.fromkeys(str(w.message) for w in caught))
    echo(f"{len(records)} trace(s) at {[m.temperature for m in measured]} K checked")
    grids = _grids(device, measured, args)
    out.mkdir(parents=True, exist_ok=True)
    cache = out / "emulator.nc"
    if args.restart:
        cache.unlink(missing_ok=True)
        shutil.rmtree(Path(f"{cache}.units"), ignore_errors=True)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            result, emulator = _fit(device, measured, grids, args, cache, echo)
    except ParameterError as err:
        raise UserError(str(err)) from err
    notes += [str(w.message) for w in caught if str(w.message) not in notes]
    doc = report.fit_document(result, records, device, emulator, notes=notes, grids=grids)
    files = report.write_outputs(out, doc)
    for name, path in files.items():
        print(f"{name}: {path}")
    return 0


def _fit(device, measured, grids, args, cache: Path, echo):
    """Build or load the emulator (resumable) and run the likelihood fit."""
    from ringkit.analysis.inverse_fit import fit_device
    from ringkit.transport.emulator_build import build_emulator

    resumed = Path(f"{cache}.units").exists() and not cache.exists()
    echo(("resuming" if resumed else "loading" if cache.exists() else "building")
         + f" the emulator in {cache}")  # fmt: skip
    emulator = build_emulator(
        device, **grids, n_realizations=args.realizations, max_workers=args.workers,
        cache_path=cache, progress=not args.quiet, n_flux=args.flux_points,
        n_probes=args.probes, thermal_tol=args.thermal_tol,
    )  # fmt: skip
    echo("fitting")
    return fit_device(measured, emulator, n_profile=args.profile_points), emulator
