"""Measured-data panel, compute part: load a trace, remove the background, extract the
oscillations and simulate a ring with the extracted area (no widgets here).

Public API
----------
LoadOptions
    Loader options of the panel (columns, units, series resistance, terminals).
load_trace_file(path, options) / load_trace_bytes(content, filename, options) -> LoadResult
    :func:`ringkit.analysis.traces.load_traces` on a path or on uploaded bytes.
AnalysisOptions
    Field window, background method and window, ring radii, simulation settings.
analyze_trace(trace, options) -> MeasuredAnalysis
    Background, residual, :class:`~ringkit.analysis.extract.OscillationResult` and the
    simulated G(B) of a single-channel network ring of the extracted area.
demo_trace_text(seed=1) -> str
    INVENTED demo data (tab-separated text) from a scenario of our own; never a measurement.
"""

from __future__ import annotations

import math
import tempfile
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive, check_range
from ringkit.analysis.extract import OscillationResult, extract_oscillations
from ringkit.analysis.network1d import NetworkRing
from ringkit.analysis.traces import LoadResult, Trace, TraceFormatError, load_traces
from ringkit.units import E2H, PHI0

__all__ = [
    "LoadOptions",
    "AnalysisOptions",
    "MeasuredAnalysis",
    "load_trace_file",
    "load_trace_bytes",
    "analyze_trace",
    "demo_trace_text",
    "DEMO_LABEL",
]

DEMO_LABEL = "INVENTED DEMO DATA (ringkit scenario, not a measurement)"


@dataclass(frozen=True)
class LoadOptions:
    """Loader options (see :func:`ringkit.analysis.traces.load_traces`).

    Empty strings mean "detect from the header".
    """

    field_column: str = ""
    signal_column: str = ""
    field_unit: str = ""
    signal_unit: str = ""
    series_resistance: float = 0.0
    terminals: Literal["two", "four"] = "two"
    group_by: str = ""

    def kwargs(self) -> dict:
        """Keyword arguments for :func:`load_traces`."""

        def col(text: str) -> str | int | None:
            text = text.strip()
            if not text:
                return None
            return int(text) if text.isdigit() else text

        return {
            "field": col(self.field_column),
            "signal": col(self.signal_column),
            "field_unit": self.field_unit.strip() or None,
            "signal_unit": self.signal_unit.strip() or None,
            "series_resistance": self.series_resistance,
            "terminals": self.terminals,
            "group_by": _group(self.group_by),
        }


def _group(text: str) -> str | int | None:
    """Loader ``group_by`` from the panel's text: "" = auto, "none" = never, else a column."""
    text = text.strip()
    if not text or text.lower() == "auto":
        return "auto"
    if text.lower() == "none":
        return None
    return int(text) if text.isdigit() else text


def load_trace_file(path: str | Path, options: LoadOptions | None = None) -> LoadResult:
    """Load traces from a file path (raises the loader's errors unchanged)."""
    return load_traces(path, **(options or LoadOptions()).kwargs())


def load_trace_bytes(
    content: bytes, filename: str, options: LoadOptions | None = None
) -> LoadResult:
    """Load traces from uploaded file content (written to a temporary file first).

    Raises
    ------
    TraceFormatError, ParameterError
        From the loader; the message names the uploaded file.
    """
    suffix = Path(filename).suffix.lower() or ".txt"
    if suffix not in (".txt", ".dat", ".csv", ".tsv"):
        raise ParameterError(
            "upload", filename, "must be a text file with suffix .txt, .dat, .csv or .tsv"
        )
    stem = Path(filename).stem or "upload"
    with tempfile.TemporaryDirectory(prefix="ringkit-upload-") as tmp:
        path = Path(tmp) / f"{stem}{suffix}"
        path.write_bytes(bytes(content))
        try:
            result = load_trace_file(path, options)
        except TraceFormatError as err:  # name the uploaded file, not the temporary copy
            raise TraceFormatError(str(err).replace(str(path), f"upload {filename!r}")) from None
    for trace in result.traces:
        trace.metadata["source"] = f"upload {filename}"
    return result


