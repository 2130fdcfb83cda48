"""Small, independent flux-tube ring builder used by the low-rank tests and benchmark.

This is deliberately *not* ringkit's own ring builder: it is a plain kwant square-lattice ring
written from docs/physics.md (section 4.5, branch cut), so the low-rank solver is checked on a
system that shares no code with the rest of ringkit.

Model (lattice units, a = 1, hopping t):

* sites of a square lattice inside an annulus: outer circle of radius ``r_out`` centred at the
  origin, inner (hole) circle of radius ``r_in`` centred at ``hole_offset``; moving the hole off
  centre makes the two arms of different width ("asymmetric arms");
* on-site energy ``4t + disorder*(u - 1/2)`` with ``u`` a hashed uniform number of the integer
  site tag and the seed (``kwant.digest.uniform``), fixed at build time;
* hopping ``-t`` everywhere, except the bonds that cross the branch cut: the ray
  ``x = cut_x`` going up (``cut="top"``) or down (``cut="bottom"``) from the hole centre. A hop
  across it in the counter-clockwise sense picks up ``exp(-2 pi i flux/(h/e))``, the reverse hop
  the complex conjugate, so the product of the hopping phases around the hole, counter-clockwise,
  is ``exp(-2 pi i flux/(h/e))`` (electrons, docs/physics.md §4.1);
* two field-free leads along -x (lead 0) and +x (lead 1), ``lead_width`` sites wide, centred on
  y = 0, plus optionally a third lead along -y under the lower arm;
* ``norbs=2`` makes every site a spin-1/2 pair with a Zeeman term ``zeeman * sigma_z`` (a check of
  multi-orbital bookkeeping).

Every hopping is a kwant value function of the parameter ``flux`` (Wb), which is how a
straightforward kwant script would write it.
"""

from __future__ import annotations

import cmath

import kwant
import numpy as np
import tinyarray as ta

from ringkit.units import PHI0

__all__ = [
    "chain_ring",
    "flux_tube_ring",
    "ring_sites_near",
    "side_coupled_ring",
]


