"""Amplitude emulator and likelihood inverse fit (issue 13 points 2-3; docs/inverse-fit.md).

Small ring (GaAs preset, mean radius 50 nm, 26 nm arms, 666 sites, flux tube), three
temperatures, three L_phi targets, two mean free paths, six seeds. The long statistical
validation (coverage over >= 50 held-out trials, T^-1 law, cost) is in
benchmarks/bench_inverse_fit.py -> RESULTS-inverse-fit.md.
"""

from __future__ import annotations

import dataclasses
import json
import math
import warnings

import numpy as np
import pytest

from ringkit._validation import ParameterError
from ringkit.analysis.emulator import AmplitudeEmulator
from ringkit.analysis.ensemble_stats import flux_to_equivalent_field, trace_amplitudes
from ringkit.analysis.inverse_fit import (
    MeasuredAmplitudes,
    UnconstrainedWarning,
    fit_device,
    measured_amplitudes_from_traces,
)
from ringkit.device import Material, RingDevice, RingGeometry
from ringkit.transport.emulator_build import EmulatorUnitTask, _device_for, build_emulator
from ringkit.transport.ensemble import SerialExecutor, run_ensemble
from ringkit.units import PHI0

TEMPS = (1.0, 1.4, 2.0)
LPHI = (0.1e-6, 0.2e-6, 0.4e-6)
MFPS = (0.3e-6, 0.6e-6)
KW = dict(n_probes=20, thermal_tol=0.1, n_flux=16)


def _device(radius=50e-9, width=26e-9):
    geo = RingGeometry.from_mean_radius(radius, width)
    return RingDevice(Material.preset("GaAs"), geo, field_mode="flux_tube")


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    path = tmp_path_factory.mktemp("emu") / "emu.nc"
    emu = build_emulator(
        _device(),
        temperatures=TEMPS,
        l_phi_values=LPHI,
        disorder_values=MFPS,
        n_realizations=6,
        executor=SerialExecutor(),
        cache_path=path,
        **KW,
    )
    return emu, path


