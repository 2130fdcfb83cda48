"""End-to-end tests of ``ringkit study``, ``ringkit demo`` and ``ringkit example-config``.

Tiny rings (~300 sites, a few dozen field points) keep the file short; the physics is checked
against references outside the study code: plain ``kwant.smatrix`` on the same lattice with
the Fermi function written here, Onsager-Buttiker reciprocity and the Aharonov-Bohm period
h/(e A) from scipy.constants. Interruption is tested by really interrupting (SIGINT) and
killing (SIGKILL) a ``ringkit study`` process and comparing the resumed result with an
uninterrupted run bit for bit.
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from scipy import constants as sc

from ringkit.cli import main
from ringkit.study import default_study_text, load_config, parse_config

RINGKIT = [sys.executable, "-m", "ringkit"]

# A ring of ~300 sites: r_out/r_in = 1.4 keeps the h/e and h/2e bands apart (docs/physics.md §1.3);
# 7 nm lattice (a coarse-lattice note is expected and harmless here).
TINY = """
[study]
name = "tiny ring"
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
start = "-1.2 T"
stop = "1.2 T"
points = 96
[sweep]
temperature = ["0 K", "1 K"]
l_phi = ["inf", "300 nm"]
[thermal]
tol = 0.1
[dephasing]
probes = 8
[ensemble]
realizations = 3
seed = 5
[executor]
kind = "process"
workers = 2
"""


def run_cli(*args: str) -> tuple[int, str, str]:
    """Run ringkit in this process; returns (exit status, stdout, stderr)."""
    import contextlib
    import io

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(list(args))
    return rc, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def tiny_file(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("study") / "tiny.toml"
    path.write_text(TINY)
    return path


@pytest.fixture(scope="module")
def reference(tiny_file) -> Path:
    """Uninterrupted run of the tiny study, in this process (serial executor)."""
    out = tiny_file.parent / "reference"
    rc, stdout, _ = run_cli(
        "study", str(tiny_file), "--out", str(out), "--quiet", "--set", 'executor.kind="serial"'
    )
    assert rc == 0
    assert "results:" in stdout
    return out


# ----------------------------------------------------------------------------- outputs
def test_study_outputs_and_physics(reference, tiny_file):
    ds = xr.load_dataset(reference / "results.nc", engine="h5netcdf")
    cfg = load_config(tiny_file)
    # SI coordinates and every parameter in the attributes
    assert ds["B"].attrs["units"] == "T" and ds["temperature"].attrs["units"] == "K"
    assert ds["l_phi"].attrs["units"] == "m"
    np.testing.assert_array_equal(ds["B"].values, np.linspace(-1.2, 1.2, 96))
    assert list(ds["seed"].values) == [5, 6, 7]
    assert np.isinf(ds["l_phi"].values[0])
    for row in cfg.describe():
        key = row[0]
        assert any(a == key or a.startswith(key + " [") for a in ds.attrs) or row[1] == "(not set)"
    assert ds.attrs["geometry.r_in [m]"] == pytest.approx(70e-9, rel=1e-12, abs=0)
    assert ds.attrs["study_fingerprint"] == cfg.fingerprint
    assert parse_config(ds.attrs["study_toml"]).fingerprint == cfg.fingerprint
    g = ds["G"].values
    assert g.shape == (3, 1, 1, 2, 2, 96) and np.all(np.isfinite(g))
    np.testing.assert_allclose(ds["G_mean"].values, g.mean(axis=0), rtol=0, atol=1e-15)
    n_e = ds["n_thermal_energies"].values[0, 0, 0, :, 0]
    assert n_e[0] == 1 and n_e[1] >= 15  # T = 0: E_F only; 1 K: at least one Kronrod rule

    # Onsager-Buttiker reciprocity of a two-terminal conductance, G(B) = G(-B), also with
    # floating probes and thermal averaging (Buttiker, Phys. Rev. Lett. 57, 1761 (1986))
    np.testing.assert_allclose(g, g[..., ::-1], rtol=0, atol=1e-9)

    # h/e period of every condition inside the Aharonov-Bohm bracket h/(e pi r^2), r_in..r_out
    phi0 = sc.h / sc.e  # CODATA via scipy.constants
    lo, hi = phi0 / (math.pi * 98e-9**2), phi0 / (math.pi * 70e-9**2)
    summary = json.loads((reference / "summary.json").read_text())
    assert len(summary["conditions"]) == 4
    for c in summary["conditions"]:
        period = c["ensemble_mean"]["period_he_T"]
        assert lo < period < hi, (period, lo, hi)
        assert 70e-9 < c["ensemble_mean"]["radius_m"] < 98e-9
        assert c["ensemble_mean"]["area_m2"] == pytest.approx(phi0 / period, rel=1e-12, abs=0)
        for key in ("amplitude_he_rms_e2h", "amplitude_h2e_rms_e2h"):
            assert c["ensemble_mean"][key] >= 0
            assert c["single_realizations"][key]["n"] == 3

    # dephasing probes (L_phi = 300 nm, about the arm length pi r_m = 264 nm) lower the mean
    # h/e amplitude of the single realizations at both temperatures
    he = ds["amplitude_he_rms_single"].mean("realization").values[0, 0]  # (T, L_phi)
    assert np.all(he[:, 1] < he[:, 0]), he
    # the report embeds the figures and lists every parameter
    report = (reference / "report.md").read_text()
    for name in ("conductance", "spectra", "amplitude"):
        png = reference / "figures" / f"{name}.png"
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert f"](figures/{name}.png)" in report
    for row in cfg.describe():
        assert f"| {row[0]} |" in report


def test_study_matches_plain_kwant(reference, tiny_file):
    """G at T = 0 and the 1 K thermal average, against kwant.smatrix and the Fermi function.

    Independent reference: kwant's own solver on the same lattice (realization 1, coherent)
    and -df/dE = 1/(4 kT cosh^2((E - mu)/2kT)) written here (standard result).
    """
    import kwant

    from ringkit.study.setup import make_device
    from ringkit.tightbinding import build_ring

    ds = xr.load_dataset(reference / "results.nc", engine="h5netcdf")
    cfg = load_config(tiny_file)
    from ringkit.device import DiscretisationWarning

    with pytest.warns(DiscretisationWarning, match="coarse lattice"):  # 7 nm spacing, see TINY
        device = make_device(cfg.physics(), None, 0.0)
    ring = build_ring(device, seed=6)  # realization 1 of seed 5
    fields = ds["B"].values[[3, 40, 71]]

    def g_kwant(e_joule: float, b: float) -> float:
        sm = kwant.smatrix(ring.fsyst, ring.to_lattice_energy(e_joule), params=ring.params(B=b))
        return 2.0 * sm.transmission(1, 0)  # spin degeneracy

    mu = ring.fermi_energy
    got0 = ds["G"].sel(temperature=0.0).isel(realization=1, l_phi=0).values.ravel()
    for b in fields:
        i = int(np.argmin(np.abs(ds["B"].values - b)))
        assert got0[i] == pytest.approx(g_kwant(mu, b), abs=1e-8)
    # 1 K: adaptive quadrature (scipy.integrate.quad) of the exact kwant G(E) against
    # -df/dE = 1/(4 kT cosh^2((E - mu)/2kT)) (standard result), on |E - mu| <= 12 kT (kernel
    # mass outside: 2/(1 + e^12) = 1.2e-5, G <= 2 e^2/h here). TINY's error goal is loose
    # (tol = 0.1 e^2/h, the policy's cheapest); the check is that the error *estimate* stored
    # with the result holds
    from scipy.integrate import quad

    kt = sc.k * 1.0
    got1 = ds["G"].sel(temperature=1.0).isel(realization=1, l_phi=0).values.ravel()
    err1 = ds["thermal_error"].sel(temperature=1.0).isel(realization=1, l_phi=0)
    est = float(err1.values.max())
    assert 0 < est <= 0.1
    b = fields[1]
    i = int(np.argmin(np.abs(ds["B"].values - b)))

    def integrand(x: float) -> float:  # x = (E - mu)/kT
        return g_kwant(mu + x * kt, b) / (4 * np.cosh(x / 2) ** 2)

    expected, qerr = quad(integrand, -12, 12, epsabs=1e-3, limit=100)
    qerr += 2.0 * 1.2e-5 * 2  # window tails
    assert qerr < 1e-2
    assert got1[i] == pytest.approx(expected, abs=est + qerr)


def test_energy_and_gate_axes_match_plain_kwant(tmp_path):
    """Each (E_F, gate) combination is the kwant result for that energy and gate potential."""
    import kwant

    from ringkit.device import DiscretisationWarning
    from ringkit.study.setup import make_device
    from ringkit.tightbinding import build_ring

    path = tmp_path / "axes.toml"
    path.write_text(TINY)
    overrides = [
        "--set", 'sweep.fermi_energy=["5.2 meV", "5.8 meV"]',
        "--set", 'sweep.gate_potential=["0 meV", "0.4 meV"]',
        "--set", 'sweep.temperature="0 K"', "--set", 'sweep.l_phi="inf"',
        "--set", "ensemble.realizations=1", "--set", "field.points=48",
        "--set", 'executor.kind="serial"',
    ]  # fmt: skip
    rc, _, err = run_cli("study", str(path), "--out", str(tmp_path / "o"), "--quiet", *overrides)
    assert rc == 0, err
    ds = xr.load_dataset(tmp_path / "o" / "results.nc", engine="h5netcdf")
    np.testing.assert_allclose(ds["fermi_energy"].values, [5.2e-3 * sc.eV, 5.8e-3 * sc.eV])
    np.testing.assert_allclose(ds["gate_potential"].values, [0.0, 0.4e-3 * sc.eV], atol=0)
    cfg = load_config(path).with_overrides({"ensemble.realizations": 1})
    b = float(ds["B"].values[29])
    for i, e in enumerate(ds["fermi_energy"].values):
        with pytest.warns(DiscretisationWarning):  # the 7 nm lattice of TINY
            device = make_device(cfg.physics(), float(e), 1.0)  # any potential: gated arm
        ring = build_ring(device, seed=5)
        for j, v in enumerate(ds["gate_potential"].values):
            sm = kwant.smatrix(ring.fsyst, ring.to_lattice_energy(float(e)),
                               params=ring.params(B=b, gate=float(v)))  # fmt: skip
            got = float(ds["G"].values[0, i, j, 0, 0, 29])
            assert got == pytest.approx(2.0 * sm.transmission(1, 0), abs=1e-8)
    # the gate changes the conductance (electric Aharonov-Bohm phase on one arm)
    assert not np.allclose(ds["G"].values[0, :, 0], ds["G"].values[0, :, 1], atol=1e-3)


# ----------------------------------------------------------------------------- interruption
def _wait_for_units(units_dir: Path, more_than: int, proc: subprocess.Popen, timeout=120) -> int:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        n = len(list(units_dir.glob("*.npz"))) if units_dir.exists() else 0
        if n > more_than:
            return n
        assert proc.poll() is None, proc.communicate()
        time.sleep(0.02)
    raise AssertionError("no progress")


def _children(pid: int) -> set[int]:
    """Descendant process ids of ``pid`` (from /proc)."""
    kids: dict[int, list[int]] = {}
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        kids.setdefault(int(fields[1]), []).append(int(stat.parent.name))
    out, todo = set(), [pid]
    while todo:
        for k in kids.get(todo.pop(), []):
            out.add(k)
            todo.append(k)
    return out


def _cmdline(pid: int) -> bytes:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return b""


@pytest.mark.skipif(not Path("/proc").exists(), reason="needs /proc to find worker processes")
def test_interrupt_kill_and_resume_bit_for_bit(reference, tiny_file, tmp_path):
    out = tmp_path / "run"
    units = out / "checkpoint" / "units"
    cmd = [*RINGKIT, "study", str(tiny_file), "--out", str(out)]  # process pool, 2 workers
    env = dict(os.environ, PYTHONWARNINGS="ignore")

    # 1) Ctrl-C: exit 130, a one-line message, finished units kept, no traceback
    p1 = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    n1 = _wait_for_units(units, 0, p1)
    p1.send_signal(signal.SIGINT)
    _, err1 = p1.communicate(timeout=60)
    assert p1.returncode == 130, err1
    assert "interrupted" in err1 and "Traceback" not in err1
    done1 = len(list(units.glob("*.npz")))
    assert 1 <= n1 <= done1 < 6
    assert not (out / "results.nc").exists()

    # 2) resume; a worker process crashes (SIGKILL to one worker): the failed units are
    #    reported with their parameters, the finished ones are kept
    p2 = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    _wait_for_units(units, done1, p2)
    worker = min(pid for pid in _children(p2.pid) if b"spawn_main" in _cmdline(pid))
    os.kill(worker, signal.SIGKILL)
    _, err2 = p2.communicate(timeout=60)
    assert p2.returncode == 2, err2
    assert "work units failed; the first: work unit r000" in err2
    assert "disorder seed" in err2 and "L_phi = " in err2 and "Traceback" not in err2
    done2 = len(list(units.glob("*.npz")))
    assert done1 < done2 < 6

    # 3) the same command resumes; this time the run itself is killed outright (SIGKILL)
    p3 = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    _wait_for_units(units, done2, p3)
    workers = _children(p3.pid)
    p3.kill()
    p3.communicate(timeout=60)
    done3 = len(list(units.glob("*.npz")))
    assert done2 < done3 <= 6
    assert not [p for p in units.iterdir() if p.suffix != ".npz"]  # no half-written unit
    t0 = time.monotonic()  # the workers die with their parent
    while workers & {int(p.name) for p in Path("/proc").glob("[0-9]*")}:
        assert time.monotonic() - t0 < 15, "worker processes outlived the killed run"
        time.sleep(0.1)

    # 4) the same command again finishes from the checkpoint
    p4 = subprocess.run(cmd, capture_output=True, text=True, env=env, timeout=300)
    assert p4.returncode == 0, p4.stderr
    assert f"{done3} from the checkpoint, {6 - done3} to compute" in p4.stderr
    a = xr.load_dataset(reference / "results.nc", engine="h5netcdf")
    b = xr.load_dataset(out / "results.nc", engine="h5netcdf")
    np.testing.assert_array_equal(a["G"].values, b["G"].values)  # bit for bit
    for name in ("amplitude_he_rms", "period_he", "amplitude_h2e_rms_single"):
        np.testing.assert_array_equal(a[name].values, b[name].values)

    # 5) a finished study re-run computes nothing; another study is refused in that directory
    rc, _, err = run_cli("study", str(tiny_file), "--out", str(out), "--quiet")
    assert rc == 0
    rc, _, err = run_cli(
        "study", str(tiny_file), "--out", str(out), "--set", "ensemble.seed=9", "--quiet"
    )
    assert rc == 2 and "different study" in err and "--restart" in err


def test_dask_executor_gives_identical_numbers(reference, tiny_file, tmp_path):
    distributed = pytest.importorskip("distributed")
    out = tmp_path / "dask"
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=False, dashboard_address=":0"
    ) as cluster:
        rc, _, err = run_cli(
            "study", str(tiny_file), "--out", str(out), "--quiet",
            "--set", 'executor.kind="dask"',
            "--set", f'executor.address="{cluster.scheduler_address}"',
            "--set", "ensemble.realizations=1",
        )  # fmt: skip
    assert rc == 0, err
    a = xr.load_dataset(reference / "results.nc", engine="h5netcdf")
    b = xr.load_dataset(out / "results.nc", engine="h5netcdf")
    # realization 0 has the same disorder seed in both studies: identical numbers
    np.testing.assert_array_equal(a["G"].values[:1], b["G"].values)


def test_flux_tube_study_has_period_h_over_e(tmp_path):
    """Flux through the hole only: G(flux) is exactly periodic in h/e (Aharonov-Bohm 1959)."""
    text = TINY.replace('start = "-1.2 T"', 'mode = "flux_tube"\nstart = "-6 h/e"')
    text = text.replace('stop = "1.2 T"', 'stop = "6 h/e"')
    path = tmp_path / "flux.toml"
    path.write_text(text)
    rc, _, err = run_cli(
        "study", str(path), "--out", str(tmp_path / "o"), "--quiet",
        "--set", 'executor.kind="serial"', "--set", "ensemble.realizations=1",
        "--set", 'sweep.temperature="0 K"', "--set", "field.points=97",
    )  # fmt: skip
    assert rc == 0, err
    ds = xr.load_dataset(tmp_path / "o" / "results.nc", engine="h5netcdf")
    assert ds["flux"].attrs["units"] == "Wb"
    phi0 = sc.h / sc.e  # scipy.constants
    flux = ds["flux"].values
    g = ds["G"].values[0, 0, 0, 0]  # (l_phi, flux)
    # exact periodicity: G(flux + h/e) = G(flux) on the grid points one period apart
    step = flux[1] - flux[0]
    shift = int(round(phi0 / step))
    assert shift * step == pytest.approx(phi0, rel=1e-12, abs=0)
    np.testing.assert_allclose(g[:, shift:], g[:, :-shift], rtol=0, atol=1e-9)
    # the extracted period (band centroid of the spectrum) agrees to the resolution
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    for c in summary["conditions"]:
        assert c["ensemble_mean"]["period_he_Wb"] == pytest.approx(phi0, rel=1e-3, abs=0)
        assert c["ensemble_mean"]["area_m2"] is None  # no geometric area for a flux tube


# ----------------------------------------------------------------------------- demo, example
def test_demo_reduced(tmp_path):
    out = tmp_path / "demo"
    rc, stdout, _ = run_cli(
        "demo", "--out", str(out), "--quiet", "--confirm-above", "0",  # the demo never asks
        "--set", "ensemble.realizations=1", "--set", "field.points=64",
        "--set", 'sweep.temperature="0 K"', "--set", 'sweep.l_phi="inf"',
        "--set", 'executor.kind="serial"', "--set", 'output.report="html"',
    )  # fmt: skip
    assert rc == 0
    summary = json.loads((out / "summary.json").read_text())
    (cond,) = summary["conditions"]
    # uniform-field demo: the h/e period is h/(e A) with the enclosed area A between
    # pi r_in^2 and pi r_out^2 (Aharonov-Bohm 1959; h/e from scipy.constants)
    phi0 = sc.h / sc.e
    geo = parse_config(default_study_text())["geometry"]
    period = cond["ensemble_mean"]["period_he_T"]
    assert phi0 / (math.pi * geo["r_out"] ** 2) < period < phi0 / (math.pi * geo["r_in"] ** 2)
    html = (out / "report.html").read_text()
    assert '<img src="figures/conductance.png"' in html and "material.mean_free_path" in html
    assert "transverse modes per arm (lattice strip" in html
    assert summary["device"]["transverse_modes_per_arm"] == 2
    # a realistic demo (multi-mode ring of mean radius >= 0.4 um in a uniform field, >= 2
    # temperatures one of them <= 0.5 K, dephasing, >= 6 realizations); the spectral engine
    # keeps it near 3 min on 2 cores
    demo = parse_config(default_study_text())
    g = demo["geometry"]
    assert (g["r_in"] + g["r_out"]) / 2 >= 0.4e-6 and demo["field"]["mode"] == "uniform"
    temps = demo["sweep"]["temperature"]
    assert len(temps) >= 2 and min(temps) <= 0.5 and min(temps) > 0
    assert any(math.isfinite(d) for d in demo["sweep"]["l_phi"])
    assert demo["ensemble"]["realizations"] >= 6


def test_example_config_prints_a_valid_study(tmp_path):
    rc, stdout, _ = run_cli("example-config")
    assert rc == 0
    assert stdout.startswith("# ringkit study file")
    assert parse_config(stdout).fingerprint == parse_config(default_study_text()).fingerprint
    target = tmp_path / "start.toml"
    assert run_cli("example-config", "-o", str(target))[0] == 0
    rc, _, err = run_cli("example-config", "-o", str(target))
    assert rc == 2 and "exists; pass --force" in err
    assert run_cli("example-config", "-o", str(target), "--force")[0] == 0


# ----------------------------------------------------------------------------- error paths
@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ('[geometry]\nr_in = "70 nm\n', "invalid TOML: "),
        (
            TINY.replace("r_out =", "r_outer ="),
            "unknown key 'r_outer' in [geometry]; did you mean 'r_out'?",
        ),
        (TINY.replace('"98 nm"', '"98 mT"'), "wrong unit, 'mT' is a magnetic field"),
        (
            TINY.replace('"250 nm"', '"-250 nm"'),
            "material.mean_free_path = '-250 nm' is not allowed",
        ),
        (
            TINY.replace("points = 96", "points = 4"),
            "field.points = 4 is not allowed: must lie in [16",
        ),
        (TINY.replace('"5.5 meV"', '"500 meV"'), "must lie inside the lattice band"),
        (TINY.replace("probes = 8", "probes = 5000"), "too many probes"),
        # issue 16, point 7: absurd physical values are refused at set-up, naming the key
        (
            TINY.replace('"250 nm"', '"1 nm"'),
            "material.mean_free_path = '1 nm' is not allowed: gives an elastic mean free path",
        ),
        (
            TINY.replace('"300 nm"]', '"30 nm"]'),
            "sweep.l_phi[1] = '30 nm' is not allowed: must be >= the spacing of "
            "the 8 dephasing probes",
        ),
        (TINY.replace('"70 nm"', "70"), 'geometry.r_in = 70 has no unit; write "70 nm"'),
    ],
)
def test_errors_are_one_line_without_traceback(tmp_path, text, fragment):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    rc, stdout, err = run_cli("study", str(path), "--out", str(tmp_path / "o"))
    assert rc == 2
    assert err.startswith("ringkit: error: ") and err.count("\n") == 1, err
    assert fragment in err
    assert "Traceback" not in err and stdout == ""


def test_output_directory_in_use_is_refused(tiny_file, tmp_path):
    import fcntl

    out = tmp_path / "busy"
    out.mkdir()
    with open(out / ".ringkit-lock", "a+") as fh:  # as a running study holds it
        fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        rc, _, err = run_cli("study", str(tiny_file), "--out", str(out), "--quiet")
    assert rc == 2 and "in use by another ringkit run" in err
    assert not (out / "checkpoint").exists()


def test_error_in_a_real_process_and_debug_traceback(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(TINY.replace("[ensemble]", "[ensemble]\nrealisations = 2"))
    cmd = [*RINGKIT, "study", str(path), "--out", str(tmp_path / "o")]
    p = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
    assert p.returncode == 2
    assert "did you mean 'realizations'?" in p.stderr and "Traceback" not in p.stderr
    p = subprocess.run([*RINGKIT, "--debug", *cmd[3:]], capture_output=True, text=True, timeout=60)
    assert p.returncode != 0 and "Traceback" in p.stderr
    p = subprocess.run([*RINGKIT, "study", str(tmp_path / "none.toml"), "--out", "x"],
                       capture_output=True, text=True, timeout=60)  # fmt: skip
    assert p.returncode == 2 and "study file not found" in p.stderr


# ----------------------------------------------------------------------------- issue 16, point 7
def test_cost_estimate_is_printed_and_long_studies_need_yes(tiny_file, tmp_path):
    out = tmp_path / "big"
    rc, _, err = run_cli(
        "study", str(tiny_file), "--out", str(out),
        "--set", "ensemble.realizations=100000", "--set", 'executor.kind="serial"',
    )  # fmt: skip
    assert rc == 2 and "above the 30 min confirmation limit; pass --yes" in err, err
    assert "cost: " in err and "memory: " in err and "per worker" in err
    assert not list((out / "checkpoint" / "units").glob("*.npz"))  # nothing computed
    # with --yes a study above the limit runs
    rc, _, err = run_cli(
        "study", str(tiny_file), "--out", str(tmp_path / "small"), "--confirm-above", "0",
        "--yes", "--set", "ensemble.realizations=1", "--set", 'sweep.l_phi="inf"',
        "--set", 'sweep.temperature="0 K"', "--set", 'executor.kind="serial"',
    )  # fmt: skip
    assert rc == 0, err
    assert "cost: at least " in err and " energies (" in err


def test_workers_are_capped_at_the_cores(tiny_file, tmp_path, monkeypatch):
    from ringkit.study import cost

    monkeypatch.setattr(cost, "cpu_count", lambda: 2)
    rc, _, err = run_cli("study", str(tiny_file), "--out", str(tmp_path / "w"), "--workers", "8")
    assert rc == 2 and "--workers 8 is more than the 2 cores" in err
    assert "--oversubscribe" in err and err.count("\n") == 1
    rc, _, err = run_cli("study", str(tiny_file), "--out", str(tmp_path / "w"), "--workers", "0")
    assert rc == 2 and "--workers = 0 is not allowed" in err


def test_progress_counts_work_not_units(reference, tiny_file):
    """The bar advances by each unit's estimated cost (the ETA of uneven units holds)."""
    from ringkit.study.plan import make_plan
    from ringkit.study.runner import _WorkBar

    plan = make_plan(load_config(tiny_file))
    weights = {u.uid: (5.0 if u.index[3] else 1.0) for u in plan.units}  # dephased: 5x
    bar = _WorkBar(plan, list(plan.units[2:]), 2, weights, progress=False)
    assert bar.total == pytest.approx(sum(weights.values())) == 3 * 1 + 3 * 5
    assert bar.work_done == pytest.approx(weights[plan.uids[0]] + weights[plan.uids[1]]) == 6
    bar.done(plan.uids[3])
    assert bar.work_done == pytest.approx(1 + 5 + 5) and bar.n_done == 3


