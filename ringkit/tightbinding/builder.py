"""Build the finalized kwant tight-binding system of a :class:`ringkit.device.RingDevice`.

API
---
build_ring(device, *, seed=0) -> TightBindingRing
TightBindingRing
    Finalized kwant system plus everything needed to use it in SI units.

Model
-----
Energies inside kwant are in units of the hopping t = hbar^2/(2 m* a^2), measured from the band
bottom (on-site 4t on the square lattice, 2t on a chain); positions are in lattice spacings.
Lead 0 is the left lead (source, along -x), lead 1 the right lead (drain, along +x); both are
clean, field-free square-lattice strips of ``round(lead_width/a)`` sites (1D chains for a chain
ring). Leads 2 and 3 (``geometry.extra_leads``) are the same kind of strips along -x or +x,
attached at their own heights; all strips of one side end at the same interface column, so
the field fills the scattering region and stops at one line on each side
(docs/multiterminal.md). ``device.lead_stub`` columns of each lead belong to the scattering
region (labelled ``"lead-contact"``); disorder and gate act on ring sites only.

kwant parameters: ``B`` [T] (uniform mode, Landau gauge, see :mod:`ringkit.tightbinding.fields`)
or ``flux`` [Wb through the hole] (flux-tube mode), and ``gate`` (arm potential in units of t)
when the device has an :class:`ArmGate`. Disorder is evaluated once here, keyed by the integer
lattice coordinates of each site and the seed (:mod:`ringkit.tightbinding.disorder`), and stored
as constant on-site values, so no value function does more than one multiplication per call.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import kwant
import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ringkit._validation import ParameterError
from ringkit.device import RingDevice
from ringkit.tightbinding import disorder as _dis
from ringkit.tightbinding import fields as _fields
from ringkit.tightbinding._bulk import finalize_direct as _finalize_direct
from ringkit.tightbinding._bulk import gated_onsite as _gated_onsite

__all__ = ["build_ring", "TightBindingRing"]

_STREAM_SQUARE = 0
_STREAM_CHAIN = 1


@dataclass(frozen=True, eq=False)
class TightBindingRing:
    """A built ring: finalized kwant system and its SI bookkeeping.

    Attributes
    ----------
    fsyst : kwant.system.FiniteSystem
        Finalized system with two leads (0 = left, 1 = right).
    device : RingDevice
    seed : int
        Disorder seed.
    lattice_spacing : float
        a in m.
    hopping : float
        t in J.
    onsite_offset : float
        Band-bottom offset of the on-site energy in units of t (4 square lattice, 2 chain).
    positions : ndarray, shape (n, 2)
        Site positions in m, in kwant's site order.
    tags : ndarray of int, shape (n, 2)
        Integer site coordinates used as disorder keys ((n, 0) for chain sites; stub sites of a
        chain carry (-1, k) / (-2, k)).
    arm_of_site : ndarray of str
        ``"upper"``, ``"lower"``, ``"lead-contact"`` (lead stubs) or ``"junction"`` (chain
        sites where a lead attaches).
    onsite_potential : ndarray
        Disorder energy of each site in J (0 on stubs).
    disorder_strength : float
        Anderson W in J.
    born_mean_free_path : float or None
        Born mean free path at E_F in m (None if clean).
    loop_area : float
        Area in m^2 enclosed by the ring's centre line (exact polygon area for a chain).
    lead_sites : int
        Number of sites across lead 0 (and lead 1).
    lead_info : tuple of dict
        Per lead (terminal order): ``index``, ``side`` (-1 along -x, +1 along +x),
        ``angle`` [rad], ``n_sites`` across, ``interface`` (site indices of the interface).
    """

    fsyst: Any
    device: RingDevice
    seed: int
    lattice_spacing: float
    hopping: float
    onsite_offset: float
    positions: np.ndarray
    tags: np.ndarray
    arm_of_site: np.ndarray
    onsite_potential: np.ndarray
    disorder_strength: float
    born_mean_free_path: float | None
    loop_area: float
    lead_sites: int
    lead_info: tuple = ()

    # ---------------------------------------------------------------- conveniences
    @property
    def n_sites(self) -> int:
        """Number of sites in the scattering region."""
        return len(self.positions)

    @property
    def n_leads(self) -> int:
        """Number of leads (terminals without probes)."""
        return len(self.fsyst.leads)

    @property
    def field_mode(self) -> str:
        """``"uniform"`` or ``"flux_tube"``."""
        return self.device.field_mode

    @property
    def field_param(self) -> str:
        """Name of the kwant field parameter: ``"B"`` (uniform) or ``"flux"`` (flux tube)."""
        return "B" if self.device.field_mode == "uniform" else "flux"

    @property
    def ring_sites(self) -> np.ndarray:
        """Boolean mask of the sites of the closed ring (everything except lead stubs)."""
        return self.arm_of_site != "lead-contact"

    @property
    def fermi_energy(self) -> float:
        """Fermi energy of the material in J."""
        return self.device.material.fermi_energy_J

    @property
    def fermi_energy_lattice(self) -> float:
        """Fermi energy in units of t (the kwant ``energy`` argument)."""
        return self.to_lattice_energy(self.fermi_energy)

    @property
    def band_top(self) -> float:
        """Top of the lattice band in J."""
        return 2.0 * self.onsite_offset * self.hopping

    def to_lattice_energy(self, energy: float) -> float:
        """Convert an energy in J (above the band bottom) to units of t, checking the band."""
        e = float(energy)
        if not 0.0 < e < self.band_top:
            raise ParameterError(
                "energy", energy, f"must lie inside the lattice band (0, {self.band_top:.6g})", "J"
            )
        return e / self.hopping

    def params(self, B: float = 0.0, flux: float = 0.0, gate: float | None = None) -> dict:
        """kwant ``params`` for field ``B`` [T] or hole flux ``flux`` [Wb] and gate [J].

        ``gate=None`` uses the device's :class:`ArmGate` potential.
        """
        p: dict[str, float] = {}
        if self.field_mode == "uniform":
            if flux != 0:
                raise ParameterError(
                    "flux", flux, "must be 0 in field_mode 'uniform' (use B)", "Wb"
                )
            p["B"] = float(B)
        else:
            if B != 0:
                raise ParameterError("B", B, "must be 0 in field_mode 'flux_tube' (use flux)", "T")
            p["flux"] = float(flux)
        if self.device.gate is not None:
            v = self.device.gate.potential if gate is None else float(gate)
            p["gate"] = v / self.hopping
        elif gate not in (None, 0, 0.0):
            raise ParameterError("gate", gate, "needs a device with an ArmGate", "J")
        return p

    def check_field(self, B: float, *, stacklevel: int = 2) -> list[str]:
        """Warn if field B [T] gives lattice artefacts or cyclotron orbits (uniform mode)."""
        if self.field_mode != "uniform":
            return []
        return _fields.check_field_regime(
            B,
            self.lattice_spacing,
            self.device.material.fermi_wavevector,
            self.device.geometry.max_arm_width,
            stacklevel=stacklevel + 1,
        )


# ------------------------------------------------------------------------------------ helpers
def _disorder_strength(device: RingDevice, dim: int) -> tuple[float, float | None]:
    """Anderson W in J and the Born mean free path in m for the device's material."""
    mat = device.material
    t, a = device.hopping, device.spacing
    e_lat = mat.fermi_energy_J / t
    if mat.disorder_strength is not None:
        w = float(mat.disorder_strength)
        if w == 0:
            return 0.0, None
        return w, a * _dis.born_mean_free_path(w / t, e_lat, dim=dim)
    l_el = mat.elastic_mean_free_path
    if l_el is None:
        return 0.0, None
    return t * _dis.strength_for_mean_free_path(l_el / a, e_lat, dim=dim), l_el