def _unit_kwargs(emu, task_etas):
    """Task reproducing the build's energy layout with other couplings (held-out trials)."""
    from ringkit.transport.emulator_build import _reference, emulator_energy_indices
    from ringkit.units import K_B

    dev = _device_for(_device(), MFPS[0])
    ref = _reference(dev, KW["n_probes"])
    kts = K_B * np.asarray(TEMPS) / dev.hopping
    h0, per_t, union, cal = emulator_energy_indices(
        kts, ref["e_c"], KW["thermal_tol"], emu.info["thermal_bound_e2h"]
    )
    return dict(
        etas=tuple(task_etas),
        temperatures=TEMPS,
        h0=h0,
        indices=tuple(int(i) for i in union),
        per_t=tuple((int(p[1] - p[0]), int(p.size // 2)) for p in per_t),
        cal=tuple(int(i) for i in cal),
        n_flux=16,
        n_probes=KW["n_probes"],
        tol=KW["thermal_tol"],
        bound=emu.info["thermal_bound_e2h"],
    )


def test_unit_conductance_equals_kwant_smatrix():
    """Coherent G(flux) of a unit = 2 T from plain kwant.smatrix (independent reference)."""
    import kwant

    from ringkit.tightbinding import build_ring

    dev = _device_for(_device(), 0.3e-6)
    task = EmulatorUnitTask(dev, (0.0,), (1.0,), 1e-3, (0, 7), ((1, 1),), (0,), 8, 20)
    g = task.conductance(5)
    ring = build_ring(dev, seed=5)
    mu = ring.fermi_energy_lattice
    for j, e in enumerate((mu, mu + 7e-3)):
        for k in range(8):
            p = ring.params(flux=k * PHI0 / 8)
            ref = 2.0 * kwant.smatrix(ring.fsyst, e, params=p).transmission(1, 0)
            assert g[0, j, k] == pytest.approx(ref, abs=1e-9)


def test_harmonic_amplitudes_equal_extract_band_rms(built):
    """rms_n = sqrt(2)|c_n| equals extract_oscillations' band rms of the tiled trace."""
    emu, _ = built
    tr = emu.traces[0, :3, 2, 1]  # 3 seeds, one coupling, 1.5 K
    r = emu.info["mean_radius_m"]
    flux = np.arange(5 * 16) * PHI0 / 16
    field = flux_to_equivalent_field(flux, r)
    ext = trace_amplitudes(
        field, np.tile(tr, (1, 5)), r_in=0.95 * r, r_out=1.05 * r, background="none"
    )
    np.testing.assert_allclose(ext, emu.amplitudes[0, :3, 2, 1], rtol=1e-3, atol=1e-6)


def test_netcdf_round_trip_and_cache_refusal(built, tmp_path):
    emu, path = built
    back = AmplitudeEmulator.load(path, device=_device(), grid=emu.grid)
    assert back.content_hash() == emu.content_hash()
    np.testing.assert_array_equal(back.amplitudes, emu.amplitudes)
    np.testing.assert_array_equal(back.l_phi_realised, emu.l_phi_realised)
    ds = back.to_dataset()
    assert ds.attrs["l_phi_convention"].startswith("exp(-L/l_phi)")
    assert ds["mean_free_path"].attrs["units"] == "m"
    # another device / another grid: refused naming the difference
    with pytest.raises(ParameterError, match="cache_path.*another device.*r_in"):
        AmplitudeEmulator.load(path, device=_device(radius=60e-9))
    other = dataclasses.replace(emu.grid, seeds=tuple(range(1, 7)))
    with pytest.raises(ParameterError, match="another grid.*seeds"):
        AmplitudeEmulator.load(path, device=_device(), grid=other)
    with pytest.raises(ParameterError, match="another device"):
        build_emulator(
            _device(radius=60e-9),
            temperatures=TEMPS,
            l_phi_values=LPHI,
            disorder_values=MFPS,
            n_realizations=6,
            cache_path=path,
            **KW,
        )
    # a changed file is refused by its content hash
    ds.attrs["content_sha256"] = "0" * 64
    ds.to_netcdf(tmp_path / "bad.nc", engine="h5netcdf")
    with pytest.raises(ParameterError, match="content hash"):
        AmplitudeEmulator.load(tmp_path / "bad.nc")


def _drop(emu, *, eta=None, temp=None):
    ki = [i for i in range(emu.etas.shape[1]) if i != eta]
    kt = [k for k in range(emu.temperatures.size) if k != temp]
    grid = dataclasses.replace(emu.grid, temperatures=tuple(emu.temperatures[kt]))
    return AmplitudeEmulator(
        device=emu.device_dict,
        grid=grid,
        etas=emu.etas[:, ki],
        amplitudes=emu.amplitudes[:, :, ki][:, :, :, kt],
        thermal_errors=emu.thermal_errors[:, :, ki][:, :, :, kt],
        traces=emu.traces[:, :, ki][:, :, :, kt],
        cal_he=emu.cal_he[:, :, ki],
        info=emu.info,
    )


def test_interpolation_at_held_out_nodes(built):
    """Per-realization interpolation reproduces a computed node it was not given.

    Reference: the lattice values at that node (same seeds). Criterion: the rms error of
    sqrt(h/e rms) is below half its spread over the realizations (the quantity the
    likelihood resolves; dropping a node doubles the grid step, so the built grid does
    better), and mean G within 0.05 e^2/h.
    """
    emu, _ = built
    d = 0
    sub = _drop(emu, eta=2)  # middle probe coupling
    lp = emu.l_phi_realised[d, 2]
    got = sub.node_values(d, [lp] * 3, list(TEMPS))
    ref = emu.amplitudes[d, :, 2]
    err = np.sqrt(got[..., 0]) - np.sqrt(ref[..., 0])
    spread = np.std(np.sqrt(ref[..., 0]), axis=0)
    assert np.sqrt(np.mean(err**2, axis=0)).max() < spread.min() / 2
    assert np.max(np.abs(got[..., 2] - ref[..., 2])) < 0.05
    sub = _drop(emu, temp=1)  # middle temperature
    lps = emu.l_phi_realised[d, 1:]
    got = sub.node_values(d, lps, [TEMPS[1]] * lps.size)
    ref = emu.amplitudes[d, :, 1:, 1]
    err = np.sqrt(got[..., 0]) - np.sqrt(ref[..., 0])
    spread = np.std(np.sqrt(ref[..., 0]), axis=0)
    assert np.sqrt(np.mean(err**2, axis=0)).max() < spread.min() / 2


def _truth(emu):
    t_ref = float(np.exp(np.mean(np.log(TEMPS))))
    lp = 0.6 * emu.largest_finite_l_phi * (np.asarray(TEMPS) / t_ref) ** -1.0
    return t_ref, lp


def test_fit_recovers_parameters_on_draws_from_the_emulator(built):
    """Sanity: amplitudes drawn from the emulator's own Gaussian model at known parameters.

    Three independent draws; the true L_phi(T_ref) must lie in the 95 % profile interval in
    at least two (binomial: a correct 95 % interval fails this with probability 0.7 %).
    """
    emu, _ = built
    t_ref, lp = _truth(emu)
    mean, cov = emu.summary(lp, TEMPS, MFPS[0])
    hits = 0
    for seed in range(3):
        y = np.random.default_rng(seed).multivariate_normal(mean, cov).reshape(len(TEMPS), 3)
        ms = [
            MeasuredAmplitudes(t, max(a, 0) ** 2, max(b, 0) ** 2, g, 1e-4, 1e-4, 1e-3)
            for t, (a, b, g) in zip(TEMPS, y, strict=True)
        ]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UnconstrainedWarning)
            res = fit_device(
                ms, emu, n_profile=5, l_phi_per_temperature=False, profile=("l_phi_ref",)
            )
        lo, hi = res.interval("l_phi_ref", 0.95)
        hits += bool(lo <= lp[1] <= hi)
        assert res.t_ref == pytest.approx(t_ref)
        # 3 quantities x (level, slope in ln T) - 3 parameters (docs/inverse-fit.md)
        assert res.goodness["dof"] == 3 and 0 <= res.goodness["p_value"] <= 1
        json.dumps(res.to_dict())
    assert hits >= 2


def test_fit_on_lattice_traces_with_held_out_seeds(built):
    """The real check: traces of realizations never used to build the emulator.

    Seeds 997-999 (not among the emulator's 0-5). Their couplings realise
    L_phi(T) = L_ref (T/T_ref)^-1 on the ensemble map of the emulator; G(flux) over 6 periods
    plus white noise (invented, 2e-3 e^2/h) is analysed by measured_amplitudes_from_traces and
    fitted. The true L_phi(T_ref) must lie in the 95 % profile interval for at least two of
    the three (a correct 95 % interval fails this with probability 0.7 %, binomial).
    """
    emu, _ = built
    t_ref, lp = _truth(emu)
    u = np.where(np.isfinite(emu.l_phi_realised[0]), 1 / emu.l_phi_realised[0], 0.0)
    etas = np.interp(1 / lp, u, emu.etas[0])
    task = EmulatorUnitTask(_device_for(_device(), MFPS[0]), **_unit_kwargs(emu, etas))
    r = emu.info["mean_radius_m"]
    field = flux_to_equivalent_field(np.arange(96) * PHI0 / 16, r)
    hits = 0
    for seed in (997, 998, 999):
        assert seed not in emu.seeds
        _, _, traces, _ = task.unpack(task(seed))
        j = np.arange(len(TEMPS))
        rng = np.random.default_rng(seed)
        g = np.tile(traces[j, j], (1, 6)) + 2e-3 * rng.standard_normal((len(TEMPS), 96))
        ms = measured_amplitudes_from_traces(
            [(field, row) for row in g],
            list(TEMPS),
            device=_device(),
            background="none",
            band_radii=(0.95 * r, 1.05 * r),
        )
        assert [m.temperature for m in ms] == list(TEMPS)
        assert all(m.he_rms_err > 0 and m.he_noise_rms > 0 for m in ms)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UnconstrainedWarning)
            res = fit_device(
                ms, emu, n_profile=5, l_phi_per_temperature=False, profile=("l_phi_ref",)
            )
        entry = res.parameters["l_phi_ref"]
        lo, hi = entry["ci95"]
        hits += bool(entry["constrained"] and lo <= lp[1] <= hi)
        assert res.parameters["p"]["profiled"] is False
        assert math.isnan(res.parameters["p"]["value"])
        q = res.overlay["model"]["amplitude_he_rms"]
        assert all(a <= b <= c for a, b, c in q)
    assert hits >= 2


def test_executor_independent_and_resumable(tmp_path):
    """Identical unit results on SerialExecutor and dask.distributed; a rerun reuses them."""
    distributed = pytest.importorskip("distributed")
    from ringkit.transport.emulator_build import _reference, emulator_energy_indices
    from ringkit.units import K_B

    dev = _device_for(_device(), 0.3e-6)
    e_c = _reference(dev, 20)["e_c"]
    h0, per_t, union, cal = emulator_energy_indices([K_B * 2.0 / dev.hopping], e_c, 0.1, 2.0)
    per = tuple((int(p[1] - p[0]), int(p.size // 2)) for p in per_t)
    idx = tuple(int(i) for i in union)
    task = EmulatorUnitTask(dev, (0.0, 0.02), (2.0,), h0, idx, per, (0,), 8, 20, 0.1, 2.0)
    ser = run_ensemble(task, [3, 4], executor=SerialExecutor(), progress=False)
    with distributed.Client(processes=False, n_workers=2, dashboard_address=None) as client:
        ex = client.get_executor(pure=False)
        dsk = run_ensemble(task, [3, 4], executor=ex, checkpoint=tmp_path, progress=False)
    np.testing.assert_array_equal(ser.values, dsk.values)
    again = run_ensemble(task, [3, 4], executor=SerialExecutor(), checkpoint=tmp_path)
    assert again.computed_seeds == ()
    np.testing.assert_array_equal(again.values, ser.values)


def _trace(periods, radius=50e-9, n=16):
    flux = np.arange(int(periods * n)) * PHI0 / n
    g = 1.0 + 0.1 * np.cos(2 * np.pi * flux / PHI0)
    g = g + 1e-3 * np.random.default_rng(1).standard_normal(g.size)
    return flux_to_equivalent_field(flux, radius), g


def test_bad_input_one_clear_line():
    dev = _device()
    with pytest.raises(ParameterError, match=r"traces\[0\].*h/e periods"):
        measured_amplitudes_from_traces([_trace(2.5)], [1.0], device=dev, background="none")
    with pytest.raises(ParameterError, match=r"temperatures\[1\].*missing"):
        measured_amplitudes_from_traces(
            [_trace(6), _trace(6)], [1.0, None], device=dev, background="none"
        )
    # the period of a 35 nm ring lies outside the bracket of the 37-63 nm device
    b, g = _trace(6)
    b = b * (50.0 / 25.0) ** 2  # same flux periods, ring of radius 25 nm
    with pytest.raises(ParameterError, match="period.*bracket"):
        measured_amplitudes_from_traces([(b, g)], [1.0], device=dev, background="none")
    with pytest.raises(ParameterError, match="temperature.*missing"):
        MeasuredAmplitudes(None, 0.1, 0.01, 1.0)
    with pytest.raises(ParameterError, match="he_rms_err"):
        MeasuredAmplitudes(1.0, 0.1, 0.01, 1.0, he_rms_err=-1)


def test_fit_refuses_temperature_outside_and_names_unconstrained(built):
    emu, _ = built
    ms = [MeasuredAmplitudes(t, 0.05, 0.01, 1.0, 1.0, 1.0, 5.0) for t in TEMPS]
    with pytest.raises(ParameterError, match="temperature.*covers"):
        fit_device([MeasuredAmplitudes(9.0, 0.05, 0.01, 1.0)], emu)
    with pytest.warns(UnconstrainedWarning) as rec:
        res = fit_device(ms, emu, n_profile=5, l_phi_per_temperature=False)
    assert "mean_free_path" in res.unconstrained
    assert math.isnan(res.parameters["mean_free_path"]["value"])
    assert any("mean_free_path" in str(w.message) for w in rec)
    assert res.to_dict()["parameters"]["mean_free_path"]["value"] is None