def test_failed_final_write_leaves_no_temporary_file_and_resumes(reference, tmp_path, monkeypatch):
    """A full disk while writing results.nc (OSError ENOSPC): one line saying how to resume,
    no temporary file, the checkpoint intact; the same command then writes the outputs."""
    import errno
    import shutil

    from ringkit.study import checkpoint, report

    out = tmp_path / "full"
    shutil.copytree(reference / "checkpoint", out / "checkpoint")
    real = checkpoint.atomic_write_bytes

    def full_disk(*_args, **_kw):
        raise OSError(errno.ENOSPC, "No space left on device")

    def writer(path, data):  # the real writer, failing in its last step
        if path.name != "results.nc":
            return real(path, data)
        with monkeypatch.context() as m:
            m.setattr(checkpoint.os, "replace", full_disk)
            return real(path, data)

    monkeypatch.setattr(report, "_write_file", writer)
    args = ("study", str(reference.parent / "tiny.toml"), "--out", str(out), "--quiet")
    rc, _, err = run_cli(*args, "--set", 'executor.kind="serial"')
    assert rc == 2 and err.count("\n") == 1, err
    assert "No space left on device" in err and "run the same command again" in err
    assert not [p.name for p in out.iterdir() if p.name.endswith(".tmp")]
    assert not (out / "results.nc").exists()
    monkeypatch.setattr(report, "_write_file", real)
    rc, _, err = run_cli(*args[:-1], "--set", 'executor.kind="serial"')
    assert rc == 0 and "6 from the checkpoint, 0 to compute" in err
    a = xr.load_dataset(reference / "results.nc", engine="h5netcdf")
    b = xr.load_dataset(out / "results.nc", engine="h5netcdf")
    np.testing.assert_array_equal(a["G"].values, b["G"].values)


