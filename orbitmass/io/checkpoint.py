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
from pathlib import Path

import emcee
import h5py
import numpy as np

from orbitmass._atomic import array_sha256, atomic_path
from orbitmass.exceptions import InputError, RunFolderError

__all__ = ["save_checkpoint", "load_checkpoint", "backend_from_checkpoint", "CHECKPOINT_NAME"]

CHECKPOINT_NAME = "checkpoint.h5"
_ARRAYS = ("chain", "log_prob", "accepted")


def save_checkpoint(path: Path, backend: emcee.backends.Backend, meta: dict) -> None:
    """Write the backend's chain and random state to ``path`` atomically (each array with its SHA-256)."""
    n = backend.iteration
    arrays = {"chain": backend.chain[:n], "log_prob": backend.log_prob[:n], "accepted": backend.accepted}
    rs = backend.random_state
    with atomic_path(path) as tmp, h5py.File(tmp, "w") as f:
        for name, data in arrays.items():
            f.create_dataset(name, data=data).attrs["sha256"] = array_sha256(data)
        f.attrs["random_state"] = json.dumps([rs[0], np.asarray(rs[1]).tolist(), int(rs[2]), int(rs[3]),
                                              float(rs[4])])
        f.attrs["meta"] = json.dumps(meta)


class _Garbled(Exception):
    """A check of the checkpoint's content failed (message: what)."""


def _random_state(text) -> tuple:
    rs = json.loads(text)
    if not (isinstance(rs, list) and len(rs) == 5 and rs[0] == "MT19937" and isinstance(rs[1], list)
            and len(rs[1]) == 624):
        raise _Garbled("the random state is not a Mersenne-Twister state of 624 words")
    state = (rs[0], np.array(rs[1], dtype=np.int64), rs[2], rs[3], rs[4])
    if state[1].min() < 0 or state[1].max() >= 2**32:
        raise _Garbled("the random state holds words outside 0 .. 2**32 - 1")
    state = (state[0], state[1].astype(np.uint32), int(state[2]), int(state[3]), float(state[4]))
    np.random.RandomState().set_state(state)  # raises on anything else that is malformed
    return state


def _validate(out: dict) -> None:
    chain, log_prob, accepted, meta = out["chain"], out["log_prob"], out["accepted"], out["meta"]
    if chain.ndim != 3 or chain.shape[0] < 1 or chain.shape[1] < 2 or chain.shape[2] < 1:
        raise _Garbled(f"/chain has shape {chain.shape}, expected (steps >= 1, walkers >= 2, parameters >= 1)")
    if not np.issubdtype(chain.dtype, np.floating) or not np.all(np.isfinite(chain)):
        raise _Garbled("/chain holds non-numbers or non-finite values")
    if log_prob.shape != chain.shape[:2]:
        raise _Garbled(f"/log_prob has shape {log_prob.shape}, expected {chain.shape[:2]}")
    if accepted.shape != (chain.shape[1],):
        raise _Garbled(f"/accepted has shape {accepted.shape}, expected ({chain.shape[1]},)")
    if not isinstance(meta, dict):
        raise _Garbled("its metadata is not a JSON object")
    missing = [k for k in ("seed", "data_sha256", "names", "windows") if k not in meta]
    if missing:
        raise _Garbled(f"its metadata lacks {', '.join(missing)}")
    names, windows = meta["names"], meta["windows"]
    if not (isinstance(names, list) and len(names) == chain.shape[2] and all(isinstance(n, str) for n in names)):
        raise _Garbled(f"its parameter names do not match the {chain.shape[2]} columns of /chain")
    if not isinstance(meta["seed"], int) or isinstance(meta["seed"], bool):
        raise _Garbled("its seed is not a whole number")
    if not (isinstance(windows, dict) and all(isinstance(w, list) and len(w) == 2
                                              and all(isinstance(x, (int, float)) for x in w)
                                              for w in windows.values())):
        raise _Garbled("its angle windows are not pairs of numbers")


def load_checkpoint(path: Path) -> dict:
    """Read and check a checkpoint: chain, log_prob, accepted, random_state, meta.

    Raises
    ------
    RunFolderError
        ``path`` is not a file.
    InputError
        The file is not a readable checkpoint (damaged, truncated, edited or
        of another program), naming the file and what is wrong.
    """
    path = Path(path)
    if not path.is_file():
        raise RunFolderError(f"{path}: no checkpoint to resume from; start a new fit instead")
    try:
        with h5py.File(path, "r") as f:
            out = {name: f[name][()] for name in _ARRAYS}
            for name in _ARRAYS:
                recorded = f[name].attrs.get("sha256")
                if recorded is not None and array_sha256(out[name]) != recorded:
                    raise _Garbled(f"/{name} does not match its recorded checksum")
            out["random_state"] = _random_state(f.attrs["random_state"])
            out["meta"] = json.loads(f.attrs["meta"])
        _validate(out)
    except _Garbled as exc:
        raise InputError(f"damaged checkpoint: {exc}; start a new fit instead of resuming", file=str(path)) from None
    except (OSError, KeyError, ValueError, TypeError, IndexError, AttributeError) as exc:
        raise InputError(f"not a readable orbitmass checkpoint ({type(exc).__name__}: {exc}); start a new fit "
                         "instead of resuming", file=str(path)) from None
    return out


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