def _cut_hits_lead(cut: float, x_edge: float, y_lo: float, y_hi: float, side: int) -> bool:
    """Does the ray at angle ``cut`` from the origin meet the lead strip beyond ``x_edge``?"""
    c, s = math.cos(cut), math.sin(cut)
    if abs(c) < 1e-12 or (side == 0 and c > 0) or (side == 1 and c < 0):
        return False
    tan = s / c
    y_edge = x_edge * tan
    # y = x tan(cut) on the part of the ray beyond x_edge (x -> -inf for the left lead)
    grows_up = (tan < 0) if side == 0 else (tan > 0)
    if tan == 0:
        return y_lo <= 0.0 <= y_hi
    return (y_hi >= y_edge) if grows_up else (y_lo <= y_edge)


def _check_cut(device: RingDevice, crossing_stub: bool, leads: list[tuple]) -> None:
    if device.field_mode != "flux_tube":
        return
    hit = crossing_stub or any(_cut_hits_lead(device.cut_angle, *lead) for lead in leads)
    if hit:
        raise ParameterError(
            "cut_angle",
            device.cut_angle,
            "the branch cut must run from the hole to infinity without crossing a lead "
            "(e.g. pi/2 or -pi/2 for leads attached left and right)",
            "rad",
        )


def _arm_labels(device: RingDevice, pos: np.ndarray) -> np.ndarray:
    upper = device.geometry.is_upper(np.arctan2(pos[:, 1], pos[:, 0]))
    return np.where(upper, "upper", "lower").astype(object)


