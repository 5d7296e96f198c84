"""Crash-safe checkpoints of an emcee run in emcee's own HDF5 layout.

The file is the layout of :class:`emcee.backends.HDFBackend` (group ``mcmc`` with
``chain``, ``log_prob``, ``accepted`` and the attributes ``iteration`` and
``random_state_0..4``), so ``emcee.backends.HDFBackend(path, read_only=True)`` reads it.
teffmc adds the attributes ``teffmc_seed``, ``teffmc_names`` and ``teffmc_sha256``, a
checksum of the chain, log-probabilities and acceptance counts: a checkpoint that was
edited or damaged since it was written is refused instead of silently resumed.

Why not let emcee write the file step by step: it reopens the file at every step, and a
``kill -9`` while HDF5 is writing can leave a file that no longer opens. Here each chunk
of steps is appended to a copy that then atomically replaces the checkpoint
(:func:`os.replace`), so a killed run always leaves the last complete chunk readable.
"""

import hashlib
import json
import os
import shutil

import emcee
import h5py
import numpy as np

from teffmc.errors import ConfigError

__all__ = ["read_checkpoint", "write_checkpoint", "resume_state", "memory_backend",
           "chain_checksum"]

_GROUP = "mcmc"  # emcee.backends.HDFBackend default group name


def chain_checksum(chain, log_prob, accepted):
    """SHA-256 of the steps (as little-endian float64) and the acceptance counts."""
    h = hashlib.sha256()
    for a in (chain, log_prob, accepted):
        a = np.asarray(a)
        h.update(repr(a.shape).encode())
        h.update(np.ascontiguousarray(a, "<f8").tobytes())
    return h.hexdigest()


def read_checkpoint(path):
    """Read a checkpoint written by :func:`write_checkpoint`.

    Parameters
    ----------
    path : str or os.PathLike
        The HDF5 file.

    Returns
    -------
    dict or None
        ``None`` when the file does not exist or holds no step; otherwise the keys
        ``chain`` (n_steps, n_walkers, ndim), ``log_prob`` (n_steps, n_walkers),
        ``accepted`` (n_walkers,), ``random_state`` (tuple for
        :meth:`numpy.random.RandomState.set_state`), ``seed`` (int) and ``names`` (list).

    Raises
    ------
    ConfigError
        If the file exists but is not a teffmc checkpoint.
    """
    if not os.path.exists(path):
        return None
    try:
        with h5py.File(path, "r") as f:
            g = f[_GROUP]
            n = int(g.attrs["iteration"])
            if n == 0:
                return None
            rs = [g.attrs[f"random_state_{i}"] for i in range(5)]
            chain, log_prob, accepted = g["chain"][:n], g["log_prob"][:n], g["accepted"][...]
            stored = g.attrs["teffmc_sha256"]
            stored = stored.decode() if isinstance(stored, bytes) else str(stored)
            if chain.shape[0] != n or chain_checksum(chain, log_prob, accepted) != stored:
                raise ConfigError(
                    "checkpoint's chain does not match its checksum (edited or damaged since "
                    "it was written); start afresh without --resume",
                    file=os.fspath(path), key="checkpoint", value=stored[:12])
            return {
                "chain": chain,
                "log_prob": log_prob,
                "accepted": accepted,
                "random_state": (
                    str(rs[0]), np.asarray(rs[1], dtype=np.uint32), int(rs[2]), int(rs[3]),
                    float(rs[4]),
                ),
                "seed": int(g.attrs["teffmc_seed"]),
                "names": list(json.loads(g.attrs["teffmc_names"])),
                "coordinates": _text(g.attrs.get("teffmc_coordinates", "standard")),
            }
    except (OSError, KeyError, ValueError) as exc:
        raise ConfigError(
            f"is not a readable teffmc checkpoint ({exc})", file=os.fspath(path), key="checkpoint"
        ) from exc


def _text(value):
    return value.decode() if isinstance(value, bytes) else str(value)


