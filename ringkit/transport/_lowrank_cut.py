"""Find the Hamiltonian entries of a finalized kwant system that depend on a flux parameter.

Private helper of :mod:`ringkit.transport.lowrank`. The system is evaluated with kwant's own
``hamiltonian_submatrix`` at flux 0 and, at a small step ``delta`` and a generic value of a few
periods, either again as a whole or - for systems finalized from a kwant Builder, whose
metadata tell which value functions take the flux parameter - only on those sites and hoppings.
The entries that change must be off-diagonal, keep their modulus and carry a phase linear in the
parameter, ``H_e(flux) = H_e(0) * exp(1j * rate_e * flux)``.
Anything else is refused with a :class:`ringkit.ParameterError` that names the offending entry.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from ringkit._validation import ParameterError

__all__ = ["FluxCut", "detect_flux_cut", "hamiltonian_coo"]

# Probe values in units of the flux period: a small step (rates are read from it without
# aliasing as long as |rate * delta| < pi, i.e. fewer than 500 windings per period) and a generic
# value of a few periods, used to refine the rates and to verify linearity.
_DELTA = 1.0e-3
_VERIFY = -2.618034
_PHASE_TOL = 1.0e-9  # rad, allowed deviation from a linear phase at the verification point
_ABS_TOL = 1.0e-12  # relative to the largest |H| entry


@dataclass(frozen=True)
class FluxCut:
    """The flux-dependent Hamiltonian entries (the bonds crossing the branch cut).

    Attributes
    ----------
    rows, cols : ndarray of int
        Orbital indices (row = destination, col = origin of the hop) of each dependent entry.
    values : ndarray of complex
        The entries at zero flux (energy units of the system).
    rates : ndarray of float
        Phase per unit of the flux parameter, rad/Wb for a flux in Wb:
        ``H[rows, cols](flux) = values * exp(1j * rates * flux)``.
    flux_param : str
        Name of the kwant parameter.
    sites : ndarray of int
        Site indices touched by the dependent entries (sorted, unique).
    """

    rows: np.ndarray
    cols: np.ndarray
    values: np.ndarray
    rates: np.ndarray
    flux_param: str
    sites: np.ndarray = field(repr=False)

    @property
    def n_entries(self) -> int:
        """Number of flux-dependent matrix entries (twice the number of cut bonds)."""
        return int(self.rows.size)

    def entries(self, flux: np.ndarray | float) -> np.ndarray:
        """Entries at ``flux`` (shape ``flux.shape + (n_entries,)``)."""
        f = np.asarray(flux, dtype=float)[..., None]
        return self.values * np.exp(1j * self.rates * f)


def hamiltonian_coo(fsyst, params: dict) -> tuple[sp.coo_matrix, np.ndarray]:
    """kwant's sparse Hamiltonian and the orbital offset of each site (length n_sites + 1)."""
    mat, to_norb, _ = fsyst.hamiltonian_submatrix(sparse=True, params=params, return_norb=True)
    offsets = np.concatenate([[0], np.cumsum(np.asarray(to_norb, dtype=np.int64))])
    return sp.coo_matrix(mat, dtype=complex), offsets


def _site_name(fsyst, offsets: np.ndarray, orbital: int) -> str:
    i = int(np.searchsorted(offsets, orbital, side="right") - 1)
    try:
        return f"site {i} (tag {tuple(int(x) for x in fsyst.sites[i].tag)})"
    except (AttributeError, IndexError, TypeError):  # a FiniteSystem without lattice sites
        return f"site {i}"


def _entry_name(fsyst, offsets: np.ndarray, row: int, col: int) -> str:
    if row == col:
        return f"the on-site entry of {_site_name(fsyst, offsets, row)}"
    return f"the hopping {_site_name(fsyst, offsets, col)} -> {_site_name(fsyst, offsets, row)}"


def _depends(names, flux_param: str) -> bool:
    """kwant's (value, parameter names) metadata: may this value depend on ``flux_param``?"""
    if names is None:  # a constant
        return False
    if isinstance(names, Exception):  # parameter names could not be determined
        return True
    return flux_param in names