def _onsite_values(device, arm, potential_t, offset, syst, sites) -> None:
    """Constant on-site values; gated arm sites get a function of the ``gate`` parameter."""
    gate = device.gate
    values = offset + potential_t
    if gate is None:
        for site, v in zip(sites, values, strict=True):
            syst[site] = float(v)
        return
    base = {}
    for site, v, label in zip(sites, values, arm, strict=True):
        if label == gate.arm:
            base[site] = float(v)
        else:
            syst[site] = float(v)
    onsite_gated = _gated_onsite(base)
    for site in base:
        syst[site] = onsite_gated


# ------------------------------------------------------------------------------------ 2D rings
def _lattice_sites(device: RingDevice) -> dict[str, Any]:
    """Integer coordinates of the scattering region of a 2D ring (ring + lead stubs)."""
    geo, a = device.geometry, device.spacing
    tol = 1e-9 * a
    n_ext = math.ceil(geo.outer_extent / a - 1e-9)
    x_edge = n_ext + device.lead_stub  # |x| of the outermost (lead-interface) column
    n_rows = max(1, round(float(geo.lead_width) / a))
    xs = np.arange(-x_edge, x_edge + 1)
    ys = np.arange(-n_ext - 1, n_ext + 2)
    gx, gy = np.meshgrid(xs, ys, indexing="ij")
    gx, gy = gx.ravel(), gy.ravel()
    ring = geo.ring_mask(gx * a, gy * a, tol)
    hole = geo.hole_mask(gx * a, gy * a, tol)
    stub = np.zeros_like(ring)
    rows = []
    for idx in range(geo.n_leads):
        sign = geo.lead_side(idx)
        n_r = max(1, round(float(geo.lead_width_of(idx)) / a))
        yc = geo.lead_center(idx) / a
        j0 = round(yc - (n_r - 1) / 2)
        r = np.arange(j0, j0 + n_r)
        rows.append(r)
        stub |= np.isin(gy, r) & (sign * gx >= 0) & ~hole & ~ring
    _check_lead_rows(geo, rows, a)
    keep = ring | stub
    tags = np.stack([gx[keep], gy[keep]], axis=1)
    is_stub = stub[keep]
    # drop isolated sites (no nearest neighbour), then require one connected piece
    while True:
        adj = _adjacency(tags)
        deg = np.asarray(adj.sum(axis=1)).ravel()
        if np.all(deg > 0):
            break
        tags, is_stub = tags[deg > 0], is_stub[deg > 0]
    n_comp, _ = connected_components(adj, directed=False)
    if n_comp != 1:
        raise ParameterError(
            "lattice_spacing",
            a,
            f"gives a ring that falls apart into {n_comp} pieces on the lattice; "
            "use a smaller spacing or wider arms",
            "m",
        )
    return dict(tags=tags, is_stub=is_stub, rows=rows, x_edge=x_edge, n_rows=n_rows)


