"""Incremental on-disk checkpoint of an ensemble run (one file per finished chunk).

Layout of a checkpoint directory::

    manifest.json          format tag, task description and its SHA-256 fingerprint
    chunk-<hash>.npz       seeds (int64) and results (float64) of one finished chunk

Every file is written to a temporary name, flushed to disk and renamed (atomic on POSIX), so a
run killed at any moment leaves only complete chunks behind. Results are stored losslessly
(``numpy.savez``), so a resumed run reproduces an uninterrupted one bit for bit. A checkpoint
made for another task (other device, parameters, field values, energy, ...) is refused.

Public API
----------
Checkpoint, CheckpointMismatchError, task_fingerprint
"""

from __future__ import annotations

import hashlib
import json
import os
import pickle
from pathlib import Path

import numpy as np

from ringkit._validation import ParameterError

__all__ = ["Checkpoint", "CheckpointMismatchError", "task_fingerprint"]

_FORMAT = "ringkit-ensemble-checkpoint"
_VERSION = 1


class CheckpointMismatchError(ParameterError):
    """The checkpoint on disk belongs to another task; it is never mixed in."""


def _canonical(obj):
    """JSON-able canonical form (arrays hashed, floats exact via repr)."""
    if isinstance(obj, dict):
        return {str(k): _canonical(v) for k, v in sorted(obj.items(), key=lambda kv: str(kv[0]))}
    if isinstance(obj, (list, tuple)):
        return [_canonical(v) for v in obj]
    if isinstance(obj, np.ndarray):
        arr = np.ascontiguousarray(obj)
        digest = hashlib.sha256(arr.tobytes()).hexdigest()
        return {"ndarray": f"{arr.dtype.str}{list(arr.shape)}", "sha256": digest}
    if isinstance(obj, (float, np.floating)):
        return repr(float(obj))
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if obj is None or isinstance(obj, str):
        return obj
    return repr(obj)


def task_fingerprint(task) -> tuple[dict, str]:
    """Description and SHA-256 fingerprint of an ensemble task.

    A task with a ``describe()`` method is described by its (canonicalised) return value;
    otherwise by the SHA-256 of its pickle, which changes with any argument of a
    ``functools.partial`` or field of a dataclass.
    """
    if hasattr(task, "describe"):
        desc = _canonical(task.describe())
    else:
        try:
            blob = pickle.dumps(task, protocol=5)
        except Exception as err:  # any pickling failure is reported the same way
            raise ParameterError("task", task, f"must be picklable ({err})") from err
        desc = {
            "type": f"{type(task).__module__}.{type(task).__qualname__}",
            "pickle_sha256": hashlib.sha256(blob).hexdigest(),
        }
    text = json.dumps(desc, sort_keys=True, separators=(",", ":"))
    return desc, hashlib.sha256(text.encode()).hexdigest()


def _atomic_write(path: Path, write) -> None:
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    with open(tmp, "wb") as fh:
        write(fh)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


class Checkpoint:
    """A checkpoint directory bound to one task fingerprint.

    Parameters
    ----------
    path : str or Path
        Directory (created if missing).
    description : dict
        Task description (stored for readable error messages).
    fingerprint : str
        SHA-256 of the description.

    Raises
    ------
    CheckpointMismatchError
        If the directory holds a checkpoint of another task or format.
    """

    def __init__(self, path, description: dict, fingerprint: str) -> None:
        self.path = Path(path)
        self.description = description
        self.fingerprint = fingerprint
        self.path.mkdir(parents=True, exist_ok=True)
        manifest = self.path / "manifest.json"
        if manifest.exists():
            stored = json.loads(manifest.read_text())
            if stored.get("format") != _FORMAT or stored.get("version") != _VERSION:
                raise CheckpointMismatchError(
                    "checkpoint", str(self.path), f"is not a {_FORMAT} v{_VERSION} directory"
                )
            if stored.get("fingerprint") != fingerprint:
                old = stored.get("description", {})
                diff = sorted(
                    k for k in set(old) | set(description) if old.get(k) != description.get(k)
                )
                raise CheckpointMismatchError(
                    "checkpoint",
                    str(self.path),
                    "was written for a different task or parameter set (differs in: "
                    f"{', '.join(diff) or 'description'}); use another directory",
                )
        else:
            payload = {
                "format": _FORMAT,
                "version": _VERSION,
                "fingerprint": fingerprint,
                "description": description,
            }
            text = json.dumps(payload, indent=1, sort_keys=True).encode()
            _atomic_write(manifest, lambda fh: fh.write(text))

    def load(self) -> dict[int, np.ndarray]:
        """All stored results as ``{seed: result}``."""
        out: dict[int, np.ndarray] = {}
        for f in sorted(self.path.glob("chunk-*.npz")):
            with np.load(f, allow_pickle=False) as z:
                seeds, results = z["seeds"], z["results"]
            for s, r in zip(seeds.tolist(), results, strict=True):
                out[int(s)] = r
        return out

    def save(self, seeds, results) -> Path:
        """Store one finished chunk atomically."""
        seeds = np.asarray(seeds, dtype=np.int64)
        results = np.asarray(results)
        key = hashlib.sha256(seeds.tobytes()).hexdigest()[:16]
        path = self.path / f"chunk-{key}.npz"
        _atomic_write(path, lambda fh: np.savez(fh, seeds=seeds, results=results))
        return path
