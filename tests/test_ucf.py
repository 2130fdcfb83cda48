"""Universal conductance fluctuations of a diffusive quasi-1D wire (through the ensemble runner).

Check values: Var(g) = 2/15 for g = sum_n T_n with time-reversal symmetry (beta = 1) and 1/15
when it is broken by a field (beta = 2), in the regime l << L << N l (P. A. Lee and A. D. Stone,
Phys. Rev. Lett. 55, 1622 (1985); C. W. J. Beenakker, Rev. Mod. Phys. 69, 731 (1997); values
from memory via docs/physics.md §10.1, consistent with the kwant check of docs/physics.md §10.3).

Wire: 30 sites wide (21 open channels at E = 3t), 70 long, Anderson disorder 2t: <g> ~ 2.5,
i.e. L/l ~ 8 and L/xi ~ 0.12. Samples: 16 realizations x 13 energies spaced by 0.033t, about
20 Thouless energies (E_Th = hbar D/L^2 ~ 1.6e-3 t), so the 208 samples are independent
(ergodic sampling). The field phi = 0.005 h/e per plaquette threads ~10 flux quanta through
the wire (cyclotron radius ~60a >> l). The field is kept in the leads (docs/physics.md §10.3).

Tolerance: the standard error of a sample variance of n Gaussian samples is
sqrt(2/(n - 1)) ~ 9.8 % here; we allow 2.5 standard errors plus 5 % for the finite g and L/l.
"""

from __future__ import annotations

import numpy as np
import pytest
from engine_systems import UcfTask

from ringkit.analysis.ensemble_stats import variance_with_error
from ringkit.transport.ensemble import run_ensemble


@pytest.mark.slow
def test_ucf_variance_orthogonal_and_unitary():
    task = UcfTask(70, 30, 2.0, np.linspace(2.8, 3.2, 13), 0.005)
    res = run_ensemble(task, range(16), max_workers=2, progress=False)
    g = res.values.reshape(-1, 2)  # (realizations * energies, [beta=1, beta=2])
    n = len(g)
    assert n == 208
    # through the ensemble-statistics API (docs/amplitude-statistics.md): the variance with its
    # bootstrap error, which must agree with the Gaussian value sqrt(2/(n-1)) var within 30 %
    var, var_err = variance_with_error(g, seed=0)
    assert np.allclose(var, g.var(axis=0, ddof=1), rtol=1e-12)
    assert var_err / var == pytest.approx(np.sqrt(2.0 / (n - 1)), rel=0.3)
    tol = 2.5 * np.sqrt(2.0 / (n - 1)) + 0.05
    assert var[0] / (2 / 15) == pytest.approx(1.0, abs=tol)  # beta = 1: 2/15
    assert var[1] / (1 / 15) == pytest.approx(1.0, abs=tol)  # beta = 2: 1/15
    # the ratio is 2 in every geometry (docs/physics.md §10.1); its error adds in quadrature
    assert var[0] / var[1] == pytest.approx(2.0, rel=np.sqrt(2) * tol)
    # diffusive, not localized: <g> well above 1 and well below the 21 channels
    assert 1.5 < g[:, 0].mean() < 6.0