def test_broken_unit_message(reference, tmp_path):
    import shutil

    out = tmp_path / "broken2"
    shutil.copytree(reference / "checkpoint", out / "checkpoint")
    shutil.copy(reference / "results.nc", out / "results.nc")
    unit = out / "checkpoint" / "units" / "r0000-e00-g00-d00.npz"
    unit.write_bytes(b"not a unit")
    rc, _, err = run_cli(
        "study", str(reference.parent / "tiny.toml"), "--out", str(out),
        "--set", 'executor.kind="serial"', "--set", "output.figures=false",
    )  # fmt: skip
    assert rc == 0, err
    lines = [ln for ln in err.splitlines() if "r0000-e00-g00-d00.npz" in ln]
    assert len(lines) == 1 and "not a zip archive" in lines[0] and "computed again" in lines[0]
    assert "allow_pickle" not in err and "Traceback" not in err
    assert "5 from the checkpoint, 1 to compute" in err
    a = xr.load_dataset(reference / "results.nc", engine="h5netcdf")
    b = xr.load_dataset(out / "results.nc", engine="h5netcdf")
    np.testing.assert_array_equal(a["G"].values, b["G"].values)  # recomputed bit for bit


# ----------------------------------------------------------------------------- issue 11, point 6
def test_dephased_unit_reuses_one_model_and_one_probe_mapping(tmp_path, monkeypatch):
    """Flux-tube unit at 1 K with probes: one FluxTubeModel evaluation (shared with the L_phi
    calibration) and one calibration for all energies (it rebuilt both at every energy), BLAS
    limited to one thread, and at T = 0 the library's fast_field_conductance with the same
    probes (calibrated at E_F, served from the per-process cache)."""
    import threadpoolctl

    from ringkit.study import compute
    from ringkit.study.plan import make_plan
    from ringkit.transport import lowrank, probes, spectral
    from ringkit.transport.realised_l_phi import cache_info
    from ringkit.transport.sweep import fast_field_conductance

    text = TINY.replace('start = "-1.2 T"', 'mode = "flux_tube"\nstart = "-2 h/e"')
    cfg = parse_config(text.replace('stop = "1.2 T"', 'stop = "2 h/e"'))
    plan = make_plan(cfg.with_overrides({"ensemble.realizations": 1}))
    counts = {"model": 0, "attach": 0}
    threads: list[int] = []
    real_init, real_attach = lowrank.FluxTubeModel.__init__, probes.attach_probes
    real_conductance = compute.UnitEngine.conductance

    def init(self, *a, **k):
        counts["model"] += 1
        real_init(self, *a, **k)

    def attach(*a, **k):
        counts["attach"] += 1
        return real_attach(*a, **k)

    def conductance(self, e):
        info = threadpoolctl.threadpool_info()
        threads.extend(i["num_threads"] for i in info if i["user_api"] == "blas")
        return real_conductance(self, e)

    monkeypatch.setattr(lowrank.FluxTubeModel, "__init__", init)
    monkeypatch.setattr(probes, "attach_probes", attach)
    monkeypatch.setattr(compute.UnitEngine, "conductance", conductance)
    # this test pins the per-energy low-rank path; with 8 probes "auto" would take the
    # spectral engine (spectral.AUTO_MAX_PROBES_FLUX_TUBE, benchmarks/RESULTS-auto-rule.md)
    monkeypatch.setattr(spectral, "AUTO_MAX_PROBES_FLUX_TUBE", 0)
    compute.clear_cache()
    unit = next(u for u in plan.units if np.isfinite(u.l_phi))
    res = compute.compute_unit(compute.make_tasks(plan, [unit])[0])
    n_total = res.info["n_energies_total"]
    assert res.n_energies[0] == 1 and res.n_energies[1] >= 15
    assert n_total - res.n_energies[1] in (0, 1)  # E_F (T = 0) shared when it is a 1 K node
    assert counts == {"model": 1, "attach": 0}  # probes calibrated, not the analytic mapping
    assert cache_info()["setups"] == 1 and cache_info()["calibrations"] == 1
    assert res.info["l_phi_realised_m"] == pytest.approx(unit.l_phi, rel=0.1)
    assert threads and set(threads) == {1}
    ring = compute.state_for(compute.make_tasks(plan, [unit])[0]).ring
    lib = fast_field_conductance(
        ring, plan.field, energy=ring.fermi_energy, l_phi=unit.l_phi, n_probes=8
    )
    assert cache_info()["setups"] == 1  # the same calibration, not a new one
    # same calibration at E_F; the study rounds eta to 8 digits (bit-for-bit resumes)
    np.testing.assert_allclose(res.conductance[0], lib.conductance, rtol=0, atol=1e-6)
    compute.clear_cache()