def _check_lead_rows(geo, rows: list[np.ndarray], a: float) -> None:
    """Leads on one side need disjoint lattice rows with at least one free row between them."""
    for i in range(len(rows)):
        for j in range(i + 1, len(rows)):
            if geo.lead_side(i) != geo.lead_side(j):
                continue
            gap = max(rows[i][0] - rows[j][-1], rows[j][0] - rows[i][-1]) - 1
            if gap < 1:
                what = "share lattice rows" if gap < 0 else "touch (no free row between them)"
                raise ParameterError(
                    "leads",
                    [round(s.angle, 6) for s in geo.leads],
                    f"leads {i} and {j} {what} at lattice spacing {a:.4g} m (rows "
                    f"{rows[i][0]}..{rows[i][-1]} and {rows[j][0]}..{rows[j][-1]}); allowed: "
                    "strips on the same side at least one lattice row apart (move an angle, "
                    "narrow a lead or refine the lattice)",
                )


def _adjacency(tags: np.ndarray) -> sp.csr_matrix:
    pairs = _neighbour_pairs(tags)
    n = len(tags)
    i = np.concatenate([p[0] for p in pairs])
    j = np.concatenate([p[1] for p in pairs])
    m = sp.coo_matrix((np.ones(len(i)), (i, j)), shape=(n, n))
    return (m + m.T).tocsr()


