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
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ringkit._version import __version__
from ringkit.study.plan import StudyPlan

__all__ = ["UnitResult", "Checkpoint", "CheckpointMismatch", "FORMAT"]

FORMAT = "ringkit-study-checkpoint/1"


class CheckpointMismatch(ValueError):
    """The output directory holds a checkpoint of a different study."""


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
    """

    uid: str
    conductance: np.ndarray
    n_energies: tuple[int, ...]
    elapsed: float
    info: dict[str, Any] = field(default_factory=dict)


class Checkpoint:
    """Unit files of one study in ``out_dir/checkpoint`` (see the module docstring)."""

    def __init__(self, directory: Path, fingerprint: str) -> None:
        self.directory = directory
        self.units_dir = directory / "units"
        self.fingerprint = fingerprint

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
                manifest = json.loads(manifest_path.read_text())
            except (OSError, ValueError) as err:
                raise CheckpointMismatch(
                    f"{manifest_path}: unreadable checkpoint manifest ({err}); "
                    "use --restart to discard it"
                ) from None
            if manifest.get("format") != FORMAT or manifest.get("fingerprint") != fp:
                raise CheckpointMismatch(
                    f"{Path(out_dir)} holds a checkpoint of a different study "
                    f"({manifest.get('study_name', '?')!r}, other physics parameters); "
                    "choose another --out directory or pass --restart to discard it"
                )
        ckpt = cls(directory, fp)
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
            _atomic_write_bytes(manifest_path, json.dumps(manifest, indent=1).encode())
        return ckpt

    def path(self, uid: str) -> Path:
        return self.units_dir / f"{uid}.npz"

    def done(self) -> set[str]:
        """Ids of the finished units on disk."""
        return {p.stem for p in self.units_dir.glob("*.npz")}

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
                np.savez(
                    fh,
                    conductance=np.asarray(result.conductance, dtype=np.float64),
                    meta=np.array(json.dumps(meta)),
                )
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, self.path(result.uid))
        except BaseException:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            raise

    def load(self, uid: str) -> UnitResult:
        """Read one finished unit; refuses a file of another study."""
        with np.load(self.path(uid), allow_pickle=False) as data:
            meta = json.loads(str(data["meta"]))
            g = np.array(data["conductance"])
        if meta.get("fingerprint") != self.fingerprint or meta.get("uid") != uid:
            raise CheckpointMismatch(f"{self.path(uid)} belongs to another study; use --restart")
        return UnitResult(
            uid=uid,
            conductance=g,
            n_energies=tuple(meta["n_energies"]),
            elapsed=float(meta["elapsed"]),
            info=meta.get("info", {}),
        )


def _atomic_write_bytes(path: Path, data: bytes) -> None:
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
