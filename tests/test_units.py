"""The unit conventions of ringkit.units against CODATA values (scipy.constants) and hand values."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from ringkit import units
from ringkit._validation import ParameterError, check_choice, check_range


def test_flux_quanta_are_codata():
    # h and e are exact in the 2019 SI (CODATA 2018/2022, via scipy.constants)
    assert units.PHI0 == constants.h / constants.e
    assert abs(units.PHI0 - 4.135667696923859e-15) < 1e-15 * 4.2e-15
    # scipy's 'mag. flux quantum' is h/2e
    assert units.PHI0_AAS == pytest.approx(constants.physical_constants["mag. flux quantum"][0])
    assert units.G0 == pytest.approx(constants.physical_constants["conductance quantum"][0])
    assert 1 / units.E2H == pytest.approx(constants.physical_constants["von Klitzing constant"][0])


def test_period_of_one_square_micron():
    # docs/physics.md §1.2 (computed from the exact h, e of scipy.constants): 1 um^2 <-> 4.135668 mT
    # <-> 241.7989 1/T
    assert units.ab_period(1e-12) == pytest.approx(4.135668e-3, rel=1e-6)
    assert units.ab_frequency(1e-12) == pytest.approx(241.7989, rel=1e-6)
    assert units.ab_period(1e-12, order=2) == pytest.approx(4.135668e-3 / 2, rel=1e-6)
    assert units.area_from_frequency(241.7989) == pytest.approx(1e-12, rel=1e-6)


def test_effective_radius_of_gaas_ring():
    # Pedersen et al., Mater. Sci. Eng. B 74, 234 (2000): period 3.3 mT -> r_eff = 0.6316 um
    # (radius computed from the published period, Pedersen et al. 2000; docs/physics.md §2.3)
    assert units.radius_from_period(3.3e-3) == pytest.approx(0.6316e-6, rel=1e-3)


def test_hopping_energy_gaas():
    # t = hbar^2/(2 m* a^2) for m* = 0.067 m_e, a = 5 nm: 22.746 meV (closed form with
    # scipy.constants; docs/physics.md §3)
    t = units.hopping_energy(0.067, 5e-9)
    assert t / constants.e == pytest.approx(22.746e-3, rel=1e-4)


def test_conductance_conversion_roundtrip():
    g = np.array([0.0, 1.0, 2.5])
    assert np.allclose(units.siemens_to_conductance(units.conductance_to_siemens(g)), g)
    assert units.conductance_to_siemens(2.0) == pytest.approx(units.G0)


def test_magnetic_length():
    # l_B = 25.656 nm / sqrt(B[T]) (docs/physics.md §4.3, from hbar and e of scipy.constants)
    assert units.magnetic_length(1.0) == pytest.approx(25.656e-9, rel=1e-4)
    assert units.magnetic_length(0.0) == float("inf")


def test_errors_name_parameter_and_range():
    with pytest.raises(ParameterError, match="area"):
        units.ab_period(-1.0)
    with pytest.raises(ParameterError, match=r"temperature = -1.*\[0, inf\)"):
        check_range("temperature", -1, 0, None, "K")
    with pytest.raises(ParameterError, match="'GaAs', 'InAs'"):
        check_choice("preset", "Si", ("GaAs", "InAs"))
