"""Running chains in chunks, with a checkpoint after each, so a run can stop and continue.

Every chain starts from ``kernel.init`` (NumPyro's kernel interface) and is advanced by one
compiled function, ``advance(states, n)``: ``n ≤ chunk`` steps of ``kernel.sample`` for every
chain (``lax.map`` over chains, ``lax.scan`` over steps), the remaining steps of the fixed-size
buffer skipped with ``lax.cond``. The number of steps is an argument, not a constant, so warmup
and sampling chunks of any length share one compilation, and the draws cannot depend on where
the chunk boundaries fall: a run stopped and continued gives the draws of a run never stopped.

The checkpoint (``RUN.checkpoint.npz``, next to ``RUN.nc``) is an ``.npz`` archive of our own
layout, read without pickle:

- ``meta``: JSON text — ``format``, ``version``, the run's settings, what the run was started
  from (model and data files with their SHA-256, or the demo), ``done`` (steps per chain so
  far, warmup included), the names of the draws;
- ``state_<i>``: the i-th leaf of the chains' last kernel state (PRNG keys as their key data);
  its tree structure comes from ``kernel.init`` when continuing;
- ``draw_<i>``: the draws so far of the i-th site, shape (chains, draws, ...).

It is written to a temporary file and renamed, so a crash while writing leaves the previous
checkpoint intact; a crash at any other time loses at most the chunk in progress.
"""

from __future__ import annotations

import json
import os
import signal
import sys
from collections.abc import Callable, Mapping
from functools import partial
from pathlib import Path
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax import lax, random
from numpyro.infer.hmc import HMC
from numpyro.infer.mcmc import MCMCKernel
from tqdm import tqdm

import zhat
from zhat.cli.inputs import CommandError

__all__ = [
    "Checkpoint",
    "Interrupted",
    "Job",
    "Result",
    "Settings",
    "checkpoint_path",
    "read_checkpoint",
    "sample",
]

FORMAT, VERSION = "zhat checkpoint", 1


class Job(NamedTuple):
    """A model with its data, ready to sample; ``source`` says how to rebuild it to continue."""

    model: Callable
    estimators: Any
    data: Mapping[str, Any]
    make_sampler: Callable[[Any], MCMCKernel]
    init_params: Any
    source: dict[str, Any]
    title: str
    truth: Mapping[str, Any] | None = None


class Settings(NamedTuple):
    """Chains, warmup and sampling steps per chain, random seed, and steps per checkpoint."""

    chains: int
    warmup: int
    samples: int
    seed: int
    save_every: int


class Checkpoint(NamedTuple):
    meta: dict[str, Any]
    leaves: list[np.ndarray]
    draws: dict[str, np.ndarray]


class Result(NamedTuple):
    samples: dict[str, np.ndarray]
    exposed: Any
    kernel: MCMCKernel
    factors: list
    latent: tuple[str, ...]


class Interrupted(Exception):
    """The run stopped on request after a checkpoint; ``done`` of ``total`` steps per chain."""

    def __init__(self, done: int, total: int, warmup: int) -> None:
        super().__init__(f"stopped after {done} of {total} steps per chain")
        self.done, self.total, self.warmup = done, total, warmup


def checkpoint_path(out: Path) -> Path:
    """``run.nc`` → ``run.checkpoint.npz`` (same folder)."""
    out = Path(out)
    return out.with_name(out.name.removesuffix(".nc") + ".checkpoint.npz")


def _is_key(x: Any) -> bool:
    return jnp.issubdtype(jnp.result_type(x), jax.dtypes.prng_key)


def _write_checkpoint(path: Path, meta: dict, state: Any, draws: dict[str, np.ndarray]) -> None:
    leaves = jax.tree.leaves(state)
    arrays = {"meta": np.asarray(json.dumps({**meta, "draw_names": list(draws)}))}
    for i, leaf in enumerate(leaves):
        arrays[f"state_{i}"] = np.asarray(random.key_data(leaf) if _is_key(leaf) else leaf)
    for i, value in enumerate(draws.values()):
        arrays[f"draw_{i}"] = value
    tmp = path.with_name(path.name + ".tmp")
    with tmp.open("wb") as handle:
        np.savez(handle, **arrays)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(tmp, path)


