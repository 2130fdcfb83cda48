"""netCDF storage of :class:`ringkit.analysis.emulator.AmplitudeEmulator` (xarray, h5netcdf).

The file holds the arrays on named dimensions, the device description and grid as JSON
attributes, the L_phi convention, units and a SHA-256 content hash. Loading checks the format
tag, the hash (a changed file is refused) and, when given, the device and grid: a cache built
for another device or grid is refused with a message naming the first difference.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from ringkit._validation import ParameterError
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY

__all__ = ["to_dataset", "save", "load"]

_DIMS5 = ("mean_free_path", "seed", "eta_index", "temperature")


def to_dataset(emu):
    import xarray as xr

    from ringkit.analysis.emulator import EMULATOR_FORMAT, QUANTITIES

    data = {
        "amplitudes": (_DIMS5 + ("quantity",), emu.amplitudes),
        "thermal_error": (_DIMS5 + ("quantity",), emu.thermal_errors),
        "traces": (_DIMS5 + ("flux_index",), emu.traces),
        "cal_he": (("mean_free_path", "seed", "eta_index", "cal_energy"), emu.cal_he),
        "eta": (("mean_free_path", "eta_index"), emu.etas),
        "l_phi_realised": (("mean_free_path", "eta_index"), emu.l_phi_realised),
        "l_phi_realised_err": (("mean_free_path", "eta_index"), emu.l_phi_realised_err),
    }
    coords = {
        "mean_free_path": emu.mean_free_paths,
        "seed": emu.seeds,
        "temperature": emu.temperatures,
        "quantity": list(QUANTITIES),
    }
    attrs = {
        "format": EMULATOR_FORMAT,
        "device_json": json.dumps(emu.device_dict, sort_keys=True),
        "grid_json": emu.grid.to_json(),
        "info_json": json.dumps(emu.info, sort_keys=True, default=str),
        L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
        "units": (
            "amplitudes, thermal_error, traces, cal_he: e^2/h (spin-degenerate G = 2 e^2/h T); "
            "mean_free_path, l_phi_realised: m; temperature: K; eta: lattice hopping t"
        ),
        "content_sha256": emu.content_hash(),
    }
    ds = xr.Dataset(data, coords=coords, attrs=attrs)
    ds["mean_free_path"].attrs["units"] = "m"
    ds["temperature"].attrs["units"] = "K"
    ds["l_phi_realised"].attrs["units"] = "m"
    return ds


def save(emu, path) -> None:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    to_dataset(emu).to_netcdf(tmp, engine="h5netcdf")
    os.replace(tmp, path)


def load(cls, path, *, device=None, grid=None):
    import xarray as xr

    from ringkit.analysis.emulator import EMULATOR_FORMAT, EmulatorGrid, _diff, device_key

    path = Path(path)
    if not path.exists():
        raise ParameterError("cache_path", str(path), "no such emulator file")
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        ds = ds.load()
    if ds.attrs.get("format") != EMULATOR_FORMAT:
        raise ParameterError(
            "cache_path", str(path), f"is not a ringkit amplitude emulator ({EMULATOR_FORMAT})"
        )
    dev = json.loads(ds.attrs["device_json"])
    g = EmulatorGrid.from_json(ds.attrs["grid_json"])
    if device is not None:
        diff = _diff(device_key(dev), device_key(device))
        if diff:
            raise ParameterError(
                "cache_path", str(path), f"was built for another device ({diff}); use a new path"
            )
    if grid is not None and grid != g:
        diff = _diff(json.loads(g.to_json()), json.loads(grid.to_json()))
        raise ParameterError(
            "cache_path", str(path), f"was built on another grid ({diff}); use a new path"
        )
    emu = cls(
        device=dev,
        grid=g,
        etas=ds["eta"].values,
        amplitudes=ds["amplitudes"].values,
        thermal_errors=ds["thermal_error"].values,
        traces=ds["traces"].values,
        cal_he=ds["cal_he"].values,
        info=json.loads(ds.attrs["info_json"]),
    )
    if emu.content_hash() != ds.attrs["content_sha256"]:
        raise ParameterError("cache_path", str(path), "content hash mismatch (file changed)")
    if not np.array_equal(emu.seeds, ds["seed"].values):
        raise ParameterError("cache_path", str(path), "seed axis differs from the grid")
    return emu
