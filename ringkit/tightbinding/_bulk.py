"""Private: bulk assembly of kwant 1.5.0 finalized systems for ringkit's square-lattice rings.

``kwant.Builder`` + ``attach_lead`` + ``finalized()`` spend most of a ring build in per-site
Python work; :func:`finalize_direct` produces the identical finalized system from arrays
(tests/test_view_live.py compares the two entry by entry). It relies on kwant 1.5.0 internals;
:mod:`ringkit.tightbinding.builder` uses it only for that version and falls back to the
Builder path otherwise.
"""

from __future__ import annotations

import numpy as np

__all__ = ["finalize_direct", "gated_onsite"]


def gated_onsite(base: dict):
    """Value function ``onsite(site, gate)``: the constant on-site value of a gated site + gate."""

    def onsite_gated(site, gate):
        return base[site] + gate

    return onsite_gated


def finalize_direct(lat, tags, onsite, gated, hops, lead_builders, interfaces):
    """The finalized system of a single-family scattering region, assembled in bulk.

    Produces what ``kwant.Builder`` + ``attach_lead`` + ``finalized()`` (kwant 1.5.0,
    ``kwant.builder.FiniteSystem.__init__``) give for the same input: sites sorted by tag, a
    graph whose edges of each tail keep the order in which the hoppings were set (the
    reverse of a hopping ``syst[a, b] = v`` stores :class:`kwant.builder.Other`), the same
    (value, parameter names) pairs, and leads finalized with the given interface sites. The
    gated sites share one value function ``onsite(site, gate)`` (:func:`gated_onsite`), as
    ``builder._onsite_values`` does.

    Returns ``(fsyst, order)`` (``order[k]`` = kwant index of input site k), or
    ``(None, None)`` if an interface site is missing (then kwant's own ``attach_lead``
    would add sites and the Builder path must be used).
    """
    import tinyarray as ta
    from kwant import builder as kb
    from kwant import graph

    n = len(tags)
    perm = np.lexsort((tags[:, 1], tags[:, 0]))  # kwant orders sites by tag
    order = np.empty(n, dtype=np.int64)
    order[perm] = np.arange(n)
    site_cls = kb.Site
    sites = tuple(site_cls(lat, ta.array(tg), True) for tg in tags[perm].tolist())
    id_by_site = dict(zip(sites, range(n), strict=True))

    lead_ifaces = []
    for iface in interfaces:
        idx = [id_by_site.get(site_cls(lat, ta.array(tg), True)) for tg in sorted(iface)]
        if any(i is None for i in idx):
            return None, None
        lead_ifaces.append(idx)

    # on-site values: constants, or one shared function for the gated sites
    values = onsite[perm].tolist()
    onsites = [(v, None) for v in values]
    gated_ids = np.flatnonzero(gated[perm])
    if gated_ids.size:
        base = {sites[k]: values[k] for k in gated_ids.tolist()}
        pair = kb._value_params_pair_cache(1)(gated_onsite(base))
        for k in gated_ids.tolist():
            onsites[k] = pair

    # directed edges: hopping k gives (i -> j, value) then (j -> i, Other); compressing the
    # graph groups edges by tail and keeps the insertion order within a tail
    hop_i, hop_j, hop_vals = hops
    m = hop_i.size
    # distinct value objects (by identity, as kwant's pair cache); code 0 is the reverse marker
    ids = np.fromiter(map(id, hop_vals), dtype=np.uint64, count=m)
    _, first, codes = np.unique(ids, return_index=True, return_inverse=True)
    uniq = [kb.Other] + [hop_vals[k] for k in first.tolist()]
    codes = codes.reshape(-1) + 1
    tails = np.empty(2 * m, dtype=np.int64)
    heads = np.empty(2 * m, dtype=np.int64)
    vcode = np.zeros(2 * m, dtype=np.int64)
    tails[0::2], heads[0::2], vcode[0::2] = order[hop_i], order[hop_j], codes
    tails[1::2], heads[1::2] = order[hop_j], order[hop_i]
    seq = np.argsort(tails, kind="stable")
    g = graph.Graph()
    g.num_nodes = n
    if m:
        g.add_edges(np.stack([tails[seq], heads[seq]], axis=1))
    g = g.compressed()
    cache2 = kb._value_params_pair_cache(2)
    pairs = np.empty(len(uniq), dtype=object)
    for u, w in enumerate(uniq):
        pairs[u] = cache2(w)
    hoppings = pairs[vcode[seq]].tolist()

    # union of the parameter names of all values (kwant: None if one could not be determined)
    named = [onsites[gated_ids[0]]] if gated_ids.size else []
    named += [pairs[u] for u in np.unique(vcode)]
    parameters: list | None = []
    for _, names in named:
        if isinstance(names, Exception):
            parameters = None
            break
        if names:
            parameters.extend(names)
    fsyst = kb.FiniteSystem.__new__(kb.FiniteSystem)
    fsyst.graph = g
    fsyst.sites = sites
    fsyst.site_ranges = kb._site_ranges(sites)
    fsyst.id_by_site = id_by_site
    fsyst.hoppings = hoppings
    fsyst.onsites = onsites
    fsyst.parameters = None if parameters is None else frozenset(parameters)
    fsyst.symmetry = kb.NoSymmetry()
    fsyst.leads = [
        kb.BuilderLead(lead, [sites[i] for i in idx]).finalized()
        for lead, idx in zip(lead_builders, lead_ifaces, strict=True)
    ]
    fsyst.lead_interfaces = [np.array(idx) for idx in lead_ifaces]
    fsyst.lead_paddings = [np.array([]) for _ in lead_ifaces]
    no_symmetries = kb.Builder()  # conservation law and discrete symmetries: none
    fsyst._init_discrete_symmetries(no_symmetries)
    return fsyst, order