def _neighbour_pairs(tags: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
    """Index pairs (i, j) with tag_i = tag_j + (1, 0) and tag_i = tag_j + (0, 1)."""
    off = int(np.abs(tags).max()) + 2
    code = (tags[:, 0] + off) * (4 * off) + (tags[:, 1] + off)
    order = np.argsort(code)
    sorted_code = code[order]
    out = []
    for dx, dy in ((1, 0), (0, 1)):
        target = code + dx * 4 * off + dy
        pos = np.searchsorted(sorted_code, target)
        pos = np.minimum(pos, len(code) - 1)
        found = sorted_code[pos] == target
        out.append((order[pos[found]], np.nonzero(found)[0]))
    return out


def _build_square(device: RingDevice, seed: int, *, direct: bool | None = None) -> TightBindingRing:
    """2D ring on the square lattice.

    ``direct`` (default: when kwant is 1.5.0) assembles the finalized system in bulk with
    :func:`_finalize_direct` instead of filling a :class:`kwant.Builder` site by site; both
    give the same system (same sites, graph, edge order and values; tests/test_view_live.py).
    """
    a, t = device.spacing, device.hopping
    info = _lattice_sites(device)
    tags, is_stub = info["tags"], info["is_stub"]
    lat = kwant.lattice.square(1, norbs=1)
    pos_lat = tags.astype(float)
    arm = _arm_labels(device, pos_lat)
    arm[is_stub] = "lead-contact"

    w_j, l_born = _disorder_strength(device, dim=2)
    pot = np.zeros(len(tags))
    if w_j > 0:
        pot[~is_stub] = _dis.anderson_potential(tags[~is_stub], w_j, seed, _STREAM_SQUARE)

    # hoppings (i <- j) in the order they are set: horizontal bonds, then vertical bonds
    (ih, jh), (iv, jv) = _neighbour_pairs(tags)
    hop_i, hop_j = np.concatenate([ih, iv]), np.concatenate([jh, jv])
    hop_vals = np.full(hop_i.size, -1.0, dtype=object)
    crossing_stub = False
    if device.field_mode == "uniform":
        hop_vals[: ih.size] = _fields.uniform_hopping(1.0, a)
    else:
        cross = _fields.cut_crossing(pos_lat[hop_i], pos_lat[hop_j], device.cut_angle)
        crossing_stub = bool(np.any((cross != 0) & (is_stub[hop_i] | is_stub[hop_j])))
        hop_vals[cross != 0] = _fields.flux_tube_hopping(1.0, device.cut_angle)

    x_edge = info["x_edge"]
    leads_geo, lead_builders, interfaces = [], [], []
    for side, rows in enumerate(info["rows"]):
        direction = device.geometry.lead_side(side)
        lead = kwant.Builder(kwant.TranslationalSymmetry((direction, 0)))
        for y in rows:
            lead[lat(0, int(y))] = 4.0
        lead[lat.neighbors()] = -1.0
        lead_builders.append(lead)
        # the outermost stub column: where kwant's attach_lead puts the interface
        interfaces.append([(direction * x_edge, int(y)) for y in rows])
        leads_geo.append((direction * x_edge, rows[0] - 0.5, rows[-1] + 0.5, int(direction > 0)))
    _check_cut(device, crossing_stub, leads_geo)

    onsite = 4.0 + pot / t
    gated = np.zeros(len(tags), dtype=bool) if device.gate is None else arm == device.gate.arm
    if direct is None:
        direct = kwant.__version__ == "1.5.0"
    fsyst = None
    if direct:
        fsyst, order = _finalize_direct(
            lat, tags, onsite, gated, (hop_i, hop_j, hop_vals), lead_builders, interfaces
        )
    if fsyst is None:  # reference path (and fallback): a kwant Builder filled site by site
        sites = [lat(int(x), int(y)) for x, y in tags]
        syst = kwant.Builder()
        _onsite_values(device, arm, pot / t, 4.0, syst, sites)
        for i, j, v in zip(hop_i.tolist(), hop_j.tolist(), hop_vals, strict=True):
            syst[sites[i], sites[j]] = v
        for lead in lead_builders:
            syst.attach_lead(lead)
        fsyst = syst.finalized()
        order = np.array([fsyst.id_by_site[s] for s in sites])
    inv = np.empty_like(order)
    inv[order] = np.arange(len(order))
    return TightBindingRing(
        lead_info=_lead_info(device, fsyst, [len(r) for r in info["rows"]]),
        fsyst=fsyst,
        device=device,
        seed=int(seed),
        lattice_spacing=a,
        hopping=t,
        onsite_offset=4.0,
        positions=pos_lat[inv] * a,
        tags=tags[inv],
        arm_of_site=arm[inv],
        onsite_potential=pot[inv],
        disorder_strength=w_j,
        born_mean_free_path=l_born,
        loop_area=device.geometry.area_mean,
        lead_sites=info["n_rows"],
    )


def _lead_info(device: RingDevice, fsyst, widths: list[int]) -> tuple:
    geo = device.geometry
    return tuple(
        {
            "index": k,
            "side": geo.lead_side(k),
            "angle": float(geo.leads[k].angle),
            "n_sites": int(widths[k]),
            "interface": np.asarray(fsyst.lead_interfaces[k]).tolist(),
        }
        for k in range(geo.n_leads)
    )


# ------------------------------------------------------------------------------------ chain
def _build_chain(device: RingDevice, seed: int) -> TightBindingRing:
    a, t = device.spacing, device.hopping
    geo = device.geometry
    n = device.n_chain_sites
    radius = n / (2 * math.pi)  # lattice units: arc spacing 1
    theta_l, theta_r = geo.lead_angles
    phi = theta_l + 2 * math.pi * np.arange(n) / n
    pos = radius * np.stack([np.cos(phi), np.sin(phi)], axis=1)
    k_leads = [
        round(((spec.angle - theta_l) % (2 * math.pi)) / (2 * math.pi / n)) % n
        for spec in geo.leads
    ]
    n_r = k_leads[1]
    if n_r == 0:
        raise ParameterError("lead_angles", geo.lead_angles, "must attach to different sites")
    if len(set(k_leads)) != len(k_leads):
        raise ParameterError(
            "leads",
            [round(s.angle, 6) for s in geo.leads],
            f"two leads attach to the same chain site (sites {k_leads} of {n}); allowed: "
            "angles at least one site spacing (2 pi/n_sites) apart",
        )
    lattice = kwant.lattice.general([(1.0, 0.0), (0.0, 1.0)], basis=pos, norbs=1)
    ring_sites = [sub(0, 0) for sub in lattice.sublattices]
    # lower arm: sites swept counter-clockwise from the left to the right junction
    idx = np.arange(n)
    arm = np.where(idx < n_r, "lower", "upper").astype(object)
    arm[[0, n_r]] = "junction"
    tags = np.stack([np.arange(n), np.zeros(n, int)], axis=1)

    w_j, l_born = _disorder_strength(device, dim=1)
    pot = np.zeros(n)
    if w_j > 0:
        pot = _dis.anderson_potential(tags, w_j, seed, _STREAM_CHAIN)

    syst = kwant.Builder()
    _onsite_values(device, arm, pot / t, 2.0, syst, ring_sites)
    if device.field_mode == "uniform":
        hop = _fields.uniform_hopping(1.0, a)
        for k in range(n):
            syst[ring_sites[(k + 1) % n], ring_sites[k]] = hop
    else:
        hop = _fields.flux_tube_hopping(1.0, device.cut_angle)
        nxt = np.roll(np.arange(n), -1)
        cross = _fields.cut_crossing(pos[nxt], pos, device.cut_angle)
        for k in range(n):
            syst[ring_sites[nxt[k]], ring_sites[k]] = hop if cross[k] else -1.0

    stub_sites, stub_pos, stub_tags = [], [], []
    leads_geo = []
    for side, k_att in enumerate(k_leads):
        direction = float(geo.lead_side(side))
        fam = kwant.lattice.Monatomic([[1.0, 0.0]], offset=pos[k_att], name=f"lead{side}", norbs=1)
        prev = ring_sites[k_att]
        for s in range(1, device.lead_stub + 1):
            site = fam(int(direction) * s)
            syst[site] = 2.0
            syst[site, prev] = -1.0
            prev = site
            stub_sites.append(site)
            stub_pos.append(pos[k_att] + np.array([direction * s, 0.0]))
            stub_tags.append((-1 - side, s))
        lead = kwant.Builder(kwant.TranslationalSymmetry((direction, 0.0)))
        lead[fam(0)] = 2.0
        lead[fam.neighbors()] = -1.0
        syst.attach_lead(lead)
        y0 = pos[k_att][1]
        leads_geo.append((pos[k_att][0], y0 - 0.5, y0 + 0.5, int(direction > 0)))
    _check_cut(device, False, leads_geo)

    fsyst = syst.finalized()
    all_sites = ring_sites + stub_sites
    all_pos = np.concatenate([pos, np.array(stub_pos)])
    all_tags = np.concatenate([tags, np.array(stub_tags, dtype=int)])
    all_arm = np.concatenate([arm, np.array(["lead-contact"] * len(stub_sites), dtype=object)])
    all_pot = np.concatenate([pot, np.zeros(len(stub_sites))])
    order = np.array([fsyst.id_by_site[s] for s in all_sites])
    inv = np.empty_like(order)
    inv[order] = np.arange(len(order))
    poly_area = 0.5 * n * radius**2 * math.sin(2 * math.pi / n) * a**2
    return TightBindingRing(
        lead_info=_lead_info(device, fsyst, [1] * geo.n_leads),
        fsyst=fsyst,
        device=device,
        seed=int(seed),
        lattice_spacing=a,
        hopping=t,
        onsite_offset=2.0,
        positions=all_pos[inv] * a,
        tags=all_tags[inv],
        arm_of_site=all_arm[inv],
        onsite_potential=all_pot[inv],
        disorder_strength=w_j,
        born_mean_free_path=l_born,
        loop_area=poly_area,
        lead_sites=1,
    )


def build_ring(device: RingDevice, *, seed: int = 0) -> TightBindingRing:
    """Discretise ``device`` on a lattice and return the finalized kwant system.

    Parameters
    ----------
    device : RingDevice
    seed : int
        Disorder realisation (ignored for a clean material).

    Raises
    ------
    DeviceTooLargeError
        The site estimate exceeds ``device.max_sites`` (the message gives the estimate).
    ParameterError
        Branch cut crossing a lead, ring falling apart on the lattice, bad seed.
    """
    if not isinstance(device, RingDevice):
        raise ParameterError("device", device, "must be a ringkit RingDevice")
    if int(seed) != seed or not 0 <= int(seed) < 2**63:
        raise ParameterError("seed", seed, "must be an integer in [0, 2**63)")
    device.check_size()
    if device.geometry.shape == "chain":
        return _build_chain(device, int(seed))
    return _build_square(device, int(seed))