def read_checkpoint(path: Path) -> Checkpoint:
    """Read a checkpoint written by :func:`sample` (refusing any other file)."""
    try:
        with np.load(path, allow_pickle=False) as stored:
            meta = json.loads(str(stored["meta"]))
            if meta.get("format") != FORMAT:
                raise ValueError("not a checkpoint")
            if meta.get("version") != VERSION:
                raise CommandError(
                    f"{path} was written by another version of zhat (checkpoint version "
                    f"{meta.get('version')}); continue it with that version or start afresh."
                )
            leaves = [stored[f"state_{i}"] for i in range(meta["num_leaves"])]
            draws = {n: stored[f"draw_{i}"] for i, n in enumerate(meta["draw_names"])}
    except CommandError:
        raise
    except Exception:
        raise CommandError(
            f"{path} is not a zhat checkpoint (or is damaged); give the RUN.nc of a stopped run."
        ) from None
    return Checkpoint(meta, leaves, draws)


def _restore(fresh: Any, leaves: list[np.ndarray], path: Path) -> Any:
    """The checkpointed state in the tree structure of a freshly initialised one."""
    template, treedef = jax.tree.flatten(fresh)
    fits = len(template) == len(leaves)
    restored = []
    for old, new in zip(template, leaves, strict=False) if fits else ():
        if _is_key(old):
            restored.append(random.wrap_key_data(jnp.asarray(new), impl=random.key_impl(old)))
            continue
        if np.shape(old) != new.shape or jnp.result_type(old) != new.dtype:
            fits = False
            break
        restored.append(jnp.asarray(new))
    if not fits:
        raise CommandError(
            f"the sampler state in {path} does not fit this model and sampler (changed since "
            "the run started?); restore them, or start over with `zhat fit ... --replace`."
        )
    return jax.tree.unflatten(treedef, restored)


class _StopOnSignal:
    """First Ctrl-C: finish the chunk in progress, save, stop. Second: stop at once."""

    def __init__(self) -> None:
        self.asked = False

    def __enter__(self) -> _StopOnSignal:
        self.previous = signal.signal(signal.SIGINT, self._handle)
        return self

    def __exit__(self, *exc: Any) -> None:
        signal.signal(signal.SIGINT, self.previous)

    def _handle(self, signum: int, frame: Any) -> None:
        if self.asked:
            raise KeyboardInterrupt
        self.asked = True
        print(
            "\nStopping after the chunk in progress, then saving (Ctrl-C again stops at once "
            "and loses that chunk).",
            file=sys.stderr,
            flush=True,
        )


def _advance_fn(kernel: MCMCKernel, data: Mapping[str, Any], chunk: int, drop: set[str]):
    """``advance(states, n) -> (states, draws)`` for stacked chain states, compiled once."""
    postprocess = kernel.postprocess_fn((), data)
    field = kernel.sample_field

    def collect(state: Any) -> dict[str, jax.Array]:
        values = postprocess(getattr(state, field))
        return {k: v for k, v in values.items() if k not in drop}

    def one_chain(state: Any, n: jax.Array) -> tuple[Any, dict[str, jax.Array]]:
        def step(state: Any, i: jax.Array) -> tuple[Any, dict[str, jax.Array]]:
            state = lax.cond(i < n, lambda s: kernel.sample(s, (), data), lambda s: s, state)
            return state, collect(state)

        return lax.scan(step, state, jnp.arange(chunk))

    @jax.jit
    def advance(states: Any, n: jax.Array) -> tuple[Any, dict[str, jax.Array]]:
        return lax.map(partial(one_chain, n=n), states)

    return advance


def _chunks(done: int, warmup: int, total: int, size: int) -> list[int]:
    """Step counts of the chunks still to run; no chunk straddles the end of warmup."""
    out = []
    while done < total:
        end = warmup if done < warmup else total
        n = min(size, end - done)
        out.append(n)
        done += n
    return out


