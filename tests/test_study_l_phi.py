"""Studies report the L_phi their dephasing probes realise (issue 15.1; docs/probes.md
"Realised L_phi"): results.nc holds ``l_phi_realised`` and ``l_phi_realised_err`` per
realization and L_phi, summary.json and report.md show requested against realised ± error.

The realised value is measured on each lattice by the h/e damping exp(-pi r/L_phi)
(ringkit.conventions); its agreement with the request on held-out devices is tested in
tests/test_probes.py::test_realised_l_phi_on_held_out_seeds_and_widths. Here: that the study
path carries it, with one calibration per (realization, gate, E_F) reused for every L_phi.
"""

from __future__ import annotations

import json
import math

import numpy as np
import xarray as xr

from ringkit.study import parse_config, run_study
from ringkit.transport.ensemble import SerialExecutor

# A ~300-site GaAs ring in flux-tube mode at T = 0 (one energy per unit): the cheapest study
# with dephasing. Invented test scenario.
TINY_FLUX = """
[study]
name = "realised L_phi"
[material]
preset = "GaAs"
fermi_energy = "5.5 meV"
mean_free_path = "250 nm"
[geometry]
r_in = "70 nm"
r_out = "98 nm"
[lattice]
spacing = "7 nm"
[field]
mode = "flux_tube"
start = "-2 h/e"
stop = "2 h/e"
points = 48
[sweep]
temperature = "0 K"
l_phi = ["inf", "300 nm", "500 nm"]
[dephasing]
probes = 8
[ensemble]
realizations = 2
seed = 5
[executor]
kind = "serial"
[output]
figures = false
"""


def test_study_reports_requested_and_realised_l_phi(tmp_path):
    from ringkit.study import compute
    from ringkit.transport.realised_l_phi import cache_info

    compute.clear_cache()
    run_study(parse_config(TINY_FLUX), tmp_path, executor=SerialExecutor(), progress=False)
    # one calibrator per realization (gate and E_F fixed), reused for both finite L_phi
    assert cache_info()["setups"] == 2 and cache_info()["calibrations"] == 4
    ds = xr.load_dataset(tmp_path / "results.nc", engine="h5netcdf")
    real, err = ds["l_phi_realised"], ds["l_phi_realised_err"]
    assert real.dims == ("realization", "fermi_energy", "gate_potential", "l_phi")
    assert real.attrs["units"] == "m" and err.attrs["units"] == "m"
    assert np.all(np.isinf(real.isel(l_phi=0))) and np.all(err.isel(l_phi=0) == 0)
    for k, want in ((1, 300e-9), (2, 500e-9)):
        r, e = real.isel(l_phi=k).values, err.isel(l_phi=k).values
        assert np.all(np.isfinite(r)) and np.all((e > 0) & (e < want))
        # the secant stops within 3 % or within 3 bootstrap errors (docs/probes.md step 5)
        assert np.all(np.abs(r - want) <= np.maximum(0.031 * want, 3 * e)), (r, e)
    summary = json.loads((tmp_path / "summary.json").read_text())
    rows = [c for c in summary["conditions"] if c["l_phi_m"] is not None]
    assert len(rows) == 2 and all(c["l_phi_realised_m"]["n"] == 2 for c in rows)
    for c in rows:
        got = c["l_phi_realised_m"]
        assert got["min"] <= got["mean"] <= got["max"] and got["err"] > 0
        assert math.isclose(got["mean"], c["l_phi_m"], rel_tol=0.1)
    report = (tmp_path / "report.md").read_text()
    assert "| L_phi | L_phi realised |" in report
    assert " ± " in report and "not measured" not in report
