"""Labelled result datasets (xarray) with full provenance, and lossless netCDF I/O.

API
---
ring_attrs(ring) -> dict
    Every device and numerical parameter of a built ring as netCDF-safe attributes (unit in
    the name, e.g. ``lattice_spacing_m``), plus ``device_json`` (the full device, exactly
    reconstructible with :func:`device_from_attrs`), ``ringkit_version`` and ``kwant_version``.
make_dataset(ring, name, values, G, *, spin_resolved=False, attrs=None) -> xarray.Dataset
    Dataset with data variable ``G`` [e^2/h] on coordinate ``name`` (and ``G_spin`` on
    (``spin``, ``name``) when spin resolved).
save_dataset(ds, path), load_dataset(path)
    netCDF4/HDF5 files through h5netcdf; ``load_dataset(save_dataset(ds))`` is identical.
device_from_attrs(attrs) -> RingDevice
COORD_META
    Units and long names of the coordinates used by ringkit.
"""

from __future__ import annotations

import json
import os
from typing import Any

import kwant
import numpy as np
import xarray as xr

from ringkit._validation import ParameterError
from ringkit._version import __version__
from ringkit.device import RingDevice

__all__ = [
    "ring_attrs",
    "make_dataset",
    "save_dataset",
    "load_dataset",
    "device_from_attrs",
    "COORD_META",
    "SOLVER_DESCRIPTION",
]

SOLVER_DESCRIPTION = "kwant.smatrix, MUMPS sparse LU with AMD ordering"
"""How transmissions are computed (stored in every dataset's ``solver`` attribute)."""

COORD_META: dict[str, dict[str, str]] = {
    "B": {"units": "T", "long_name": "perpendicular magnetic field"},
    "flux": {"units": "Wb", "long_name": "magnetic flux through the ring's hole"},
    "energy": {"units": "J", "long_name": "energy above the band bottom"},
    "gate": {"units": "J", "long_name": "arm-gate potential energy"},
    "spin": {"units": "1", "long_name": "spin along +z"},
}

_UNITS = {
    "effective_mass": "me",
    "fermi_energy": "J",
    "density": "m-2",
    "mobility": "m2_per_Vs",
    "mean_free_path": "m",
    "disorder_strength": "J",
    "temperature": "K",
    "l_phi": "m",
    "g_factor": "",
    "r_in": "m",
    "r_out": "m",
    "width_upper": "m",
    "width_lower": "m",
    "lead_width": "m",
    "length": "m",
    "height": "m",
    "side_width": "m",
    "lattice_spacing": "m",
    "cut_angle": "rad",
    "potential": "J",
}


def _attr_value(v: Any) -> Any:
    if isinstance(v, bool | np.bool_):
        return int(v)
    if isinstance(v, int | np.integer):
        return int(v)
    if isinstance(v, float | np.floating):
        return float(v)
    return str(v)


def _flatten(prefix: str, d: dict[str, Any], out: dict[str, Any]) -> None:
    for key, value in d.items():
        if value is None:
            continue
        unit = _UNITS.get(key, "")
        name = f"{prefix}{key}" + (f"_{unit}" if unit else "")
        if isinstance(value, list | tuple):
            for k, item in enumerate(value):
                out[f"{name}_{k}"] = _attr_value(item)
        else:
            out[name] = _attr_value(value)


def ring_attrs(ring: Any) -> dict[str, Any]:
    """netCDF-safe attributes describing ``ring`` (a TightBindingRing) completely."""
    dev: RingDevice = ring.device
    d = dev.to_dict()
    attrs: dict[str, Any] = {
        "title": "ringkit two-terminal conductance",
        "ringkit_version": __version__,
        "kwant_version": kwant.__version__,
        "conductance_units": "e^2/h",
        "device_json": json.dumps(d, sort_keys=True),
    }
    _flatten("material_", d["material"], attrs)
    _flatten("geometry_", d["geometry"], attrs)
    if d["gate"] is not None:
        _flatten("gate_", d["gate"], attrs)
    _flatten(
        "",
        {k: d[k] for k in ("field_mode", "max_kfa", "max_sites", "cut_angle", "lead_stub")},
        attrs,
    )
    attrs.update(
        {
            "lattice_spacing_m": float(ring.lattice_spacing),
            "hopping_J": float(ring.hopping),
            "onsite_offset_t": float(ring.onsite_offset),
            "kfa": float(dev.kfa),
            "dispersion_error": float(dev.dispersion_error),
            "n_sites": int(ring.n_sites),
            "lead_sites": int(ring.lead_sites),
            "seed": int(ring.seed),
            "disorder_strength_J": float(ring.disorder_strength),
            "loop_area_m2": float(ring.loop_area),
            "field_param": ring.field_param,
        }
    )
    if ring.born_mean_free_path is not None:
        attrs["born_mean_free_path_m"] = float(ring.born_mean_free_path)
    return attrs


def make_dataset(
    ring: Any,
    name: str,
    values: np.ndarray,
    G: np.ndarray,
    *,
    spin_resolved: bool = False,
    attrs: dict[str, Any] | None = None,
) -> xr.Dataset:
    """Dataset of conductance ``G`` [e^2/h] versus coordinate ``name`` (see module doc).

    ``G`` has shape (n,) or, if ``spin_resolved``, (n, 2) with columns (up, down).
    """
    if name not in COORD_META:
        raise ParameterError("name", name, "must be one of " + ", ".join(COORD_META))
    values = np.asarray(values, dtype=float)
    G = np.asarray(G, dtype=float)
    coords = {name: (name, values, dict(COORD_META[name]))}
    g_attrs = {"units": "e^2/h", "long_name": "two-terminal conductance (both spins)"}
    if spin_resolved:
        coords["spin"] = ("spin", np.array(["up", "down"]), dict(COORD_META["spin"]))
        data_vars = {
            "G": (name, G.sum(axis=1), g_attrs),
            "G_spin": (
                ("spin", name),
                G.T,
                {"units": "e^2/h", "long_name": "spin-resolved conductance (e^2/h) T_sigma"},
            ),
        }
    else:
        data_vars = {"G": (name, G, g_attrs)}
    all_attrs = ring_attrs(ring)
    all_attrs["spin_resolved"] = int(bool(spin_resolved))
    all_attrs["solver"] = SOLVER_DESCRIPTION
    for k, v in (attrs or {}).items():
        all_attrs[k] = _attr_value(v)
    return xr.Dataset(data_vars=data_vars, coords=coords, attrs=all_attrs)


def save_dataset(ds: xr.Dataset, path: str | os.PathLike) -> str:
    """Write ``ds`` to a netCDF4 (HDF5) file with h5netcdf; returns the path as a string."""
    if not isinstance(ds, xr.Dataset):
        raise ParameterError("ds", type(ds).__name__, "must be an xarray.Dataset")
    path = os.fspath(path)
    ds.to_netcdf(path, engine="h5netcdf")
    return path


def load_dataset(path: str | os.PathLike) -> xr.Dataset:
    """Read a dataset written by :func:`save_dataset` fully into memory (file closed)."""
    return xr.load_dataset(os.fspath(path), engine="h5netcdf")


def device_from_attrs(attrs: dict[str, Any]) -> RingDevice:
    """Rebuild the :class:`RingDevice` stored in a dataset's ``device_json`` attribute."""
    if "device_json" not in attrs:
        raise ParameterError("attrs", sorted(attrs)[:5], "must contain 'device_json'")
    return RingDevice.from_dict(json.loads(attrs["device_json"]))
