"""Small, independent kwant systems used by the transport-engine tests and the benchmark.

Written in plain kwant (value functions with Peierls phases), deliberately independent of the
ringkit builder, so that the engine is checked against kwant's own ``smatrix`` on systems it
did not construct.

Conventions (docs/physics.md §4.1-4.2): the hopping from site j to site i is
``H_ij = -t exp(i theta_ij)`` with ``theta_ij = +2 pi phi ybar dx`` in the Landau gauge
A = (-B y, 0) for electrons, ``phi = B a^2 / (h/e)`` the flux per plaquette in units of h/e and
positions in units of the lattice spacing a. The leads run along +-x and are field-free
(docs/engine.md §1.2: exact for a step profile B(x) in this gauge). Disorder is a uniform
Anderson potential ``disorder * (u - 1/2)`` with ``u`` a counter-based hash (splitmix64) of the
integer site tag and the seed, so a realization does not depend on the site order (docs/engine.md
section 5).
"""

from __future__ import annotations

import math

import kwant
import numpy as np

from ringkit.units import PHI0

__all__ = [
    "hashed_uniform",
    "square_ring",
    "chain_loop",
    "disordered_wire",
    "ring_builder",
    "build_ring_for_seed",
]

_MASK = np.uint64(0xFFFFFFFFFFFFFFFF)


