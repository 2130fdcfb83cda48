"""Study files: quantities with units, schema validation and its error messages, the plan of
work units with stable ids, and the checkpoint layout (no physics computation here)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import constants as sc

from ringkit import ParameterError
from ringkit.study import (
    ConfigError,
    default_study_text,
    example_config_text,
    parse_config,
)
from ringkit.study.checkpoint import Checkpoint, CheckpointMismatch, UnitResult
from ringkit.study.plan import make_plan
from ringkit.study.quantities import QuantityError, format_quantity, parse_quantity

MINIMAL = """
[geometry]
r_in = "140 nm"
r_out = "200 nm"
[field]
start = "-0.2 T"
stop = "0.2 T"
"""


def cfg(extra: str = "", base: str = MINIMAL):
    return parse_config(base + "\n" + extra, source="test.toml")


# ----------------------------------------------------------------------------- quantities
@pytest.mark.parametrize(
    ("text", "dimension", "expected"),
    [
        ("250 nm", "length", 250 * 1e-9),  # SI prefix nano = 1e-9 (definition)
        ("1.5 um", "length", 1.5e-6),
        ("1.5 µm", "length", 1.5e-6),
        ("-20 mT", "field", -20e-3),
        ("30 G", "field", 30 * 1e-4),  # 1 gauss = 1e-4 T (SI definition)
        ("10 meV", "energy", 10e-3 * sc.electron_volt),  # eV from scipy.constants (exact, SI 2019)
        ("1.2e-21 J", "energy", 1.2e-21),
        ("3e11 cm^-2", "density", 3e11 * 1e4),  # 1 cm^-2 = 1e4 m^-2 (definition)
        ("4e5 cm^2/Vs", "mobility", 4e5 * 1e-4),  # 1 cm^2/Vs = 1e-4 m^2/Vs (definition)
        ("-5 h/e", "flux", -5 * sc.h / sc.e),  # flux quantum h/e from scipy.constants
        ("1 h/2e", "flux", sc.h / (2 * sc.e)),
        ("100 mK", "temperature", 0.1),
        ("inf", "length", math.inf),
        (0, "temperature", 0.0),  # 0 and inf need no unit
        (math.inf, "length", math.inf),
    ],
)
def test_parse_quantity_values(text, dimension, expected):
    assert parse_quantity(text, dimension, name="x") == pytest.approx(expected, rel=1e-15, abs=0)


@pytest.mark.parametrize(
    ("text", "dimension", "fragment"),
    [
        ("140 mT", "length", "wrong unit, 'mT' is a magnetic field but x is a length"),
        ("1 K", "energy", "'K' is a temperature"),
        ("140 nmm", "length", "did you mean 'nm'?"),
        ("140", "length", 'x = 140 has no unit; write "140 nm"'),
        (300, "length", 'x = 300 has no unit; write "300 nm"'),  # issue 16, point 6
        (0.3, "temperature", 'x = 0.3 has no unit; write "0.3 K"'),
        (-5.0, "field", 'x = -5.0 has no unit; write "-5.0 mT"'),
        ("abc", "length", "not a number with a unit"),
        (True, "length", "expected a length"),
        ([1, 2], "length", "expected a length"),
    ],
)
def test_parse_quantity_errors(text, dimension, fragment):
    with pytest.raises(QuantityError, match="x = ") as info:
        parse_quantity(text, dimension, name="x")
    assert fragment in str(info.value)


@pytest.mark.parametrize(
    ("value", "dimension"),
    [(2.5e-7, "length"), (-0.2, "field"), (1.5, "temperature"), (9e-3 * sc.eV, "energy")],
)
def test_format_quantity_round_trips(value, dimension):
    text = format_quantity(value, dimension)
    assert parse_quantity(text, dimension, name="x") == pytest.approx(value, rel=1e-9, abs=0)


# ----------------------------------------------------------------------------- schema
def test_default_study_and_example_config_agree():
    default = parse_config(default_study_text(), source="default")
    example = parse_config(example_config_text(), source="example")
    # the example printed by `ringkit example-config` is the demo study, key for key
    assert example.sections == default.sections
    assert example.fingerprint == default.fingerprint
    # every key of the schema is documented in the example (active or commented out)
    from ringkit.study.schema import SCHEMA

    text = example_config_text()
    for sec, (_doc, keys) in SCHEMA.items():
        assert f"[{sec}]" in text
        for name in keys:
            assert f"{name} = " in text, name


def test_to_toml_round_trip_is_exact():
    c = cfg('[sweep]\ntemperature = ["0.1 K", "2 K"]\nl_phi = ["inf", "1.3 um"]')
    again = parse_config(c.to_toml())
    assert again.sections == c.sections
    assert again.fingerprint == c.fingerprint


def test_defaults_and_si_values():
    c = cfg()
    assert c["geometry"]["r_in"] == pytest.approx(140e-9, rel=1e-15, abs=0)
    assert c["field"]["points"] == 401
    assert c["sweep"]["temperature"] == (0.0,)
    assert c["sweep"]["l_phi"] == (math.inf,)
    assert c["ensemble"]["realizations"] == 1
    assert c["material"]["preset"] == "GaAs"


def test_scalar_accepted_for_list_and_radius_width_form():
    c = cfg('[sweep]\ntemperature = "1.5 K"')
    assert c["sweep"]["temperature"] == (1.5,)
    alt = parse_config(
        '[geometry]\nradius = "170 nm"\nwidth = "60 nm"\n[field]\nstart = "-0.2 T"\n'
        'stop = "0.2 T"\n'
    )
    assert alt["geometry"]["r_in"] == pytest.approx(140e-9, rel=1e-12, abs=0)
    assert alt["geometry"]["r_out"] == pytest.approx(200e-9, rel=1e-12, abs=0)


def test_fingerprint_tracks_physics_only():
    base = cfg()
    assert cfg("[ensemble]\nrealizations = 2").fingerprint != base.fingerprint
    wider = parse_config(MINIMAL, overrides={"geometry.lead_width": "50 nm"})
    assert wider.fingerprint != base.fingerprint
    for extra in (
        '[executor]\nkind = "serial"',
        "[output]\nfigures = false",
        '[analysis]\nbackground = "savgol"',
        '[study]\nname = "other"',
    ):
        assert cfg(extra).fingerprint == base.fingerprint, extra


def test_overrides():
    c = parse_config(MINIMAL, overrides={"ensemble.realizations": 3, "field.stop": "50 mT"})
    assert c["ensemble"]["realizations"] == 3
    assert c["field"]["stop"] == pytest.approx(0.05, rel=1e-15)
    d = c.with_overrides({"sweep.temperature": ["1 K", "2 K"]})
    assert d["sweep"]["temperature"] == (1.0, 2.0)
    with pytest.raises(ConfigError, match="unknown key 'realisations' in \\[ensemble\\]"):
        parse_config(MINIMAL, overrides={"ensemble.realisations": 3})


@pytest.mark.parametrize(
    ("overrides", "exc", "fragments"),
    [
        (
            {"geometry.r_ot": 1},
            ConfigError,
            ["unknown key 'r_ot' in [geometry]", "did you mean 'r_out'?"],
        ),
        ({"ensemble.realisations": 4}, ConfigError, ["did you mean 'realizations'?"]),
        ({"ensemble.temperature": 4}, ConfigError, ["'temperature' belongs in section [sweep]"]),
        (
            {"sweeps.temperature": 4},
            ConfigError,
            ["unknown section [sweeps]", "did you mean [sweep]?"],
        ),
        (
            {"sweep.temperature": ["1 K", "-2 K"]},
            ParameterError,
            ["sweep.temperature[1] = '-2 K'", "must lie in [0, 1000 K]"],
        ),
        ({"sweep.temperature": ["1 K", "1 K"]}, ConfigError, ["values must be distinct"]),
        ({"sweep.l_phi": "0 um"}, ParameterError, ["sweep.l_phi[0]"]),
        ({"sweep.dephasing_length": "2 um"}, ConfigError, ["renamed: write [sweep] l_phi"]),
        ({"sweep.temperature": "4 meV"}, QuantityError, ["'meV' is an energy"]),
        ({"field.points": 3}, ParameterError, ["field.points = 3", "[16, 1e+06]"]),
        ({"field.points": "many"}, ConfigError, ["field.points = 'many': expected an integer"]),
        (
            {"executor.kind": "dsak"},
            ParameterError,
            ["executor.kind = 'dsak'", "did you mean 'dask'?"],
        ),
        ({"output.figures": 1}, ConfigError, ["expected true or false"]),
        (
            {"material.fermi_energy": "5 meV", "material.density": "3e11 cm^-2"},
            ConfigError,
            ["only one of fermi_energy and density"],
        ),
        (
            {"material.mobility": "1e5 cm^2/Vs", "material.mean_free_path": "1 um"},
            ConfigError,
            ["only one of mobility"],
        ),
        (
            {"lattice.spacing": "40 nm"},
            ParameterError,
            ["lattice.spacing = '40 nm'", "half the arm width"],
        ),
    ],
)
def test_validation_errors_name_the_key(overrides, exc, fragments):
    with pytest.raises(exc) as info:
        parse_config(MINIMAL, source="test.toml", overrides=overrides)
    for f in fragments:
        assert f in str(info.value)


@pytest.mark.parametrize(
    ("text", "fragments"),
    [
        ('[geometry]\nr_in = "140 nm\n', ["invalid TOML", "line 2"]),
        ("points = 3\n" + MINIMAL, ["key 'points' must be inside a section", "[field]"]),
        (
            '[geometry]\nr_in = "140 nm"\nr_out = "100 nm"\n[field]\nstart = "-1 T"\nstop = "1 T"',
            ["geometry.r_out = '100 nm'", "must be > geometry.r_in = 140 nm"],
        ),
        (
            '[geometry]\nr_in = "140 nm"\nr_out = "200 nm"\n[field]\nstart = "-1 T"',
            ["missing required key 'stop' in [field]"],
        ),
        (
            '[geometry]\nr_in = "140 nm"\n[field]\nstart = "-1 T"\nstop = "1 T"',
            ["r_in and r_out must be given together"],
        ),
        (
            '[geometry]\nr_in = "140 nm"\nr_out = "200 nm"\n[field]\nstart = "1 T"\nstop = "-1 T"',
            ["field.stop = '-1 T'", "must be > field.start = 1 T"],
        ),
    ],
)
def test_whole_file_errors(text, fragments):
    with pytest.raises(ValueError) as info:
        parse_config(text, source="test.toml")
    for f in fragments:
        assert f in str(info.value)


def test_flux_tube_mode_needs_flux_units():
    flux = (
        '[geometry]\nr_in = "140 nm"\nr_out = "200 nm"\n[field]\nmode = "flux_tube"\n'
        'start = "-2 h/e"\nstop = "2 h/e"\n'
    )
    c = parse_config(flux)
    assert c["field"]["stop"] == pytest.approx(2 * sc.h / sc.e, rel=1e-15, abs=0)  # scipy.constants
    assert make_plan(c).field_name == "flux"
    with pytest.raises(
        QuantityError, match="'T' is a magnetic field but field.start is a magnetic flux"
    ):
        parse_config(flux.replace('"-2 h/e"', '"-2 T"'))


# ----------------------------------------------------------------------------- plan
def test_plan_units_ids_and_axes():
    c = cfg(
        '[sweep]\nfermi_energy = ["5 meV", "6 meV"]\ngate_potential = ["0 meV", "0.2 meV", '
        '"0.4 meV"]\ntemperature = ["0 K", "1 K"]\nl_phi = ["inf", "1 um"]\n'
        "[ensemble]\nrealizations = 3\nseed = 7\n"
    )
    plan = make_plan(c)
    assert plan.shape == (3, 2, 3, 2)
    assert len(plan.units) == 3 * 2 * 3 * 2  # temperatures live inside each unit
    assert plan.seeds == (7, 8, 9)
    assert plan.swept_axes() == [
        "fermi_energy",
        "gate_potential",
        "temperature",
        "l_phi",
    ]
    uids = [u.uid for u in plan.units]
    assert len(set(uids)) == len(uids)
    assert uids[0] == "r0000-e00-g00-d00" and uids[-1] == "r0002-e01-g02-d01"
    assert uids == [u.uid for u in make_plan(c).units]  # stable between runs
    # realization-major order (one worker reuses one built lattice)
    assert [u.index[0] for u in plan.units] == sorted(u.index[0] for u in plan.units)
    u = plan.unit("r0001-e01-g02-d01")
    assert (u.seed, u.fermi_energy, u.l_phi) == (
        8,
        pytest.approx(6e-3 * sc.eV, rel=1e-15, abs=0),
        1e-6,
    )
    assert u.gate_potential == pytest.approx(0.4e-3 * sc.eV, rel=1e-15, abs=0)
    np.testing.assert_array_equal(plan.field, np.linspace(-0.2, 0.2, 401))


# ----------------------------------------------------------------------------- checkpoint
def test_checkpoint_roundtrip_resume_and_refusal(tmp_path):
    plan = make_plan(cfg("[ensemble]\nrealizations = 2"))
    ck = Checkpoint.open(tmp_path, plan)
    assert ck.done() == set()
    g = np.random.default_rng(0).random((1, 401))
    ck.save(UnitResult(plan.uids[0], g, (1,), 0.5, {"n_sites": 10}))
    assert ck.done() == {plan.uids[0]}
    assert not [p for p in ck.units_dir.iterdir() if p.suffix != ".npz"]  # no temporary files
    back = Checkpoint.open(tmp_path, plan).load(plan.uids[0])
    np.testing.assert_array_equal(back.conductance, g)  # bit for bit
    assert back.n_energies == (1,) and back.info == {"n_sites": 10}
    manifest = json.loads((tmp_path / "checkpoint" / "manifest.json").read_text())
    assert manifest["fingerprint"] == plan.config.fingerprint
    assert manifest["units"] == list(plan.uids)
    # a study with other physics is refused, never mixed in
    other = make_plan(cfg("[ensemble]\nrealizations = 3"))
    with pytest.raises(CheckpointMismatch, match="different study"):
        Checkpoint.open(tmp_path, other)
    # other executor/output settings share the checkpoint
    same = make_plan(cfg('[executor]\nkind = "serial"\n[ensemble]\nrealizations = 2'))
    assert Checkpoint.open(tmp_path, same).done() == {plan.uids[0]}
    # --restart discards it
    assert Checkpoint.open(tmp_path, other, restart=True).done() == set()


# ----------------------------------------------------------------------------- issue 16 (6, 7)
def test_bare_number_for_a_dimensional_key_says_which_unit_to_write():
    """``radius = 300`` was read as 300 m; now it is refused with the unit to write."""
    text = '[geometry]\nradius = 300\nwidth = "60 nm"\n[field]\nstart = "-1 mT"\nstop = "1 mT"'
    with pytest.raises(QuantityError) as info:
        parse_config(text)
    assert 'geometry.radius = 300 has no unit; write "300 nm"' in str(info.value)
    with pytest.raises(QuantityError, match='field.stop = 0.2 has no unit; write "0.2 mT"'):
        parse_config(MINIMAL.replace('stop = "0.2 T"', "stop = 0.2"))
    # 0 means the same in every unit
    assert cfg("[sweep]\ntemperature = 0")["sweep"]["temperature"] == (0.0,)


@pytest.mark.parametrize(
    ("overrides", "fragment"),
    [
        ({"sweep.l_phi": "1e-30 nm"}, "sweep.l_phi[0] = '1e-30 nm'"),
        ({"geometry.r_in": "5e-324 m"}, "geometry.r_in = '5e-324 m'"),
        ({"sweep.temperature": "5e-324 K"}, "sweep.temperature[0] = '5e-324 K'"),
        ({"material.mean_free_path": "1e-30 nm"}, "material.mean_free_path = '1e-30 nm'"),
        ({"material.effective_mass": 5e-324}, "material.effective_mass = 5e-324"),
        ({"sweep.l_phi": math.nan}, "sweep.l_phi[0] = nan"),
        ({"sweep.l_phi": "-inf"}, "sweep.l_phi[0] = '-inf'"),
    ],
)
def test_absurd_values_are_refused_when_the_file_is_read(overrides, fragment):
    with pytest.raises(ValueError) as info:
        parse_config(MINIMAL, overrides=overrides)
    assert fragment in str(info.value)


def test_echoed_keys_show_what_the_user_wrote():
    c = parse_config(
        '[geometry]\nradius = "0.5 um"  # mean radius\nwidth = "120 nm"\n'
        '[field]\nstart = "-20 mT"\nstop = "0.02 T"\n',
        overrides={"sweep.temperature": ["300 mK", "1 K"]},
    )
    rows = {k: v for k, v, _ in c.describe()}
    assert rows["geometry.radius"] == '"0.5 um"'
    assert rows["geometry.r_in"] == "(derived) 440 nm"
    assert rows["field.start"] == '"-20 mT"'
    assert rows["field.stop"] == '"0.02 T" (20 mT)'
    assert rows["sweep.temperature"] == '["300 mK", "1 K"]'
    assert rows["field.points"] == "(default) 401"
    assert 'radius = "0.5 um"' in c.text and "sweep.temperature" in c.text


# ----------------------------------------------------------------------------- checkpoint
def _unit_file(tmp_path):
    plan = make_plan(cfg("[ensemble]\nrealizations = 2"))
    ck = Checkpoint.open(tmp_path, plan)
    g = np.linspace(0, 1, 401)[None, :]
    ck.save(UnitResult(plan.uids[0], g, (1,), 0.5, {}))
    ck.save(UnitResult(plan.uids[1], g, (1,), 0.5, {}))
    return plan, ck


def _npz(members: dict[str, bytes]) -> bytes:
    import io
    import zipfile

    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    return buf.getvalue()


def _npy_header(descr: str, shape: tuple) -> bytes:
    import io

    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(
        buf, {"descr": descr, "fortran_order": False, "shape": shape}
    )
    return buf.getvalue()


def _meta(uid: str, fp: str, depth: int = 0) -> bytes:
    import io

    text = json.dumps({"uid": uid, "fingerprint": fp, "n_energies": [1], "elapsed": 1.0})
    if depth:
        text = "[" * depth + "]" * depth
    buf = io.BytesIO()
    np.save(buf, np.array(text))
    return buf.getvalue()


@pytest.mark.parametrize(
    "kind", ["not_zip", "bad_zip", "deep_meta", "huge_header", "pickled", "wrong_shape"]
)
def test_broken_checkpoint_unit_is_named_in_one_line_and_set_aside(tmp_path, kind):
    """Crafted or broken unit files (issue 16, point 7): one line naming the file, no
    traceback, no numpy ``allow_pickle`` advice, nothing allocated from a crafted header."""
    import io

    plan, ck = _unit_file(tmp_path)
    uid = plan.uids[0]
    path = ck.path(uid)
    good = io.BytesIO()
    np.save(good, np.zeros((1, 401)))
    meta = _meta(uid, ck.fingerprint)
    if kind == "not_zip":
        import pickle

        data = pickle.dumps({"conductance": [1.0]})
    elif kind == "bad_zip":
        data = path.read_bytes()[:100]
    elif kind == "deep_meta":
        data = _npz({"conductance.npy": good.getvalue(), "meta.npy": _meta(uid, "", 100_000)})
    elif kind == "huge_header":  # a header that claims 745 GiB
        big = _npy_header("<f8", (1, 100_000_000_000)) + b"\0" * 64
        data = _npz({"conductance.npy": big, "meta.npy": meta})
    elif kind == "pickled":
        obj = io.BytesIO()
        np.save(obj, np.array([{"a": 1}], dtype=object), allow_pickle=True)
        data = _npz({"conductance.npy": obj.getvalue(), "meta.npy": meta})
    else:
        small = io.BytesIO()
        np.save(small, np.zeros((1, 3)))
        data = _npz({"conductance.npy": small.getvalue(), "meta.npy": meta})
    path.write_bytes(data)
    results, broken = ck.load_done(plan.uids)
    assert list(results) == [plan.uids[1]]  # the intact unit is kept
    (line,) = broken
    assert str(path) in line and "\n" not in line and "computed again" in line
    assert "allow_pickle" not in line and "pickle" not in line.replace("pickled", "")
    assert not path.exists() and (tmp_path / "checkpoint" / "broken" / path.name).exists()


def test_deeply_nested_manifest_is_a_one_line_refusal(tmp_path):
    plan, _ = _unit_file(tmp_path)
    (tmp_path / "checkpoint" / "manifest.json").write_text("[" * 100_000 + "]" * 100_000)
    with pytest.raises(CheckpointMismatch, match="nested too deeply.*--restart"):
        Checkpoint.open(tmp_path, plan)


# ----------------------------------------------------------------------------- preflight
def test_preflight_refuses_what_cannot_fit(monkeypatch, tmp_path):
    """800 GB of results, a ~97 GB ring on a 23 GB machine: refused before any build."""
    from ringkit.study import cost

    monkeypatch.setattr(cost, "available_memory", lambda: 23e9)
    monkeypatch.setattr(cost, "cpu_count", lambda: 2)
    huge = parse_config(
        MINIMAL, overrides={"field.points": 1_000_000, "ensemble.realizations": 100_000}
    )
    with pytest.raises(cost.CostError, match="800 GB of conductance values.*23 GB"):
        cost.preflight(make_plan(huge))
    big_ring = parse_config(
        '[material]\nfermi_energy = "0.2 meV"\n[geometry]\nradius = "100 um"\nwidth = "10 um"'
        '\n[lattice]\nspacing = "30 nm"\nmax_sites = 10000000\n'
        '[field]\nstart = "-1 mT"\nstop = "1 mT"'
    )
    with pytest.raises(cost.CostError, match="one work unit needs about .* GB of memory"):
        cost.preflight(make_plan(big_ring))


def test_preflight_caps_workers_at_the_cores(monkeypatch):
    from ringkit.study import cost

    monkeypatch.setattr(cost, "cpu_count", lambda: 2)
    plan = make_plan(cfg("[executor]\nworkers = 8\n[ensemble]\nrealizations = 10"))
    pre = cost.preflight(plan)
    assert pre.workers == 2 and "capped at the 2 cores" in pre.notes[0]
    with pytest.raises(cost.CostError, match="--workers 8 is more than the 2 cores"):
        cost.preflight(plan, workers=8)
    assert cost.preflight(plan, workers=8, oversubscribe=True).workers == 8
    assert cost.preflight(plan, workers=2, n_pending=1).workers == 1
    for bad in (0, 5000):
        with pytest.raises(ParameterError, match="--workers"):
            cost.check_workers_option(bad)


@pytest.mark.parametrize(("n_across", "energy"), [(4, 0.474), (10, 0.9), (17, 0.3), (6, 3.5)])
def test_lattice_modes_equal_kwant_lead_channels(n_across, energy):
    """The mode count of the report against kwant's own lead modes of the same strip."""
    import kwant

    from ringkit.study.checks import lattice_modes

    lat = kwant.lattice.square(1, norbs=1)
    lead = kwant.Builder(kwant.TranslationalSymmetry((-1, 0)))
    lead[(lat(0, y) for y in range(n_across))] = 4.0
    lead[lat.neighbors()] = -1.0
    prop, _ = lead.finalized().modes(energy=energy)
    assert lattice_modes(energy, n_across) == len(prop.velocities) // 2


