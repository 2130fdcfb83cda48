"""``ringkit fit`` (ringkit/cli/fit.py, ringkit/cli/_fit_report.py): parsing, the bad-input
lines of issue 13 (too few periods, missing temperature, period outside the device's radius
bracket), the report writer, and an end-to-end fit with resume on a tiny ring
(docs/outlook-and-fit-usage.md, "ringkit fit").

The traces are INVENTED test data made here: G(B) = 1 + A cos(2 pi B/P + 0.3)
+ 0.3 A cos(4 pi B/P) + Gaussian noise, with the h/e period P = (h/e)/(pi r^2) of the device's
mean radius (h/e from scipy.constants, Aharonov-Bohm period of a ring of area pi r^2).
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from scipy import constants

from ringkit.cli import main

PHI0 = constants.h / constants.e  # CODATA (exact in SI 2019)
RADIUS = 50e-9
PERIOD = PHI0 / (math.pi * RADIUS**2)  # 0.527 T

DEVICE = """[study]
name = "tiny ring (invented)"
[material]
preset = "GaAs"
[geometry]
radius = "50 nm"
width = "26 nm"
"""


def _trace(path, temperature=1.0, periods=6.0, radius=RADIUS, amplitude=0.05, seed=0):
    """Write an invented trace file (comment header with T unless temperature is None)."""
    p = PHI0 / (math.pi * radius**2)
    b = np.linspace(-0.5 * periods * PERIOD, 0.5 * periods * PERIOD, 300)
    rng = np.random.default_rng(seed)
    noise = 0.002 * rng.standard_normal(b.size)
    g = 1.0 + amplitude * (np.cos(2 * np.pi * b / p + 0.3) + 0.3 * np.cos(4 * np.pi * b / p))
    g += noise
    head = "# INVENTED test trace (tests/test_cli_fit.py)\n"
    if temperature is not None:
        head += f"# T = {temperature} K\n"
    rows = "".join(f"{x:.9e},{y:.8f}\n" for x, y in zip(b, g, strict=True))
    path.write_text(head + "B (T),G (e^2/h)\n" + rows)
    return str(path)


@pytest.fixture
def device(tmp_path):
    path = tmp_path / "device.toml"
    path.write_text(DEVICE)
    return str(path)


def _error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert err[0].startswith("ringkit: error: ")
    return err[0]


def _fit(args, device, out):
    return main(["fit", *args, "--device", device, "--out", str(out), "--quiet"])


def test_missing_temperature_names_the_file(tmp_path, device, capsys):
    f = _trace(tmp_path / "run7.csv", temperature=None)
    assert _fit([f], device, tmp_path / "o") == 2
    line = _error_line(capsys)
    assert "run7.csv: missing temperature" in line and "--temperature run7.csv=" in line


def test_too_few_periods(tmp_path, device, capsys):
    f = _trace(tmp_path / "short.csv", periods=2.0)
    assert _fit([f], device, tmp_path / "o") == 2
    line = _error_line(capsys)
    assert "short.csv" in line and "periods" in line and ">= 4" in line


def test_period_outside_the_radius_bracket(tmp_path, device, capsys):
    # a ring of twice the radius: period 4x shorter, outside [P(r_out), P(r_in)]
    f = _trace(tmp_path / "other.csv", periods=24.0, radius=2 * RADIUS)
    assert _fit([f], device, tmp_path / "o") == 2
    line = _error_line(capsys)
    assert "other.csv" in line and "bracket" in line and "period" in line


def test_temperature_options(tmp_path, device, capsys):
    a = _trace(tmp_path / "a.csv", temperature=None)
    b = _trace(tmp_path / "b.csv", temperature=None)
    assert _fit([a, b, "--temperature", "1K"], device, tmp_path / "o") == 2
    assert "1 plain value(s) for 2 file(s)" in _error_line(capsys)
    assert _fit([a, "--temperature", "zz.csv=1K"], device, tmp_path / "o") == 2
    assert "zz.csv is not one of the TRACE files" in _error_line(capsys)
    with pytest.raises(SystemExit):  # argparse: a temperature needs its unit
        _fit([a, "--temperature", "a.csv=1"], device, tmp_path / "o")
    assert "no unit" in capsys.readouterr().err


def test_bad_device_file_is_one_line(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text(DEVICE.replace('radius = "50 nm"', "radius = 50"))
    f = _trace(tmp_path / "a.csv")
    assert _fit([f], str(bad), tmp_path / "o") == 2
    assert "geometry.radius" in _error_line(capsys)


def test_report_writer_from_a_result_dict(tmp_path):
    from ringkit.cli._fit_report import fit_document, write_outputs
    from ringkit.cli.fit import load_device
    from ringkit.device import RingDevice

    (tmp_path / "d.toml").write_text(DEVICE)
    dev = load_device(tmp_path / "d.toml")
    assert isinstance(dev, RingDevice)
    assert dev.geometry.mean_radius == pytest.approx(RADIUS)
    q = [[0.01, 0.02, 0.04]]
    res = {  # the shape of InverseFitResult.to_dict() (docs/inverse-fit.md, API summary)
        "parameters": {
            "l_phi_ref": {"value": 2e-7, "ci68": [1.5e-7, 2.6e-7], "ci95": [1e-7, "inf"],
                          "constrained": True, "open_high": True, "unit": "m"},
            "mean_free_path": {"value": None, "ci68": [None, None], "ci95": [None, None],
                               "constrained": False, "unit": "m"},
        },
        "unconstrained": ["mean_free_path"], "t_ref_K": 1.0,
        "goodness": {"value": 3.0, "dof": 2, "p_value": 0.22},
        "overlay": {"temperature_K": [1.0], "q": [0.16, 0.5, 0.84],
                    "measured": {"amplitude_he_rms": [0.03], "amplitude_h2e_rms": [0.01],
                                 "mean_conductance": [1.0]},
                    "measured_err": {"amplitude_he_rms": [0.001], "amplitude_h2e_rms": [0.001],
                                     "mean_conductance": [0.01]},
                    "model": {"amplitude_he_rms": q, "amplitude_h2e_rms": q,
                              "mean_conductance": [[0.9, 1.0, 1.1]]}, "l_phi_m": [2e-7]},
        "profiles": {"l_phi_ref": {"x": [1e-7, 2e-7, 4e-7], "two_delta_loglike": [4, 0, 1]}},
        "warnings": ["mean_free_path is not constrained"],
    }  # fmt: skip
    traces = [{"file": "a.csv", "label": "a", "temperature_K": 1.0,
               "temperature_source": "header", "n_points": 300}]  # fmt: skip
    doc = fit_document(res, traces, dev)
    files = write_outputs(tmp_path / "out", doc)
    back = json.loads(files["fit.json"].read_text())
    assert back["parameters"]["l_phi_ref"]["ci95"] == [1e-7, "inf"]
    assert back["measured"][0]["amplitude_he_e2h"] == 0.03
    assert back["model_bands"][0]["he_q84"] == 0.04
    assert back["unconstrained"] == ["mean_free_path"]
    assert back["l_phi_convention"]
    report = files["report.md"].read_text()
    assert "Laboratory caution" in report.splitlines()[2]
    assert "| l_phi_ref | 0.2 µm | 0.15 µm – 0.26 µm | 0.1 µm – inf (open) |" in report
    assert "Not constrained by these data: mean_free_path." in report
    for name in ("amplitudes_vs_T.png", "profiles.png"):
        assert (tmp_path / "out" / "figures" / name).read_bytes()[:4] == b"\x89PNG"
    # no parameter without its uncertainty
    del res["parameters"]["l_phi_ref"]["ci95"]
    with pytest.raises(ValueError, match="ci95"):
        fit_document(res, traces, dev)


def test_end_to_end_fit_and_resume(tmp_path, device, monkeypatch, capsys):
    import ringkit.transport.ensemble as ens
    from ringkit.analysis import inverse_fit, load_traces
    from ringkit.analysis.emulator import AmplitudeEmulator
    from ringkit.analysis.inverse_fit import measured_amplitudes_from_traces
    from ringkit.cli.fit import load_device
    from ringkit.transport.emulator_build import EmulatorUnitTask

    # in this process (a pool would only add its start-up time; pools are FIT's tests)
    monkeypatch.setattr(ens, "default_executor", lambda max_workers=None: ens.SerialExecutor())
    # one temperature keeps the test short: the exponent p is then not identifiable
    files = [_trace(tmp_path / "t22.csv", temperature=2.2, amplitude=0.02)]
    grid = ["--l-phi", "0.1um,0.4um", "--mean-free-path", "300nm", "--realizations", "4",
            "--probes", "8", "--flux-points", "8", "--thermal-tol", "0.1",
            "--profile-points", "5"]  # fmt: skip
    out = tmp_path / "fit"
    assert _fit([*files, *grid], device, out) == 0, capsys.readouterr().err
    doc = json.loads((out / "fit.json").read_text())
    # measured amplitudes are those of the public helper on the same files
    tr = [load_traces(f).traces[0] for f in files]
    with warnings.catch_warnings():  # band overlap of the tiny ring's wide arms (noted)
        warnings.simplefilter("ignore")
        ref = measured_amplitudes_from_traces([(t.field, t.conductance) for t in tr],
                                              [2.2], device=load_device(device))  # fmt: skip
    assert [m["amplitude_he_e2h"] for m in doc["measured"]] == [m.he_rms for m in ref]
    lp = doc["parameters"]["l_phi_ref"]
    assert lp["constrained"] and lp["ci95"][0] <= lp["ci68"][0] <= lp["value"] <= lp["ci68"][1]
    # one temperature and one mean free path in the emulator: p and the mean free path cannot
    # be constrained, and the outputs say so instead of reporting a value
    assert set(doc["unconstrained"]) == {"p", "mean_free_path"}
    assert doc["parameters"]["p"]["value"] is None
    assert "Not constrained by these data: " in (out / "report.md").read_text()
    # resume after an interrupted build: the finished units are reused, nothing is computed
    # again, and the emulator is the same bit for bit (the fit itself is stopped here)
    first = AmplitudeEmulator.load(out / "emulator.nc").content_hash()
    (out / "emulator.nc").unlink()

    class Stop(Exception):
        pass

    def refuse(self, seed):
        raise AssertionError("recomputed a finished unit")

    def stop(measured, emulator, **kw):
        raise Stop(emulator.content_hash())

    monkeypatch.setattr(EmulatorUnitTask, "__call__", refuse)
    monkeypatch.setattr(inverse_fit, "fit_device", stop)
    capsys.readouterr()
    with pytest.raises(Stop) as info:
        main(["fit", *files, *grid, "--device", device, "--out", str(out)])
    assert info.value.args[0] == first
    assert "resuming the emulator" in capsys.readouterr().err
