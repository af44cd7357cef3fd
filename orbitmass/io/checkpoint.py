"""Checkpoints of a running fit, and resuming from them.

A checkpoint is one HDF5 file (``checkpoint.h5`` in the run folder) holding
the chain so far ``(n_steps, n_walkers, n_dim)``, its log posterior, the
acceptance counts, emcee's random state after the last step, and what is
needed to rebuild the same posterior: the data checksum, the sampled
variable names and the angle-window centres. It is rewritten whole, through a
temporary file and a rename, every ``interval`` seconds, at every
convergence check and when the run stops, so an interrupted write never
leaves a broken checkpoint.

Resuming rebuilds emcee's in-memory backend from the file; the chain then
continues exactly as an uninterrupted run of the same seed would.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import emcee
import h5py
import numpy as np

from orbitmass.exceptions import RunFolderError

__all__ = ["save_checkpoint", "load_checkpoint", "backend_from_checkpoint"]

CHECKPOINT_NAME = "checkpoint.h5"


def save_checkpoint(path: Path, backend: emcee.backends.Backend, meta: dict) -> None:
    """Write the backend's chain and random state to ``path`` atomically."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    os.close(fd)
    try:
        n = backend.iteration
        with h5py.File(tmp, "w") as f:
            f.create_dataset("chain", data=backend.chain[:n])
            f.create_dataset("log_prob", data=backend.log_prob[:n])
            f.create_dataset("accepted", data=backend.accepted)
            rs = backend.random_state
            f.attrs["random_state"] = json.dumps([rs[0], np.asarray(rs[1]).tolist(), int(rs[2]), int(rs[3]),
                                                  float(rs[4])])
            f.attrs["meta"] = json.dumps(meta)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def load_checkpoint(path: Path) -> dict:
    """Read a checkpoint: chain, log_prob, accepted, random_state, meta."""
    path = Path(path)
    if not path.is_file():
        raise RunFolderError(f"{path}: no checkpoint to resume from (run without --resume to start a new fit)")
    try:
        with h5py.File(path, "r") as f:
            rs = json.loads(f.attrs["random_state"])
            return {
                "chain": f["chain"][()],
                "log_prob": f["log_prob"][()],
                "accepted": f["accepted"][()],
                "random_state": (rs[0], np.array(rs[1], dtype=np.uint32), rs[2], rs[3], rs[4]),
                "meta": json.loads(f.attrs["meta"]),
            }
    except (OSError, KeyError, ValueError) as exc:
        raise RunFolderError(f"{path}: cannot read the checkpoint ({exc})") from None


def backend_from_checkpoint(ckpt: dict) -> emcee.backends.Backend:
    """An in-memory emcee backend holding the checkpointed chain, ready to continue."""
    chain = ckpt["chain"]
    n, n_walkers, n_dim = chain.shape
    backend = emcee.backends.Backend()
    backend.reset(n_walkers, n_dim)
    backend.grow(n, None)
    backend.chain[:n] = chain
    backend.log_prob[:n] = ckpt["log_prob"]
    backend.accepted[:] = ckpt["accepted"]
    backend.iteration = n
    backend.random_state = ckpt["random_state"]
    return backend