def _targeted_values(fsyst, flux_param, params, values, h0, offsets):
    """Entries of H at ``values`` re-evaluating only the value functions that take the flux.

    Uses the ``onsites``/``hoppings`` metadata of systems finalized from a kwant Builder
    (``(value, parameter names)`` per site and per graph edge). Returns ``None`` when the
    metadata is missing or when more than a quarter of the entries would need re-evaluation
    (then re-evaluating the whole Hamiltonian is as cheap).
    """
    onsites = getattr(fsyst, "onsites", None)
    hoppings = getattr(fsyst, "hoppings", None)
    graph = getattr(fsyst, "graph", None)
    if onsites is None or hoppings is None or graph is None:
        return None
    try:
        cand_sites = [i for i, (_, nm) in enumerate(onsites) if _depends(nm, flux_param)]
        cand_edges = [
            (int(graph.tail(e)), int(graph.head(e)))
            for e, (_, nm) in enumerate(hoppings)
            if _depends(nm, flux_param)
        ]
    except (TypeError, ValueError, AttributeError):
        return None
    # a hopping stored once serves both directions (kwant's ``Other`` marker): add reverses
    cand_edges = sorted(set(cand_edges) | {(j, i) for i, j in cand_edges})
    if len(cand_sites) + len(cand_edges) > max(16, graph.num_edges // 4):
        return None
    n = h0.shape[0]
    keys = h0.row.astype(np.int64) * n + h0.col
    order = np.argsort(keys, kind="stable")
    sorted_keys = keys[order]
    out = [h0.data.copy() for _ in values]
    pairs = [(i, i) for i in cand_sites] + cand_edges
    for i, j in pairs:
        ri = np.arange(offsets[i], offsets[i + 1])
        cj = np.arange(offsets[j], offsets[j + 1])
        want = (ri[:, None] * n + cj[None, :]).ravel()
        loc = np.searchsorted(sorted_keys, want)
        if np.any(loc >= keys.size) or np.any(sorted_keys[np.minimum(loc, keys.size - 1)] != want):
            return None  # an entry outside kwant's pattern: use the full evaluation
        idx = order[loc]
        for k, v in enumerate(values):
            block = fsyst.hamiltonian(i, j, params={**params, flux_param: v})
            block = np.asarray(block, dtype=complex).reshape(ri.size, cj.size)
            out[k][idx] = block.ravel()
    return out


def detect_flux_cut(
    fsyst,
    flux_param: str,
    params: dict,
    *,
    flux_period: float,
    max_entries: int,
) -> tuple[sp.coo_matrix, np.ndarray, FluxCut, np.ndarray]:
    """Evaluate the Hamiltonian and isolate its flux-dependent entries.

    Returns
    -------
    h0 : scipy.sparse.coo_matrix
        Hamiltonian at zero flux (kwant's pattern, also containing the dependent entries).
    offsets : ndarray
        Orbital offset of every site, length ``n_sites + 1``.
    cut : FluxCut
        The dependent entries.
    positions : ndarray of int
        Position of each dependent entry in ``h0.data``.
    """
    values = (0.0, _DELTA * flux_period, _VERIFY * flux_period)
    h0, offsets = hamiltonian_coo(fsyst, {**params, flux_param: values[0]})
    others = _targeted_values(fsyst, flux_param, params, values[1:], h0, offsets)
    if others is None:  # no usable metadata: evaluate the whole Hamiltonian again
        others = []
        for v in values[1:]:
            m, _ = hamiltonian_coo(fsyst, {**params, flux_param: v})
            if not (np.array_equal(m.row, h0.row) and np.array_equal(m.col, h0.col)):
                raise RuntimeError("kwant returned different sparsity patterns for two fluxes")
            others.append(m.data)
    hd_data, hv_data = others
    scale = float(np.max(np.abs(h0.data))) if h0.nnz else 1.0
    tol = _ABS_TOL * max(scale, np.finfo(float).tiny)
    dep = (np.abs(hd_data - h0.data) > tol) | (np.abs(hv_data - h0.data) > tol)
    pos = np.flatnonzero(dep)
    if pos.size == 0:
        raise ParameterError(
            "flux_param",
            flux_param,
            "no Hamiltonian entry of the system depends on this parameter; name the kwant "
            "parameter that carries the flux-tube (branch-cut) phases",
        )
    if pos.size > max_entries:
        raise ParameterError(
            "flux_param",
            flux_param,
            f"it enters {pos.size} Hamiltonian entries, more than max_entries = {max_entries}; "
            "the low-rank path needs a flux tube (phases on the few bonds of a branch cut), "
            "not a field on every bond",
        )
    rows, cols = h0.row[pos].astype(np.int64), h0.col[pos].astype(np.int64)
    a0, ad, av = h0.data[pos], hd_data[pos], hv_data[pos]

    def refuse(k: int, why: str) -> None:
        name = _entry_name(fsyst, offsets, int(rows[k]), int(cols[k]))
        raise ParameterError(
            "fsyst",
            f"<{type(fsyst).__name__}>",
            f"{name} depends on {flux_param!r} but not as a pure Peierls phase linear in it "
            f"({why}); the low-rank path needs H(flux) = H(0) * exp(i * rate * flux) on a few "
            "bonds (flux-tube mode)",
        )

    diag = np.flatnonzero(rows == cols)
    if diag.size:
        refuse(int(diag[0]), "an on-site term cannot carry a Peierls phase")
    small = np.flatnonzero(np.abs(a0) <= tol)
    if small.size:
        refuse(int(small[0]), "zero at zero flux")
    for arr in (ad, av):
        bad = np.flatnonzero(np.abs(np.abs(arr) - np.abs(a0)) > tol)
        if bad.size:
            refuse(int(bad[0]), "its modulus changes")
    delta, fv = values[1], values[2]
    coarse = np.angle(ad / a0) / delta
    resid = np.angle(av / (a0 * np.exp(1j * coarse * fv)))
    bad = np.flatnonzero(np.abs(resid) > _PHASE_TOL)
    if bad.size:
        refuse(int(bad[0]), f"phase off a linear law by {resid[bad[0]]:.3g} rad")
    rates = coarse + resid / fv  # refined with the longer lever arm
    site_of = np.searchsorted(offsets, np.concatenate([rows, cols]), side="right") - 1
    cut = FluxCut(
        rows=rows,
        cols=cols,
        values=a0.copy(),
        rates=rates,
        flux_param=flux_param,
        sites=np.unique(site_of),
    )
    return h0, offsets, cut, pos


def check_leads_flux_free(fsyst, flux_param: str, params: dict, flux_period: float) -> None:
    """Refuse leads whose Hamiltonian depends on the flux or that are precalculated."""
    import kwant

    for k, lead in enumerate(fsyst.leads):
        if isinstance(lead, kwant.system.PrecalculatedLead):
            raise ParameterError(
                f"fsyst.leads[{k}]",
                "PrecalculatedLead",
                "precalculated leads are tied to one energy; pass the system before precalculate()",
            )
        lead_params = getattr(lead, "parameters", None)
        if lead_params is not None and flux_param not in lead_params:
            continue
        if not hasattr(lead, "cell_hamiltonian"):
            continue  # self-energy-only lead: its self-energy is taken as flux independent
        a = {**params, flux_param: 0.0}
        b = {**params, flux_param: _VERIFY * flux_period}
        same = np.allclose(
            lead.cell_hamiltonian(params=a), lead.cell_hamiltonian(params=b), rtol=0, atol=0
        ) and np.allclose(
            lead.inter_cell_hopping(params=a), lead.inter_cell_hopping(params=b), rtol=0, atol=0
        )
        if not same:
            raise ParameterError(
                f"fsyst.leads[{k}]",
                "flux dependent",
                f"the leads must not depend on {flux_param!r} (in flux-tube mode the flux "
                "only threads the hole)",
            )