def sample(
    job: Job,
    settings: Settings,
    checkpoint: Path,
    *,
    resume: Checkpoint | None = None,
    stop_after: int | None = None,
    kill_after: int | None = None,
    progress: bool = True,
) -> Result:
    """Run (or continue) the chains of ``job``, checkpointing after every chunk.

    :param stop_after: test hook: after this many chunks, send this process SIGINT (the same
        path as a user's Ctrl-C).
    :param kill_after: test hook: after this many chunks, kill this process (SIGKILL), as a
        crash would.
    :param progress: show a progress bar when the error stream is a terminal.
    :raises Interrupted: when stopped by Ctrl-C, after the checkpoint is saved.
    """
    data = dict(job.data)
    exposed = zhat.expose(job.model, job.estimators)
    try:
        factors = exposed.describe(**data)
        kernel = job.make_sampler(exposed)
    except Exception as error:  # the user's model or sampler failing on the data
        raise CommandError(
            f"the model failed on the data ({type(error).__name__}: {error}); check the model "
            "and that each data array has the shape and type it expects."
        ) from None
    if not isinstance(kernel, MCMCKernel):
        raise CommandError(
            f"`sampler` returned {kernel!r}, not a NumPyro kernel; return e.g. "
            "`zhat.kernels.pseudo_marginal_gibbs(exposed_model)`."
        )
    rough = [f.site for f in factors if not f.estimator.smooth]
    if rough and isinstance(kernel, HMC):
        raise CommandError(
            f"{type(kernel).__name__} would move the noise of the estimators at {rough}, which "
            "are not smooth in (θ, u); use `zhat.kernels.pseudo_marginal_gibbs(exposed_model)`."
        )
    noise = {f.noise_site for f in factors}

    keys = random.split(random.fold_in(random.key(settings.seed), 0), settings.chains)
    states = []
    for key in keys:
        try:
            states.append(kernel.init(key, settings.warmup, job.init_params, (), data))
        except Exception as error:
            raise CommandError(
                f"the sampler could not start ({type(error).__name__}: {error}); check the "
                "model, the data and `init_params`."
            ) from None
    state = jax.tree.map(lambda *xs: jnp.stack(xs), *states)
    latent = tuple(k for k in getattr(states[0], kernel.sample_field) if k not in noise)

    total = settings.warmup + settings.samples
    meta = {
        "format": FORMAT,
        "version": VERSION,
        "settings": settings._asdict(),
        "source": job.source,
        "done": 0,
        "num_leaves": len(jax.tree.leaves(state)),
    }
    draws: dict[str, list[np.ndarray]] = {}
    if resume is not None:
        state = _restore(state, resume.leaves, checkpoint)
        meta["done"] = resume.meta["done"]
        draws = {k: [v] for k, v in resume.draws.items()}

    advance = _advance_fn(kernel, data, settings.save_every, noise)
    plan = _chunks(meta["done"], settings.warmup, total, settings.save_every)
    bar = tqdm(
        total=settings.chains * total,
        initial=settings.chains * meta["done"],
        unit="step",
        desc="compiling",
        disable=None if progress else True,
        file=sys.stderr,
    )
    with _StopOnSignal() as stop, bar:
        for count, n in enumerate(plan, start=1):
            sampling = meta["done"] >= settings.warmup
            phase = "sampling" if sampling else "warmup"
            bar.set_description(f"{phase} (compiling)" if count == 1 else phase)
            state, out = advance(state, jnp.asarray(n, jnp.int32))
            if sampling:
                for name, value in jax.device_get(out).items():
                    draws.setdefault(name, []).append(np.asarray(value)[:, :n])
            meta["done"] += n
            _write_checkpoint(
                checkpoint, meta, state, {k: np.concatenate(v, axis=1) for k, v in draws.items()}
            )
            bar.update(settings.chains * n)
            if stop_after is not None and count == stop_after:
                os.kill(os.getpid(), signal.SIGINT)
            if kill_after is not None and count == kill_after:
                os.kill(os.getpid(), signal.SIGKILL)
            if stop.asked and meta["done"] < total:
                raise Interrupted(meta["done"], total, settings.warmup)
    samples = {k: np.concatenate(v, axis=1) for k, v in draws.items()}
    return Result(samples, exposed, kernel, factors, latent)