# ----------------------------------------------------------------------------- reports, demo
def test_report_in_lab_units_with_caution_and_modes(reference):
    report = (reference / "report.md").read_text()
    head = report.splitlines()[:4]
    assert any(line.startswith("*Laboratory caution:") for line in head)
    # modes per arm: the lattice count equals kwant's open lead channels (leads have the arm
    # width); the continuum hard-wall count floor(kF W/pi) for GaAs m* = 0.067 (preset),
    # E_F = 5.5 meV, W = 28 nm is 0 (kF W/pi = 0.88): the 4-site strip acts 5 a = 35 nm wide
    assert "| transverse modes per arm (lattice strip of the narrowest arm's width" in report
    assert "at E_F) | 1 |" in report and "floor(kF W/pi) | 0 |" in report
    kf = math.sqrt(2 * 0.067 * sc.m_e * 5.5e-3 * sc.eV) / sc.hbar
    assert math.floor(kf * 28e-9 / math.pi) == 0 and math.floor(kf * 35e-9 / math.pi) == 1
    assert "| open channels per lead on the lattice at E_F | 1 |" in report
    assert "| sheet density | 1.539e+11 cm^-2 |" in report  # n = m* E_F / (pi hbar^2)
    assert 0.067 * sc.m_e * 5.5e-3 * sc.eV / (math.pi * sc.hbar**2) * 1e-4 == pytest.approx(
        1.54e11, rel=2e-3
    )
    assert "[J]" not in report and "[1/m]" not in report  # lab units, not SI keys
    assert '| geometry.r_in | "70 nm" |' in report  # echoed as written


def test_demo_folder_matches_readme():
    from ringkit.cli.demo import DEFAULT_OUT

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    assert DEFAULT_OUT == "ringkit-demo-output" and DEFAULT_OUT in readme


def test_cost_model_counts_set_up_and_folded_spectral_points():
    """Arithmetic of the per-unit cost model (ringkit.study.cost.Timing): a uniform-field
    spectral unit pays one model per distinct |B| (G(B) = G(-B), Onsager) plus its energies,
    and every unit its set-up (probe calibration)."""
    from ringkit.study.cost import Timing

    field = np.linspace(-2.0, 2.0, 9)  # 9 points, 5 distinct |B|
    t = Timing("spectral-field", s0=1e-3, s1=0.5, setup=2.0, build=3.0)
    assert t.unit_seconds(100, field) == pytest.approx(5 * (0.5 + 100 * 1e-3))
    d = Timing("per-energy", s0=0.1, s1=0.01)
    assert d.unit_seconds(10, field) == pytest.approx(10 * (0.1 + 9 * 0.01))
    assert "set-up per unit" in t.describe(9) and "set-up" not in d.describe(9)