@dataclass(frozen=True)
class AnalysisOptions:
    """Analysis settings of the measured-data panel (SI units).

    Parameters
    ----------
    field_min, field_max : float or None
        Field window in T (None = whole trace).
    background : {"polynomial", "savgol", "moving_average", "none"}
    degree : int
        Polynomial degree.
    window_periods : float
        Savitzky-Golay window or moving-average width in h/e periods (an integer for the
        moving average keeps the h/e line and its harmonics intact).
    r_in, r_out : float or None
        Ring radii in m (None: bands from the dominant peak).
    material : str
        Material preset of the simulated ring ("GaAs", "InAs", "Au").
    temperature : float or None
        Temperature in K of the simulation (None: the trace's, else 0.1 K).
    l_phi : float or None
        L_phi in m of the simulation.
    coupling : float
        Junction coupling of the simulated single-channel ring.
    """

    field_min: float | None = None
    field_max: float | None = None
    background: str = "polynomial"
    degree: int = 3
    window_periods: float = 10.0
    r_in: float | None = None
    r_out: float | None = None
    material: str = "GaAs"
    temperature: float | None = None
    l_phi: float | None = None
    coupling: float = 0.3

    def __post_init__(self) -> None:
        check_choice(
            "background", self.background, ("polynomial", "savgol", "moving_average", "none")
        )
        if int(self.degree) != self.degree or self.degree < 0:
            raise ParameterError("degree", self.degree, "must be an integer >= 0")
        check_positive("window_periods", self.window_periods)
        if (self.r_in is None) != (self.r_out is None):
            raise ParameterError("r_in/r_out", (self.r_in, self.r_out), "give both or neither", "m")
        if self.r_in is not None and not 0 < self.r_in < self.r_out:
            raise ParameterError(
                "r_in", self.r_in, f"must lie in (0, r_out = {self.r_out:g}) m", "m"
            )
        check_range("coupling", self.coupling, 0.0, 0.5, inclusive=(False, True))


@dataclass(frozen=True)
class MeasuredAnalysis:
    """Everything the measured-data panel shows.

    Attributes
    ----------
    field, signal : ndarray
        Analysed field window (T) and conductance (e^2/h).
    background, residual : ndarray
        Background and ``signal - background`` on ``field`` (NaN where the background is
        undefined).
    result : OscillationResult
    sim_field, sim_conductance, sim_residual : ndarray
        Simulated single-channel ring of the extracted area (e^2/h), and its oscillating
        part after the same background removal.
    sim_ring : NetworkRing
    notes : tuple of str
        Caveats from the extraction.
    """

    field: np.ndarray
    signal: np.ndarray
    background: np.ndarray
    residual: np.ndarray
    result: OscillationResult
    sim_field: np.ndarray
    sim_conductance: np.ndarray
    sim_residual: np.ndarray
    sim_ring: NetworkRing
    notes: tuple[str, ...] = field(default_factory=tuple)


def _window(trace: Trace, opts: AnalysisOptions) -> tuple[np.ndarray, np.ndarray]:
    b, g = np.asarray(trace.field, float), np.asarray(trace.conductance, float)
    lo = b[0] if opts.field_min is None else opts.field_min
    hi = b[-1] if opts.field_max is None else opts.field_max
    if not hi > lo:
        raise ParameterError("field_max", hi, f"must be > field_min = {lo:g} T", "T")
    keep = (b >= lo) & (b <= hi)
    if np.count_nonzero(keep) < 16:
        raise ParameterError(
            "field window",
            (lo, hi),
            f"must contain >= 16 points of the trace ({b[0]:g}..{b[-1]:g} T)",
            "T",
        )
    return b[keep], g[keep]


def _background_options(opts: AnalysisOptions, period: float | None) -> dict:
    if opts.background == "polynomial":
        return {"degree": int(opts.degree)}
    if opts.background == "moving_average":
        return {"periods": max(1, int(round(opts.window_periods)))}
    if opts.background == "savgol":
        return {} if period is None else {"window": opts.window_periods * period}
    return {}