def write_checkpoint(path, chain, log_prob, accepted, random_state, *, n_saved, seed, names,
                     coordinates="standard"):
    """Append the steps ``chain[n_saved:]`` to the checkpoint, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        The HDF5 file; created (with emcee's layout) when ``n_saved`` is 0.
    chain : numpy.ndarray, shape (n_steps, n_walkers, ndim)
        All steps so far.
    log_prob : numpy.ndarray, shape (n_steps, n_walkers)
        Log-probabilities of all steps so far.
    accepted : numpy.ndarray, shape (n_walkers,)
        Number of accepted proposals per walker over all steps.
    random_state : tuple
        State of emcee's :class:`numpy.random.RandomState` after the last step.
    n_saved : int
        Number of steps already in the file.
    seed : int
        The run's seed, stored for the record and checked on resume.
    names : sequence of str
        Parameter names.
    """
    path = os.fspath(path)
    tmp = path + ".tmp"
    n_steps, n_walkers, ndim = chain.shape
    if n_saved > 0:
        shutil.copyfile(path, tmp)
    else:
        if os.path.exists(tmp):
            os.remove(tmp)
        emcee.backends.HDFBackend(tmp).reset(n_walkers, ndim)
    with h5py.File(tmp, "a") as f:
        g = f[_GROUP]
        g["chain"].resize(n_steps, axis=0)
        g["log_prob"].resize(n_steps, axis=0)
        g["chain"][n_saved:] = chain[n_saved:]
        g["log_prob"][n_saved:] = log_prob[n_saved:]
        g["accepted"][:] = accepted
        for i, v in enumerate(random_state):
            g.attrs[f"random_state_{i}"] = v
        g.attrs["iteration"] = n_steps
        g.attrs["teffmc_seed"] = int(seed)
        g.attrs["teffmc_names"] = json.dumps(list(names))
        g.attrs["teffmc_coordinates"] = str(coordinates)
        g.attrs["teffmc_sha256"] = chain_checksum(chain, log_prob, accepted)
    os.replace(tmp, path)


def resume_state(checkpoint, names, n_walkers, seed, coordinates="standard"):
    """Read ``checkpoint`` and check that it belongs to this run.

    Parameters
    ----------
    checkpoint : str or os.PathLike
        The HDF5 file.
    names : sequence of str
        Parameter names of this run.
    n_walkers : int
        Ensemble size of this run.
    seed : int or None
        Seed of this run; ``None`` accepts the stored one.
    coordinates : str
        The sampler coordinates of this run (``SamplerCoordinates.coordinate_tag``); a
        checkpoint without the tag was written in the "standard" ones.

    Returns
    -------
    dict or None
        As :func:`read_checkpoint`; ``None`` when there is nothing to resume.

    Raises
    ------
    ConfigError
        If names, walkers, seed or coordinates differ from the checkpoint's.
    """
    saved = read_checkpoint(checkpoint)
    if saved is None:
        return None
    n_saved_walkers = saved["chain"].shape[1]
    problems = []
    if tuple(saved["names"]) != tuple(names):
        problems.append(("names", f"has parameters {saved['names']} but this run has "
                                  f"{list(names)}", list(names)))
    if n_saved_walkers != n_walkers:
        problems.append(("n_walkers", f"has {n_saved_walkers} walkers but this run asks for "
                                      f"{n_walkers}", n_walkers))
    if seed is not None and int(seed) != saved["seed"]:
        problems.append(("seed", f"was written with seed {saved['seed']} but this run has "
                                 f"seed {seed}", seed))
    if saved["coordinates"] != coordinates:
        problems.append(("coordinates", f"holds a chain in {saved['coordinates']} sampler "
                                        f"coordinates but this run samples in {coordinates}",
                         coordinates))
    if problems:
        key, message, value = problems[0]
        raise ConfigError(f"checkpoint {message}; start afresh without resume",
                          file=str(checkpoint), key=key, value=value)
    return saved


def memory_backend(saved):
    """Build an emcee in-memory backend holding the steps of a checkpoint.

    Parameters
    ----------
    saved : dict
        As returned by :func:`read_checkpoint`.

    Returns
    -------
    emcee.backends.Backend
    """
    backend = emcee.backends.Backend()
    n, n_walkers, ndim = saved["chain"].shape
    backend.reset(n_walkers, ndim)
    backend.grow(n, None)
    backend.chain[:] = saved["chain"]
    backend.log_prob[:] = saved["log_prob"]
    backend.accepted[:] = saved["accepted"]
    backend.iteration = n
    backend.random_state = saved["random_state"]
    return backend
