"""Smoke test of the kwant engine against closed-form results (no ringkit code involved).

A clean straight square-lattice wire of M sites across (hard walls), hopping t = 1, on-site 4t,
has transverse energies eps_n = 2t(1 - cos(n*pi/(M+1))), n = 1..M, so its conductance in units of
e^2/h per spin equals the number of open modes N(E) = #{n : eps_n < E} (common textbook result,
e.g. Datta, Electronic Transport in Mesoscopic Systems, CUP 1995, ch. 3; check value M = 60,
E = 0.5t -> 14 from the project's docs/physics.md §3, confirmed there with kwant).
"""

from __future__ import annotations

import kwant
import numpy as np
import pytest


def _wire(width: int, length: int = 6) -> kwant.system.FiniteSystem:
    lat = kwant.lattice.square(1.0, norbs=1)
    syst = kwant.Builder()
    syst[(lat(x, y) for x in range(length) for y in range(width))] = 4.0
    syst[lat.neighbors()] = -1.0
    lead = kwant.Builder(kwant.TranslationalSymmetry((-1, 0)))
    lead[(lat(0, y) for y in range(width))] = 4.0
    lead[lat.neighbors()] = -1.0
    syst.attach_lead(lead)
    syst.attach_lead(lead.reversed())
    return syst.finalized()


def _open_modes(width: int, energy: float) -> int:
    n = np.arange(1, width + 1)
    eps = 2.0 * (1.0 - np.cos(n * np.pi / (width + 1)))
    return int(np.sum(eps < energy))


def test_default_solver_is_mumps():
    import kwant.solvers.default as default

    assert default.smatrix.__self__.__class__.__module__ == "kwant.solvers.mumps"


@pytest.mark.parametrize("width", [7, 12])
def test_clean_wire_conductance_equals_open_modes(width):
    fsyst = _wire(width)
    n = np.arange(1, width + 1)
    thresholds = 2.0 * (1.0 - np.cos(n * np.pi / (width + 1)))
    # energies midway between consecutive thresholds (avoid band edges), within the band < 4t
    mids = 0.5 * (thresholds[:-1] + thresholds[1:])
    energies = [e for e in mids if e < 3.9][:6] + [0.5 * thresholds[0]]
    checked = 0
    for energy in energies:
        smat = kwant.smatrix(fsyst, energy)
        expected = _open_modes(width, energy)
        assert smat.num_propagating(0) == expected
        if expected:
            assert abs(smat.transmission(1, 0) - expected) < 1e-9
            checked += 1
        s = smat.data
        assert np.allclose(s.conj().T @ s, np.eye(s.shape[0]), atol=1e-10, rtol=0)
    assert checked >= 5


def test_reference_value_m60():
    """M = 60, E = 0.5t -> 14 open modes (docs/physics.md §3, check value)."""
    assert _open_modes(60, 0.5) == 14
    smat = kwant.smatrix(_wire(60, length=2), 0.5)
    assert abs(smat.transmission(1, 0) - 14) < 1e-9
