"""The study-file schema: every section and key, with type, unit, allowed range and help text.

This table is the single source of truth for validation (:mod:`ringkit.study.config`), for the
commented example printed by ``ringkit example-config`` and for the parameter list of reports.

API
---
Key
    One key: ``name``, ``kind``, ``doc``, ``dimension``, ``default``, range, ``choices``.
SCHEMA
    ``{section: (section help, {key name: Key})}`` in the order sections appear in files.
REQUIRED
    Sentinel default of keys that must be given.
PHYSICS_SECTIONS
    Sections whose content fixes the computed numbers (used for the checkpoint fingerprint).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

__all__ = ["Key", "SCHEMA", "REQUIRED", "PHYSICS_SECTIONS", "KeyKind"]


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED: Any = _Required()

KeyKind = Literal[
    "str", "choice", "int", "float", "bool", "quantity", "quantities", "leads", "contacts"
]


@dataclass(frozen=True)
class Key:
    """Description of one key of a study file.

    Attributes
    ----------
    name : str
        Key name inside its section.
    kind : {"str", "choice", "int", "float", "bool", "quantity", "quantities", "leads", \
            "contacts"}
        ``quantity`` is one dimensional value, ``quantities`` a list of them (a single value
        is accepted as a one-element list). ``leads`` is a list of tables ``{angle, width}``
        (angle in deg or rad, width a length; SI value: tuple of
        :class:`ringkit.device.LeadSpec`), ``contacts`` a list of configurations
        ``"m,n,k,l"`` (SI value: tuple of canonical strings); see
        :mod:`ringkit.study.multiterminal`.
    doc : str
        One-line help.
    dimension : str or tuple of str, optional
        Dimension(s) accepted for quantities (see :data:`ringkit.study.quantities.DIMENSIONS`).
    default : object
        Default in SI units; ``None`` means optional and absent; ``REQUIRED`` must be given.
    low, high : float, optional
        Allowed range in SI units (``inclusive`` tells which ends are allowed).
    choices : tuple of str
        Allowed values of a ``choice`` key.
    example : str
        TOML literal shown (commented out) in the example configuration when there is no
        default.
    """

    name: str
    kind: KeyKind
    doc: str
    dimension: str | tuple[str, ...] | None = None
    default: Any = None
    low: float | None = None
    high: float | None = None
    inclusive: tuple[bool, bool] = (True, True)
    choices: tuple[str, ...] = ()
    example: str = ""

    @property
    def dimensions(self) -> tuple[str, ...]:
        if self.dimension is None:
            return ()
        return (self.dimension,) if isinstance(self.dimension, str) else self.dimension


def _keys(*keys: Key) -> dict[str, Key]:
    return {k.name: k for k in keys}


_INF = math.inf

SCHEMA: dict[str, tuple[str, dict[str, Key]]] = {
    "study": (
        "Name and description, copied into the results and the report.",
        _keys(
            Key("name", "str", "Short title of the study.", default="ringkit study"),
            Key("description", "str", "Free text for the report.", default=""),
        ),
    ),
    "material": (
        "Host material. A preset gives the effective mass and typical values; the keys "
        "below override it. Give at most one of fermi_energy/density and at most one of "
        "mobility/mean_free_path/disorder_strength.",
        _keys(
            Key(
                "preset",
                "choice",
                "Material preset.",
                default="GaAs",
                choices=("GaAs", "InAs", "Au"),
            ),
            Key(
                "effective_mass",
                "float",
                "Effective mass in units of the free electron mass m_e.",
                low=1e-3,
                high=20.0,
                example="0.067",
            ),
            Key(
                "fermi_energy",
                "quantity",
                "Fermi energy above the band bottom.",
                dimension="energy",
                low=0.0,
                high=20 * 1.602176634e-19,
                inclusive=(False, True),
                example='"10 meV"',
            ),
            Key(
                "density",
                "quantity",
                "Sheet electron density (sets the Fermi energy).",
                dimension="density",
                low=0.0,
                high=1e20,
                inclusive=(False, True),
                example='"3e11 cm^-2"',
            ),
            Key(
                "mobility",
                "quantity",
                "Mobility (sets the elastic mean free path).",
                dimension="mobility",
                low=0.0,
                high=1e3,
                inclusive=(False, True),
                example='"4e5 cm^2/Vs"',
            ),
            Key(
                "mean_free_path",
                "quantity",
                "Elastic mean free path (sets the disorder).",
                dimension="length",
                low=0.0,
                high=1e-3,
                inclusive=(False, True),
                example='"1 um"',
            ),
            Key(
                "disorder_strength",
                "quantity",
                "Anderson disorder strength W (box width).",
                dimension="energy",
                low=0.0,
                high=100 * 1.602176634e-19,
                example='"2 meV"',
            ),
        ),
    ),
    "geometry": (
        "Ring geometry: inner and outer radius of the annulus (or mean radius and arm width).",
        _keys(
            Key("shape", "choice", "Ring shape.", default="circular", choices=("circular",)),
            Key(
                "r_in",
                "quantity",
                "Inner radius.",
                dimension="length",
                low=0.0,
                high=1e-3,
                inclusive=(False, False),
                example='"140 nm"',
            ),
            Key(
                "r_out",
                "quantity",
                "Outer radius.",
                dimension="length",
                low=0.0,
                high=1e-3,
                inclusive=(False, False),
                example='"200 nm"',
            ),
            Key(
                "radius",
                "quantity",
                "Mean radius (instead of r_in/r_out, with width).",
                dimension="length",
                low=0.0,
                high=1e-3,
                inclusive=(False, False),
                example='"170 nm"',
            ),
            Key(
                "width",
                "quantity",
                "Arm width (instead of r_in/r_out, with radius).",
                dimension="length",
                low=0.0,
                high=1e-3,
                inclusive=(False, False),
                example='"60 nm"',
            ),
            Key(
                "lead_width",
                "quantity",
                "Width of the two leads (default: the arm width).",
                dimension="length",
                low=0.0,
                high=1e-3,
                inclusive=(False, False),
                example='"60 nm"',
            ),
            Key(
                "leads",
                "leads",
                "Lead layout, 2 to 4 leads {angle, width} (angle in deg or rad on the centre "
                "line; width defaults to lead_width); leads 0 and 1 carry G (default: 180, 0 deg).",
                example='[{angle = "135 deg"}, {angle = "45 deg"}, '
                '{angle = "225 deg", width = "40 nm"}, {angle = "-45 deg", width = "40 nm"}]',
            ),
        ),
    ),
    "lattice": (
        "Tight-binding discretisation (defaults are chosen from the Fermi wavelength).",
        _keys(
            Key(
                "spacing",
                "quantity",
                "Lattice spacing a.",
                dimension="length",
                low=0.0,
                high=1e-6,
                inclusive=(False, True),
                example='"5 nm"',
            ),
            Key(
                "max_sites",
                "int",
                "Refuse devices with more sites than this.",
                low=10,
                high=10_000_000,
                example="200000",
            ),
        ),
    ),
    "field": (
        "Magnetic-field sweep (the inner loop of the study). In 'uniform' mode start/stop are "
        "fields (T, mT, G); in 'flux_tube' mode they are fluxes through the hole (Wb or h/e).",
        _keys(
            Key(
                "mode",
                "choice",
                "Uniform field, or an Aharonov-Bohm flux tube through the hole.",
                default="uniform",
                choices=("uniform", "flux_tube"),
            ),
            Key(
                "start",
                "quantity",
                "First field (or flux) of the sweep.",
                dimension=("field", "flux"),
                default=REQUIRED,
                low=-100.0,
                high=100.0,
            ),
            Key(
                "stop",
                "quantity",
                "Last field (or flux) of the sweep.",
                dimension=("field", "flux"),
                default=REQUIRED,
                low=-100.0,
                high=100.0,
            ),
            Key(
                "points",
                "int",
                "Number of equally spaced field points.",
                default=401,
                low=16,
                high=1_000_000,
            ),
        ),
    ),
    "sweep": (
        "Outer parameters: every combination is computed. A single value may be written "
        "without brackets.",
        _keys(
            Key(
                "fermi_energy",
                "quantities",
                "Fermi energies (default: from [material]).",
                dimension="energy",
                low=0.0,
                high=20 * 1.602176634e-19,
                inclusive=(False, True),
                example='["9 meV", "10 meV"]',
            ),
            Key(
                "contacts",
                "contacts",
                'Four-terminal configurations "m,n,k,l" (current m -> n, voltage V_k - V_l), '
                "each computed as R(B) in ohm; needs geometry.leads.",
                example='["0,2,1,3", "1,3,0,2"]',
            ),
            Key(
                "gate_arm",
                "choice",
                "Arm under the gate.",
                default="upper",
                choices=("upper", "lower"),
            ),
            Key(
                "gate_potential",
                "quantities",
                "Potential energies applied by the arm gate.",
                dimension="energy",
                default=(0.0,),
                low=-1.602176634e-19,
                high=1.602176634e-19,
            ),
            Key(
                "temperature",
                "quantities",
                "Temperatures (thermal smearing).",
                dimension="temperature",
                default=(0.0,),
                low=0.0,
                high=1000.0,
            ),
            Key(
                "l_phi",
                "quantities",
                'Phase-coherence lengths L_phi set by voltage probes; "inf" = fully coherent.',
                dimension="length",
                default=(_INF,),
                low=0.0,
                high=_INF,
                inclusive=(False, True),
            ),
        ),
    ),
    "thermal": (
        "Thermal average G(T) = integral G(E) (-df/dE) dE by the error-controlled policy of "
        "ringkit.thermal_policy: adaptive Gauss-Kronrod refinement of the Fermi window until "
        "the estimated error of G at every field point is below tol (the number of energies "
        "and the error estimate are stored with the results).",
        _keys(
            Key(
                "tol",
                "float",
                "Absolute error goal of every thermal average, in e^2/h.",
                default=1e-4,
                low=1e-10,
                high=0.1,
            ),
            Key(
                "method",
                "choice",
                'Quadrature: "adaptive" (error-controlled) or "grid" (dense reference).',
                default="adaptive",
                choices=("adaptive", "grid"),
            ),
        ),
    ),
    "dephasing": (
        "Dephasing probes used for finite sweep.l_phi: floating voltage probes spread "
        "evenly along both arms, coupled so that the coherent intensity decays as "
        "exp(-L/L_phi) (see ringkit.transport.probes).",
        _keys(
            Key("probes", "int", "Number of probes.", default=100, low=2, high=10_000),
        ),
    ),
    "ensemble": (
        "Disorder ensemble: realization i uses disorder seed (seed + i).",
        _keys(
            Key(
                "realizations",
                "int",
                "Number of disorder realizations.",
                default=1,
                low=1,
                high=100_000,
            ),
            Key("seed", "int", "Seed of the first realization.", default=0, low=0, high=2**31 - 1),
        ),
    ),
    "executor": (
        "Where the work runs. 'process': local processes; 'serial': in this process; 'dask': "
        "a dask.distributed cluster (scheduler address, or a local cluster when absent).",
        _keys(
            Key(
                "kind",
                "choice",
                "Executor type.",
                default="process",
                choices=("process", "serial", "dask"),
            ),
            Key(
                "workers",
                "int",
                "Number of local worker processes (default: all cores).",
                low=1,
                high=4096,
                example="2",
            ),
            Key(
                "address",
                "str",
                'dask scheduler address (kind = "dask").',
                example='"tcp://192.0.2.10:8786"',
            ),
        ),
    ),
    "analysis": (
        "Oscillation analysis of every computed G(B) trace.",
        _keys(
            Key(
                "background",
                "choice",
                "Background removal before the spectrum.",
                default="polynomial",
                choices=("polynomial", "savgol", "moving_average", "none"),
            ),
            Key(
                "window",
                "choice",
                "FFT window.",
                default="hann",
                choices=("hann", "hamming", "blackman", "boxcar"),
            ),
        ),
    ),
    "output": (
        "What is written into the output directory besides results.nc and summary.json.",
        _keys(
            Key("figures", "bool", "Write figures.", default=True),
            Key(
                "figure_format",
                "choice",
                "Figure file format.",
                default="png",
                choices=("png", "svg", "pdf"),
            ),
            Key(
                "report",
                "choice",
                "Format of the human-readable report.",
                default="markdown",
                choices=("markdown", "html"),
            ),
            Key("dpi", "int", "Resolution of raster figures.", default=120, low=50, high=600),
        ),
    ),
}

PHYSICS_SECTIONS: tuple[str, ...] = (
    "material",
    "geometry",
    "lattice",
    "field",
    "sweep",
    "thermal",
    "dephasing",
    "ensemble",
)