def analyze_trace(trace: Trace, options: AnalysisOptions | None = None) -> MeasuredAnalysis:
    """Background, oscillations and a simulated ring with the extracted area.

    Raises
    ------
    ParameterError, FieldRangeError, SamplingError
        Invalid window or options, or data that cannot resolve the h/e band.
    """
    from ringkit.device import Material

    opts = options or AnalysisOptions()
    b, g = _window(trace, opts)
    period_guess = None
    if opts.r_in is not None:
        period_guess = PHI0 / (math.pi * (0.5 * (opts.r_in + opts.r_out)) ** 2)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = extract_oscillations(
            b, g, r_in=opts.r_in, r_out=opts.r_out, background=opts.background,
            background_options=_background_options(opts, period_guess),
        )  # fmt: skip
    notes = tuple(dict.fromkeys(list(res.notes) + [str(w.message) for w in caught]))
    if opts.background == "none":
        bg = np.zeros_like(g)
    else:
        bg = np.interp(b, res.background.field, res.background.background)
        valid = np.interp(b, res.background.field, res.background.valid.astype(float)) > 0.5
        bg = np.where(valid, bg, np.nan)
    if not (np.isfinite(res.area) and res.area > 0):
        raise ParameterError("trace", trace.label, "no h/e area could be extracted", "")
    mat = Material.preset(opts.material)
    temp = opts.temperature if opts.temperature is not None else (trace.temperature or 0.1)
    ring = NetworkRing(
        radius=math.sqrt(res.area / math.pi),
        effective_mass=mat.effective_mass,
        fermi_energy=mat.fermi_energy_J,
        coupling=opts.coupling,
        temperature=temp,
        l_phi=opts.l_phi,
    )
    with warnings.catch_warnings(record=True) as sim_caught:
        warnings.simplefilter("always")
        # an overlay for comparison of shapes: 1e-3 e^2/h is well below the line width drawn
        sim_g = ring.conductance(b, tol=1e-3, max_energy_points=400)
    notes = notes + tuple(f"simulated ring: {w.message}" for w in sim_caught)
    sim_res = sim_g - np.mean(sim_g)
    if opts.background != "none":
        from ringkit.analysis.background import remove_background

        kw = _background_options(opts, res.period_he)
        if opts.background == "moving_average":
            kw["period"] = res.period_he
        sim_bg = remove_background(b, sim_g, method=opts.background, **kw)
        sim_res = np.where(sim_bg.valid, sim_bg.residual, np.nan)
    return MeasuredAnalysis(
        field=b,
        signal=g,
        background=bg,
        residual=g - bg,
        result=res,
        sim_field=b,
        sim_conductance=sim_g,
        sim_residual=sim_res,
        sim_ring=ring,
        notes=notes,
    )


def demo_trace_text(seed: int = 1) -> str:
    """INVENTED demo magnetoresistance sweep (tab-separated text, B in mT, R in Ohm).

    Scenario of our own (not a measurement): an etched GaAs ring of effective radius
    0.65 µm at 0.3 K with a 1.2 kOhm series resistance; G(B) = 22 e^2/h minus a smooth
    parabolic magnetoconductance, plus the oscillating part of a single-channel network ring
    (:class:`~ringkit.analysis.network1d.NetworkRing`, scaled to ~0.15 e^2/h), plus Gaussian
    noise of 0.004 e^2/h; sweep -60 .. +60 mT in 2401 steps.
    """
    from ringkit.device import Material

    rng = np.random.default_rng(seed)
    b = np.linspace(-0.06, 0.06, 2401)
    mat = Material.preset("GaAs")
    ring = NetworkRing(
        radius=0.65e-6, effective_mass=mat.effective_mass, fermi_energy=mat.fermi_energy_J,
        coupling=0.5, arm_fraction=0.47, temperature=0.3, l_phi=1.5e-6,
    )  # fmt: skip
    osc = ring.conductance(b)
    osc = 0.15 * (osc - osc.mean()) / osc.std()
    g = 22.0 - 180.0 * b**2 + osc + rng.normal(0.0, 0.004, b.size)
    r = 1.0 / (g * E2H) + 1200.0
    lines = [
        f"# {DEMO_LABEL}",
        "# scenario: GaAs ring, effective radius 0.65 um, T = 0.3 K, series resistance 1200 Ohm",
        "# series_resistance = 1200",
        "# temperature = 0.3 K",
        "B (mT)\tR (Ohm)",
    ]
    lines += [f"{bi * 1e3:.4f}\t{ri:.5f}" for bi, ri in zip(b, r, strict=True)]
    return "\n".join(lines) + "\n"