def flux_tube_ring(
    r_out: float = 12.0,
    r_in: float = 7.0,
    *,
    lead_width: int = 4,
    hole_offset: tuple[float, float] = (0.0, 0.0),
    disorder: float = 0.0,
    seed: int = 0,
    cut: str = "top",
    cut_x: float = 0.5,
    third_lead: bool = False,
    norbs: int = 1,
    zeeman: float = 0.0,
    t: float = 1.0,
    value_functions: str = "all",
    finalized: bool = True,
):
    """Return a finalized kwant flux-tube ring (see the module docstring).

    The only kwant parameter is ``flux`` (flux through the hole, Wb). ``value_functions="cut"``
    makes only the cut bonds value functions (all other hoppings constants), as a builder that
    knows its cut would do.
    """
    if cut not in ("top", "bottom"):
        raise ValueError(f"cut must be 'top' or 'bottom', got {cut!r}")
    if third_lead and cut == "bottom":
        raise ValueError("the third lead sits under the lower arm: use cut='top'")
    lat = kwant.lattice.square(1.0, norbs=norbs)
    hx, hy = hole_offset
    lw0 = -(lead_width // 2)
    lw1 = lead_width - lead_width // 2  # lead rows y in [lw0, lw1)
    eye = ta.identity(norbs) if norbs > 1 else 1
    sz = ta.array([[1, 0], [0, -1]]) if norbs == 2 else 0

    def in_ring(x: float, y: float) -> bool:
        return x * x + y * y <= r_out**2 and (x - hx) ** 2 + (y - hy) ** 2 >= r_in**2

    def in_stub(x: float, y: float) -> bool:
        on_axis = lw0 <= y < lw1 and r_out - 3 <= abs(x) <= r_out + 1
        bottom = third_lead and (lw0 <= x < lw1) and -r_out - 1 <= y <= -(r_out - 3)
        return on_axis or bottom

    def onsite_value(x: int, y: int):
        u = kwant.digest.uniform(f"{x},{y}", salt=str(seed))
        e0 = 4.0 * t + disorder * (u - 0.5)
        return e0 * eye + zeeman * sz if norbs > 1 else e0

    side = 1.0 if cut == "top" else -1.0

    def crosses_cut(s1, s2) -> bool:
        (x1, y1), (x2, y2) = s1.pos, s2.pos
        if y1 != y2 or (x1 - cut_x) * (x2 - cut_x) > 0:
            return False
        return side * (y1 - hy) > 0

    def hopping(site1, site2, flux):
        # value = H[site1, site2], the amplitude to hop from site2 to site1
        if crosses_cut(site1, site2):
            dx = site1.pos[0] - site2.pos[0]  # +1 or -1
            # counter-clockwise across the top cut is the -x direction (bottom: +x)
            phase = cmath.exp(1j * side * dx * 2.0 * np.pi * flux / PHI0)
            return -t * phase * eye
        return -t * eye

    syst = kwant.Builder()
    r = int(np.ceil(r_out)) + 2
    for x in range(-r, r + 1):
        for y in range(-r, r + 1):
            if in_ring(x, y) or in_stub(x, y):
                syst[lat(x, y)] = onsite_value(x, y)
    syst[lat.neighbors()] = hopping
    if value_functions == "cut":
        for (s1, s2), _ in list(syst.hopping_value_pairs()):
            if not crosses_cut(s1, s2):
                syst[s1, s2] = -t * eye

    lead = kwant.Builder(kwant.TranslationalSymmetry((-1, 0)))
    lead[(lat(0, y) for y in range(lw0, lw1))] = 4.0 * t * eye
    lead[lat.neighbors()] = -t * eye
    syst.attach_lead(lead)
    syst.attach_lead(lead.reversed())
    if third_lead:
        lead3 = kwant.Builder(kwant.TranslationalSymmetry((0, -1)))
        lead3[(lat(x, 0) for x in range(lw0, lw1))] = 4.0 * t * eye
        lead3[lat.neighbors()] = -t * eye
        syst.attach_lead(lead3)
    return syst.finalized() if finalized else syst


def ring_sites_near(fsyst, angles, radius: float) -> list[int]:
    """Indices of the sites closest to the points ``radius*(cos a, sin a)`` for each angle."""
    pos = np.array([s.pos for s in fsyst.sites])
    out = []
    for a in angles:
        p = radius * np.array([np.cos(a), np.sin(a)])
        out.append(int(np.argmin(np.sum((pos - p) ** 2, axis=1))))
    return out


def side_coupled_ring(n_ring: int = 8, *, flux_on_bond: int = 3, t: float = 1.0):
    """A single-channel wire with a closed loop of ``n_ring`` sites hanging from one wire site.

    Leads: 1D chains (on-site 0, hopping ``-t``, band [-2t, 2t]) along -x and +x. The loop sites
    sit at angles ``2 pi n/n_ring`` on a circle above the wire; loop site 0 is joined to the
    middle wire site. Only the loop bond ``flux_on_bond -> flux_on_bond + 1`` carries the phase
    ``exp(-2 pi i flux/(h/e))``. At zero flux the loop states ``sin(2 pi m n/n_ring)`` vanish at
    the joint, so they are bound states in the continuum at ``E = -2t cos(2 pi m/n_ring)``: the
    matrix ``E - H - Sigma`` is singular there, but not at any flux off a multiple of h/2e.
    """
    lat = kwant.lattice.general([(1.0, 0.0), (0.0, 1.0)], norbs=1)
    syst = kwant.Builder()
    wire = [lat(x, 0) for x in range(-2, 3)]
    for s in wire:
        syst[s] = 0.0
    for a, b in zip(wire[:-1], wire[1:], strict=True):
        syst[a, b] = -t
    # loop sites: distinct tags on a separate row band, joined explicitly (no neighbour rule)
    loop = [lat(n, 10) for n in range(n_ring)]
    for s in loop:
        syst[s] = 0.0
    k = flux_on_bond

    def loop_hop(site1, site2, flux):
        # H[site1, site2]: hop from site2 to site1; site2 -> site1 is the counter-clockwise
        # direction when site1 follows site2 around the loop
        return -t * cmath.exp(-2j * np.pi * flux / PHI0)

    for n in range(n_ring):
        a, b = loop[n], loop[(n + 1) % n_ring]
        syst[b, a] = loop_hop if n == k else -t
    syst[loop[0], lat(0, 0)] = -t
    lead = kwant.Builder(kwant.TranslationalSymmetry((-1, 0)))
    lead[lat(0, 0)] = 0.0
    lead[lat(1, 0), lat(0, 0)] = -t
    syst.attach_lead(lead)
    syst.attach_lead(lead.reversed())
    return syst.finalized()


def chain_ring(n_ring: int = 10, *, variant: str = "good", t: float = 1.0):
    """Single-channel ring of ``n_ring`` sites between two 1D leads (for refusal tests).

    The leads (on-site 0, hopping ``-t``) attach to ring sites 0 and ``n_ring // 2`` through one
    stub site each. ``variant`` selects how the kwant parameter ``flux`` enters:

    * ``"good"``: phase ``exp(-2 pi i flux/(h/e))`` on the counter-clockwise hop of one bond;
    * ``"all_bonds"``: phase ``exp(-2 pi i flux/(h/e)/n_ring)`` on every ring bond (same total
      flux, spread like a field: exact but not low-rank);
    * ``"onsite"``: additionally a flux-dependent on-site energy (not a Peierls phase);
    * ``"modulus"``: the cut hopping's modulus changes with the flux;
    * ``"nonlinear"``: the cut phase is quadratic in the flux;
    * ``"lead"``: the lead hopping carries a flux-dependent phase;
    * ``"none"``: nothing depends on the flux.
    """
    lat = kwant.lattice.general([(1.0, 0.0), (0.0, 1.0)], norbs=1)
    syst = kwant.Builder()
    ring = [lat(k, 5) for k in range(n_ring)]

    def theta(flux):
        return 2.0 * np.pi * flux / PHI0

    def onsite_flux(site, flux):
        return 0.3 * np.cos(theta(flux))

    for s in ring:
        syst[s] = 0.0
    if variant == "onsite":
        syst[ring[2]] = onsite_flux

    def cut_hop(site1, site2, flux):  # site2 -> site1 is counter-clockwise
        if variant == "modulus":
            return -t * (1.0 + 0.2 * np.sin(theta(flux)) ** 2) * cmath.exp(-1j * theta(flux))
        if variant == "nonlinear":
            return -t * cmath.exp(-1j * theta(flux) ** 2)
        if variant == "none":
            return -t + 0.0 * flux
        return -t * cmath.exp(-1j * theta(flux))

    def spread_hop(site1, site2, flux):
        return -t * cmath.exp(-1j * theta(flux) / n_ring)

    for k in range(n_ring):
        a, b = ring[k], ring[(k + 1) % n_ring]
        if variant == "all_bonds":
            syst[b, a] = spread_hop
        else:
            syst[b, a] = cut_hop if k == n_ring // 4 else -t
    syst[lat(0, 0)] = 0.0
    syst[lat(20, 0)] = 0.0
    syst[ring[0], lat(0, 0)] = -t
    syst[ring[n_ring // 2], lat(20, 0)] = -t

    def lead_hop(site1, site2, flux):
        return -t * cmath.exp(1j * theta(flux))

    for direction, x0 in ((-1, 0), (1, 20)):
        lead = kwant.Builder(kwant.TranslationalSymmetry((direction, 0)))
        lead[lat(x0, 0)] = 0.0
        lead[lat(x0 + direction, 0), lat(x0, 0)] = lead_hop if variant == "lead" else -t
        syst.attach_lead(lead)
    return syst.finalized()