def _splitmix64(z: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        z = (z + np.uint64(0x9E3779B97F4A7C15)) & _MASK
        z = ((z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)) & _MASK
        z = ((z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)) & _MASK
        return z ^ (z >> np.uint64(31))


def hashed_uniform(tags: np.ndarray, seed: int) -> np.ndarray:
    """Uniform numbers in [0, 1) from integer site tags (N, 2) and a seed (splitmix64)."""
    tags = np.asarray(tags, dtype=np.int64)
    with np.errstate(over="ignore"):
        key = _splitmix64(np.full(len(tags), np.uint64(seed) * np.uint64(0x632BE59BD9B4E019)))
        for col in range(tags.shape[1]):
            key = _splitmix64(key ^ tags[:, col].astype(np.uint64))
    return (key >> np.uint64(11)).astype(np.float64) / float(2**53)


def _phase_per_plaquette(field_param: str, lattice_spacing: float | None):
    """Return f(value) -> flux per plaquette in h/e for the chosen field parameter."""
    if field_param == "phi":
        return lambda value: value
    if lattice_spacing is None:
        raise ValueError("lattice_spacing (m) is needed for a field in tesla")
    factor = lattice_spacing**2 / PHI0
    return lambda value: value * factor


def _landau_hopping(field_param: str, lattice_spacing: float | None, t: float = 1.0):
    to_phi = _phase_per_plaquette(field_param, lattice_spacing)

    def hopping(site_i, site_j, **kw):
        # H_ij = -t exp(+2 pi i phi ybar dx) (docs/physics.md §4.2, Landau gauge, electrons)
        xi, yi = site_i.pos
        xj, yj = site_j.pos
        phi = to_phi(kw[field_param])
        return -t * np.exp(2j * np.pi * phi * (xi - xj) * (yi + yj) / 2)

    # kwant reads the parameter names from the signature: expose the field name explicitly
    if field_param == "phi":
        return lambda a, b, phi: hopping(a, b, phi=phi)
    if field_param == "B":
        return lambda a, b, B: hopping(a, b, B=B)
    raise ValueError(f"unsupported field_param {field_param!r}")


def square_ring(
    r_out: float = 20.0,
    r_in: float = 14.0,
    lead_width: int = 6,
    *,
    disorder: float = 0.0,
    seed: int = 0,
    field_param: str = "phi",
    lattice_spacing: float | None = None,
    field_in_leads: bool = False,
    upper_shift: float = 0.0,
    probe_leads: tuple = (),
    probe_tc: float = 0.3,
    probe_tl: float = 1.0,
    probe_energy: float = 0.0,
) -> kwant.system.FiniteSystem:
    """Square-lattice annulus ``r_in <= r < r_out`` (lattice units) with two leads along +-x.

    ``field_param`` is ``"phi"`` (uniform field, flux per plaquette in h/e), ``"B"`` (uniform
    field in tesla; needs ``lattice_spacing`` in m) or ``"flux"`` (flux tube through the hole
    only, in units of h/e, on the bonds crossing the cut x = 1/2, y > 0; docs/physics.md §4.5).
    ``upper_shift`` moves the outer edge of the upper half up by that many sites (unequal arms).
    On-site energy 4t + disorder (u - 1/2), t = 1.
    """
    lat = kwant.lattice.square(1.0, norbs=1)
    syst = kwant.Builder()

    def inside(x: int, y: int) -> bool:
        r_o = r_out + (upper_shift if y > 0 else 0.0)
        r = math.hypot(x, y)
        return r_in <= r < r_o

    n = int(math.ceil(r_out + abs(upper_shift))) + 1
    tags = np.array([(x, y) for x in range(-n, n + 1) for y in range(-n, n + 1) if inside(x, y)])
    u = hashed_uniform(tags, seed)
    for (x, y), ux in zip(tags, u, strict=True):
        syst[lat(int(x), int(y))] = 4.0 + disorder * (ux - 0.5)
    if field_param == "flux":
        syst[lat.neighbors()] = -1.0

        def cut_hop(site_i, site_j, flux):
            # hop from (1, y) to (0, y), y > 0, runs counter-clockwise: exp(-2 pi i flux)
            return -np.exp(-2j * np.pi * flux)

        for x, y in tags:
            if x == 0 and y > 0 and lat(1, int(y)) in syst:
                syst[lat(0, int(y)), lat(1, int(y))] = cut_hop
    else:
        syst[lat.neighbors()] = _landau_hopping(field_param, lattice_spacing)

    # optional real 1D probe leads (reference for the self-energy probes): on ring site
    # (x, y) a buffer site of a private lattice (onsite probe_energy, hopping -probe_tc to the
    # ring) continued by a semi-infinite chain (hopping -probe_tl) centred on probe_energy;
    # together they give the ring site the exact self-energy -i probe_tc^2 / probe_tl there.
    probe_lats = []
    for k, (x, y) in enumerate(probe_leads):
        plat = kwant.lattice.Monatomic(
            [[0.0, 1.0]], offset=(x + 0.25, y + 0.25), name=f"probe{k}", norbs=1
        )
        syst[plat(0)] = probe_energy
        syst[lat(int(x), int(y)), plat(0)] = -probe_tc
        probe_lats.append(plat)

    half = lead_width // 2
    ys = range(-half, lead_width - half)
    for direction in (-1, 1):
        lead = kwant.Builder(kwant.TranslationalSymmetry((direction, 0)))
        lead[(lat(0, y) for y in ys)] = 4.0
        if field_in_leads and field_param != "flux":
            lead[lat.neighbors()] = _landau_hopping(field_param, lattice_spacing)
        else:
            lead[lat.neighbors()] = -1.0
        syst.attach_lead(lead)
    for plat in probe_lats:
        plead = kwant.Builder(kwant.TranslationalSymmetry(plat.vec((1,))))
        plead[plat(0)] = probe_energy
        plead[plat.neighbors()] = -probe_tl
        syst.attach_lead(plead)
    return syst.finalized()


def chain_loop(
    width: int = 12,
    h_upper: int = 10,
    h_lower: int = 4,
    *,
    lead_hopping: float = 1.0,
    onsite: float = 0.0,
) -> kwant.system.FiniteSystem:
    """Single-channel rectangular loop (a 1D ring with unequal arms) threaded by a flux tube.

    Junctions at (0, 0) and (width, 0); the upper arm goes up ``h_upper`` sites, across and down
    (length ``width + 2 h_upper``), the lower arm down ``h_lower`` (length ``width + 2 h_lower``).
    Two semi-infinite chains along +-x. The field parameter ``flux`` is the flux through the
    loop in units of h/e; it enters as exp(-2 pi i flux) on the bond crossing a cut on the
    upper arm (docs/physics.md §4.5, counter-clockwise loop phase exp(-2 pi i Phi/Phi0)).
    """
    lat = kwant.lattice.square(1.0, norbs=1, name="c")
    syst = kwant.Builder()
    path_up = [(0, y) for y in range(0, h_upper + 1)]
    path_up += [(x, h_upper) for x in range(1, width + 1)]
    path_up += [(width, y) for y in range(h_upper - 1, -1, -1)]
    path_lo = [(0, -y) for y in range(1, h_lower + 1)]
    path_lo += [(x, -h_lower) for x in range(1, width + 1)]
    path_lo += [(width, -y) for y in range(h_lower - 1, 0, -1)]
    for tag in path_up + path_lo:
        syst[lat(*tag)] = onsite
    for a, b in zip(path_up[:-1], path_up[1:], strict=True):
        syst[lat(*a), lat(*b)] = -1.0
    lo = [(0, 0), *path_lo, (width, 0)]
    for a, b in zip(lo[:-1], lo[1:], strict=True):
        syst[lat(*a), lat(*b)] = -1.0
    cut = width // 2

    def cut_hop(site_i, site_j, flux):
        # hop from (cut+1, h) to (cut, h) runs counter-clockwise on the upper arm
        return -np.exp(-2j * np.pi * flux)

    syst[lat(cut, h_upper), lat(cut + 1, h_upper)] = cut_hop
    for direction, x0 in ((-1, 0), (1, width)):
        lead = kwant.Builder(kwant.TranslationalSymmetry((direction, 0)))
        lead[lat(x0, 0)] = onsite
        lead[lat.neighbors()] = -lead_hopping
        syst.attach_lead(lead)
    return syst.finalized()


def disordered_wire(
    length: int,
    width: int,
    *,
    disorder: float,
    seed: int,
    field_param: str = "phi",
) -> kwant.system.FiniteSystem:
    """Disordered strip with the field also in the (clean) leads, Landau gauge along x.

    Keeping the field in the leads avoids the interface reflection of a field that stops at the
    lead (docs/physics.md §10.3).
    """
    lat = kwant.lattice.square(1.0, norbs=1)
    syst = kwant.Builder()
    tags = np.array([(x, y) for x in range(length) for y in range(width)])
    u = hashed_uniform(tags, seed)
    for (x, y), ux in zip(tags, u, strict=True):
        syst[lat(int(x), int(y))] = 4.0 + disorder * (ux - 0.5)
    hop = _landau_hopping(field_param, None)
    syst[lat.neighbors()] = hop
    for direction in (-1, 1):
        lead = kwant.Builder(kwant.TranslationalSymmetry((direction, 0)))
        lead[(lat(0, y) for y in range(width))] = 4.0
        lead[lat.neighbors()] = hop
        syst.attach_lead(lead)
    return syst.finalized()


def ring_builder(size: str) -> dict:
    """Ring parameters for about 1 000, 3 300 and 30 000 sites (docs/engine.md §0: R 50/38, W 10,
    scaled by sqrt(N/3316))."""
    scale = {"1k": math.sqrt(1000 / 3316), "3.3k": 1.0, "30k": math.sqrt(30000 / 3316)}[size]
    return {
        "r_out": 50.0 * scale,
        "r_in": 38.0 * scale,
        "lead_width": max(3, int(round(10 * scale))),
    }


def build_ring_for_seed(seed: int, **kwargs) -> kwant.system.FiniteSystem:
    """Picklable module-level builder for ensemble tests: ``square_ring(seed=seed, **kwargs)``."""
    return square_ring(seed=seed, **kwargs)


class UcfTask:
    """One disordered wire: g = sum T_n at zero field (beta = 1) and at a TRS-breaking field
    (beta = 2), at several energies (spaced far beyond the Thouless energy, so the samples are
    independent: ergodic sampling). Returns an array (n_energies, 2)."""

    def __init__(self, length, width, disorder, energies, phi_broken):
        self.length = int(length)
        self.width = int(width)
        self.disorder = float(disorder)
        self.energies = tuple(float(e) for e in energies)
        self.phi_broken = float(phi_broken)

    def __call__(self, seed: int) -> np.ndarray:
        from ringkit.transport.fastsweep import FieldSweeper

        fsyst = disordered_wire(self.length, self.width, disorder=self.disorder, seed=seed)
        base = FieldSweeper(fsyst, field_param="phi", energy=self.energies[0], field_scale=1e-3)
        out = []
        for e in self.energies:
            sw = base if e == base.energy else base.at_energy(e)
            out.append([sw.transmission(0.0), sw.transmission(self.phi_broken)])
        return np.array(out)

    def describe(self) -> dict:
        return dict(vars(self), task="engine_systems.UcfTask")


class SlowTask:
    """Wraps a task and sleeps ``delay`` s per realization (for kill/resume tests). The delay
    does not change the result and is not part of the description."""

    def __init__(self, inner, delay: float):
        self.inner = inner
        self.delay = float(delay)

    def __call__(self, seed: int):
        import time

        time.sleep(self.delay)
        return self.inner(seed)

    def describe(self) -> dict:
        return self.inner.describe()


class CrashTask:
    """Kills its worker process (os._exit) for one seed; ``python_error`` raises instead."""

    def __init__(self, inner, bad_seed: int, python_error: bool = False):
        self.inner = inner
        self.bad_seed = int(bad_seed)
        self.python_error = bool(python_error)

    def __call__(self, seed: int):
        import os

        if seed == self.bad_seed:
            if self.python_error:
                raise ValueError(f"bad realization {seed}")
            os._exit(3)
        return self.inner(seed)

    def describe(self) -> dict:
        return self.inner.describe()