@pytest.mark.parametrize(
    ("active", "alternative"),
    [
        (("radius", "width"), ("r_in", "r_out")),
        (("density",), ("fermi_energy",)),
        (("mean_free_path",), ("mobility",)),
        (("mean_free_path",), ("disorder_strength",)),
        ((), ("lead_width",)),
        ((), ("spacing",)),
    ],
)
def test_example_alternatives_agree_with_the_active_values(active, alternative):
    """Uncommenting an alternative of ``ringkit example-config`` (instead of its active
    partner) gives the same device, to the 4 digits printed (issue 16, point 8)."""
    import re
    import warnings

    from ringkit.study.setup import make_device

    text = example_config_text()
    for name in active:
        text, n = re.subn(rf"^{name} = ", f"# {name} = ", text, flags=re.M)
        assert n == 1, name
    for name in alternative:
        text, n = re.subn(rf"^# {name} = ", f"{name} = ", text, count=1, flags=re.M)
        assert n == 1, name

    def device_numbers(c):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            d = make_device(c.physics(), None, 0.0)
        m = d.material
        out = [d.geometry.r_in, d.geometry.r_out, float(d.geometry.lead_width), d.spacing]
        out += [m.fermi_energy_J, m.sheet_density]
        if "disorder_strength" not in alternative:
            out.append(m.elastic_mean_free_path)
        return np.array(out)

    base = parse_config(example_config_text())
    np.testing.assert_allclose(device_numbers(parse_config(text)), device_numbers(base), rtol=1e-3)
    if "disorder_strength" in alternative:  # W reproduces the Born mean free path on the lattice
        from ringkit.tightbinding.disorder import born_mean_free_path

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            d = make_device(parse_config(text).physics(), None, 0.0)
        w_t = d.material.disorder_strength / d.hopping
        l_born = born_mean_free_path(w_t, d.material.fermi_energy_J / d.hopping) * d.spacing
        assert l_born == pytest.approx(base["material"]["mean_free_path"], rel=2e-3)
