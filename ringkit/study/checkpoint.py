"""Resumable checkpoint of a study run, kept inside the output directory.

Layout (``DIR`` is the ``--out`` directory)::

    DIR/checkpoint/manifest.json        study fingerprint, unit ids, ringkit version, study TOML
    DIR/checkpoint/units/<uid>.npz      one file per finished work unit

A unit file is written to a temporary name, flushed to disk and renamed, so a killed process
never leaves a half-written unit behind; a unit is either finished or absent. A checkpoint is
reused only by a study with the same fingerprint (the physics sections of the study file);
executor, analysis and output settings may change between runs. The checkpoint is kept after
the run finishes, so re-running (e.g. with other figure settings) recomputes nothing.

API
---
UnitResult
    Frozen result of one work unit: ``G[temperature, field]`` in e^2/h plus bookkeeping.
Checkpoint.open(out_dir, plan, *, restart=False) -> Checkpoint
Checkpoint.done() -> set of str; .save(result); .load(uid) -> UnitResult
CheckpointMismatch
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import tempfile
import time
import zipfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ringkit._version import __version__
from ringkit.study.plan import StudyPlan

__all__ = [
    "UnitResult",
    "Checkpoint",
    "CheckpointMismatch",
    "BrokenUnit",
    "FORMAT",
    "atomic_write_bytes",
]

FORMAT = "ringkit-study-checkpoint/1"
_MAX_MANIFEST_BYTES = 64 * 2**20


class CheckpointMismatch(ValueError):
    """The output directory holds a checkpoint of a different study."""


class BrokenUnit(ValueError):
    """A unit file of the checkpoint cannot be used (the message says why, in one line)."""


@dataclass(frozen=True)
class UnitResult:
    """Result of one work unit.

    Attributes
    ----------
    uid : str
        Work-unit id.
    conductance : numpy.ndarray
        ``G[temperature, field]`` in units of e^2/h (spin-degenerate two-terminal G).
    n_energies : tuple of int
        Number of energies used for the thermal average at each temperature.
    elapsed : float
        Wall-clock seconds spent on the unit.
    info : dict
        JSON-able details (number of sites, lattice spacing, number of probes, ...).
    resistance : numpy.ndarray or None
        ``R_ohm[temperature, config, field]`` of the study's ``sweep.contacts`` (ohm), or None.
    """

    uid: str
    conductance: np.ndarray
    n_energies: tuple[int, ...]
    elapsed: float
    info: dict[str, Any] = field(default_factory=dict)
    resistance: np.ndarray | None = None


class Checkpoint:
    """Unit files of one study in ``out_dir/checkpoint`` (see the module docstring)."""

    def __init__(self, directory: Path, fingerprint: str, shape: tuple[int, int] = (1, 1)) -> None:
        self.directory = directory
        self.units_dir = directory / "units"
        self.fingerprint = fingerprint
        self.shape = shape  # (temperatures, field points) of a unit's conductance
        self.n_configs = 0  # contact configurations (sweep.contacts) of a unit's resistance

    @classmethod
    def open(cls, out_dir: str | Path, plan: StudyPlan, *, restart: bool = False) -> Checkpoint:
        """Open (or create) the checkpoint of ``plan`` in ``out_dir``.

        Parameters
        ----------
        out_dir : path
            Output directory of the study (created if needed).
        plan : StudyPlan
            The study being run.
        restart : bool
            Discard an existing checkpoint (of this or another study) first.

        Raises
        ------
        CheckpointMismatch
            ``out_dir`` holds a checkpoint of a study with other physics parameters.
        """
        directory = Path(out_dir) / "checkpoint"
        manifest_path = directory / "manifest.json"
        fp = plan.config.fingerprint
        if restart and directory.exists():
            shutil.rmtree(directory)
        if manifest_path.exists():
            try:
                if manifest_path.stat().st_size > _MAX_MANIFEST_BYTES:
                    raise ValueError("file too large")
                manifest = json.loads(manifest_path.read_text())
                if not isinstance(manifest, dict):
                    raise ValueError("not a JSON object")
            except (OSError, ValueError, RecursionError) as err:
                reason = "nested too deeply" if isinstance(err, RecursionError) else err
                raise CheckpointMismatch(
                    f"{manifest_path}: unreadable checkpoint manifest ({reason}); "
                    "use --restart to discard it"
                ) from None
            if manifest.get("format") != FORMAT or manifest.get("fingerprint") != fp:
                raise CheckpointMismatch(
                    f"{Path(out_dir)} holds a checkpoint of a different study "
                    f"({manifest.get('study_name', '?')!r}, other physics parameters); "
                    "choose another --out directory or pass --restart to discard it"
                )
        ckpt = cls(directory, fp, (len(plan.temperatures), len(plan.field)))
        ckpt.n_configs = len(plan.config["sweep"]["contacts"] or ())
        ckpt.units_dir.mkdir(parents=True, exist_ok=True)
        if not manifest_path.exists():
            manifest = {
                "format": FORMAT,
                "fingerprint": fp,
                "study_name": plan.config["study"]["name"],
                "ringkit_version": __version__,
                "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
                "units": list(plan.uids),
                "study_toml": plan.config.to_toml(),
            }
            atomic_write_bytes(manifest_path, json.dumps(manifest, indent=1).encode())
        return ckpt

    def path(self, uid: str) -> Path:
        return self.units_dir / f"{uid}.npz"

    def done(self) -> set[str]:
        """Ids of the unit files on disk (not yet checked, see :meth:`load_done`)."""
        return {p.stem for p in self.units_dir.glob("*.npz")}

    def load_done(self, uids) -> tuple[dict[str, UnitResult], list[str]]:
        """Read the finished units among ``uids``; broken files are moved aside.

        Returns
        -------
        results : dict of uid -> UnitResult
            Units that read back completely and belong to this study.
        broken : list of str
            One line per unit file that could not be used (file name and reason); the file is
            moved to ``checkpoint/broken/`` and the unit is computed again.
        """
        results: dict[str, UnitResult] = {}
        broken: list[str] = []
        for uid in sorted(self.done() & set(uids)):
            try:
                results[uid] = self.load(uid)
            except BrokenUnit as err:
                broken.append(f"{self.path(uid)}: {err}; it will be computed again")
                self._set_aside(uid)
        return results, broken

    def _set_aside(self, uid: str) -> None:
        target = self.directory / "broken"
        target.mkdir(exist_ok=True)
        with contextlib.suppress(OSError):
            os.replace(self.path(uid), target / f"{uid}.npz")

    def save(self, result: UnitResult) -> None:
        """Write one unit atomically (temporary file, fsync, rename)."""
        meta = {
            "uid": result.uid,
            "fingerprint": self.fingerprint,
            "n_energies": list(result.n_energies),
            "elapsed": result.elapsed,
            "info": result.info,
        }
        fd, tmp = tempfile.mkstemp(dir=self.units_dir, prefix=f".{result.uid}.", suffix=".tmp")
        try:
            with os.fdopen(fd, "wb") as fh:
                arrays = {"conductance": np.asarray(result.conductance, dtype=np.float64)}
                if result.resistance is not None:
                    arrays["resistance"] = np.asarray(result.resistance, dtype=np.float64)
                np.savez(fh, **arrays, meta=np.array(json.dumps(meta)))
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, self.path(result.uid))
        except BaseException:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            raise

    def load(self, uid: str) -> UnitResult:
        """Read one finished unit, checking everything before trusting it.

        The file must be a zip archive with exactly the members written by :meth:`save`:
        ``conductance`` (float64, shape ``(temperatures, field points)`` of this study),
        ``resistance`` when the study has contacts (float64, ``(temperatures, configurations,
        field points)``) and ``meta`` (a JSON text with this study's fingerprint and the unit
        id). Headers are read and checked before any data, so a crafted header (e.g. a 745 GiB
        shape) allocates nothing; no pickled object is ever loaded.

        Raises
        ------
        BrokenUnit
            With a one-line reason (not a zip archive, a missing member, wrong shape, ...).
        """
        path = self.path(uid)
        try:
            with open(path, "rb") as fh:
                magic = fh.read(4)
            if magic != b"PK\x03\x04":
                raise BrokenUnit("not a ringkit unit file (not a zip archive)")
            with zipfile.ZipFile(path) as zf:
                names = set(zf.namelist())
                expected = {"conductance.npy", "meta.npy"}
                if self.n_configs:
                    expected.add("resistance.npy")
                if names != expected:
                    raise BrokenUnit(f"unexpected members {sorted(names)[:4]}")
                g = _read_npy(zf, "conductance.npy", "f8", self.shape)
                r = None
                if self.n_configs:
                    n_t, n_b = self.shape
                    r = _read_npy(zf, "resistance.npy", "f8", (n_t, self.n_configs, n_b))
                text = str(_read_npy(zf, "meta.npy", "U", ())[()])
            meta = json.loads(text)
        except BrokenUnit:
            raise
        except RecursionError:
            raise BrokenUnit("metadata nested too deeply") from None
        except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile, zlib.error) as err:
            raise BrokenUnit(f"unreadable ({type(err).__name__})") from None
        if not isinstance(meta, dict):
            raise BrokenUnit("metadata is not a JSON object")
        if meta.get("fingerprint") != self.fingerprint or meta.get("uid") != uid:
            raise BrokenUnit("belongs to another study or unit")
        n_e = meta.get("n_energies")
        if not (
            isinstance(n_e, list)
            and len(n_e) == self.shape[0]
            and all(isinstance(n, int) and not isinstance(n, bool) and n > 0 for n in n_e)
            and isinstance(meta.get("elapsed"), int | float)
            and isinstance(meta.get("info", {}), dict)
        ):
            raise BrokenUnit("metadata incomplete")
        return UnitResult(
            uid=uid,
            conductance=g,
            n_energies=tuple(n_e),
            elapsed=float(meta["elapsed"]),
            info=meta.get("info", {}),
            resistance=r,
        )


_MAX_META_CHARS = 1_000_000


def _read_npy(zf: zipfile.ZipFile, name: str, dtype: str, shape: tuple[int, ...]) -> np.ndarray:
    """One ``.npy`` member with a checked header (kind/dtype and shape) before its data."""
    fmt = np.lib.format
    with zf.open(name) as fh:
        version = fmt.read_magic(fh)
        if version == (1, 0):
            shp, fortran, dt = fmt.read_array_header_1_0(fh)
        elif version == (2, 0):
            shp, fortran, dt = fmt.read_array_header_2_0(fh)
        else:
            raise BrokenUnit(f"{name}: unsupported array format {version}")
        if dt.hasobject:
            raise BrokenUnit(f"{name}: holds Python objects (never loaded)")
        if dtype == "U":
            ok = dt.kind == "U" and shp == () and dt.itemsize <= 4 * _MAX_META_CHARS
        else:
            ok = dt == np.dtype(dtype) and tuple(shp) == tuple(shape) and not fortran
        if not ok:
            raise BrokenUnit(
                f"{name}: array {dt.str} {tuple(shp)} instead of the expected "
                f"{dtype} {tuple(shape)}"
            )
        size = dt.itemsize * int(np.prod(shp, dtype=np.int64))
        data = fh.read(size + 1)
    if len(data) != size:
        raise BrokenUnit(f"{name}: truncated or too long")
    return np.frombuffer(data, dtype=dt).reshape(shp).copy()


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (temporary file beside it, fsync, rename).

    On any error (e.g. a full disk, ``OSError(ENOSPC)``) the temporary file is removed and the
    error propagates; an existing ``path`` is left untouched.
    """
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
