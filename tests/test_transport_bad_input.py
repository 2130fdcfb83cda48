"""Bad input on the transport path gives a ParameterError naming the parameter (issue 16).

Regression tests: ``conductance(B=nan)`` used to end in a MUMPSError, and NaN or -inf for
``l_phi`` was silently treated as fully coherent; 5e-324 m raised an error naming ``eta``.
"""

import math

import numpy as np
import pytest

from ringkit._validation import ParameterError
from ringkit.device import Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.transport import conductance, field_sweep


@pytest.fixture(scope="module")
def ring():
    dev = RingDevice(Material.preset("GaAs"), RingGeometry.from_mean_radius(60e-9, 20e-9))
    return build_ring(dev, seed=1)


@pytest.mark.parametrize("kw", [{"B": math.nan}, {"B": math.inf}, {"flux": math.nan}])
def test_non_finite_field_is_refused(ring, kw):
    with pytest.raises(ParameterError, match=next(iter(kw))):
        conductance(ring, **kw)


@pytest.mark.parametrize("l_phi", [math.nan, -math.inf, 5e-324, -1.0, 0.0])
@pytest.mark.parametrize("method", ["auto", "kwant"])
def test_absurd_l_phi_is_refused_on_every_path(ring, l_phi, method):
    with pytest.raises(ParameterError, match="l_phi"):
        field_sweep(ring, np.linspace(0.0, 0.05, 3), l_phi=l_phi, method=method)


def test_infinite_l_phi_means_coherent(ring):
    fields = np.linspace(0.0, 0.05, 3)
    coherent = field_sweep(ring, fields)
    also = field_sweep(ring, fields, l_phi=math.inf)
    # same computation: identical numbers (no probes attached for L_phi = inf)
    np.testing.assert_array_equal(also.G.values, coherent.G.values)
