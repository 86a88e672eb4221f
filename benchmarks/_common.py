"""Timing and effective-sample-size helpers shared by the benchmarks.

NumPyro's MCMC driver builds and compiles its sampling loop afresh on every call, per chain, so
compilation cannot be paid once in a separate warm-up call. Each phase is therefore timed as a
whole, with its chains run in turn and each waited for (``jax.block_until_ready``), and the time
JAX reports spending in tracing, lowering and XLA compilation (``jax.monitoring`` time spans)
within the phase is subtracted from its wall time (:class:`CompileClock`).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import time
from collections.abc import Callable, Iterator
from typing import Any, NamedTuple

import arviz as az
import jax
import jax.numpy as jnp
import numpy as np
from jax import random

COMPILE_EVENTS = (
    "/jax/core/compile/jaxpr_trace_duration",
    "/jax/core/compile/jaxpr_to_mlir_module_duration",
    "/jax/core/compile/backend_compile_duration",
)


class Budget(NamedTuple):
    chains: int
    warmup: int
    draws: int


class CompileClock:
    """Collects the time spans JAX reports for tracing, lowering and compiling."""

    def __init__(self) -> None:
        self.spans: list[tuple[float, float]] = []

    def record(self, event: str, start: float, end: float, **_: Any) -> None:
        if event in COMPILE_EVENTS:
            self.spans.append((start, end))

    def seconds_between(self, start: float, end: float) -> float:
        """Length of the union of the recorded spans (they nest) within [start, end]."""
        clipped = sorted((max(a, start), min(b, end)) for a, b in self.spans)
        total, covered_to = 0.0, start
        for a, b in clipped:
            a = max(a, covered_to)
            if b > a:
                total += b - a
                covered_to = b
        return total


@contextlib.contextmanager
def listening(clock: CompileClock) -> Iterator[CompileClock]:
    """Register ``clock`` with ``jax.monitoring`` for the duration of the block."""
    jax.monitoring.register_event_time_span_listener(clock.record)
    try:
        yield clock
    finally:
        jax.monitoring.unregister_event_time_span_listener(clock.record)


def chains_in_turn(chain_fn: Callable) -> Callable:
    """A ``chain_method`` for NumPyro's MCMC: chains one after another, each waited for.

    Like ``"sequential"``, but no chain's execution can overlap the compilation of the next,
    so the compile spans subtracted from a phase's wall time contain no sampling.
    """

    def run_all(per_chain: Any) -> Any:
        num = jax.tree.leaves(per_chain)[0].shape[0]
        outs = [
            jax.block_until_ready(chain_fn(jax.tree.map(lambda a, i=i: a[i], per_chain)))
            for i in range(num)
        ]
        return jax.tree.map(lambda *xs: jnp.stack(xs), *outs)

    return run_all


class Run(NamedTuple):
    draws: np.ndarray  # (chains, draws) of the monitored site
    extra: dict[str, np.ndarray]
    warmup_seconds: float
    sampling_wall_seconds: float
    sampling_compile_seconds: float

    @property
    def sampling_seconds(self) -> float:
        """Wall time of the sampling phase without the compilation inside it."""
        return self.sampling_wall_seconds - self.sampling_compile_seconds


def run_timed(
    mcmc: Any,
    key: jax.Array,
    args: tuple,
    clock: CompileClock,
    site: str,
    extra_fields: tuple[str, ...] = (),
    init_params: dict[str, Any] | None = None,
) -> Run:
    """Warmup, then sampling, each timed; ``site``'s draws grouped by chain.

    ``init_params`` (if any) is passed to both phases: NumPyro re-initialises a kernel that
    keeps no ``_sample_fn`` at the start of the sampling phase, and then needs it again.
    """
    key_warmup, key_sample = random.split(key)
    start = time.time()
    mcmc.warmup(key_warmup, *args, init_params=init_params)
    jax.block_until_ready(mcmc.post_warmup_state)
    middle = time.time()
    mcmc.run(key_sample, *args, extra_fields=extra_fields, init_params=init_params)
    samples = jax.block_until_ready(mcmc.get_samples(group_by_chain=True))
    extra = jax.block_until_ready(mcmc.get_extra_fields(group_by_chain=True))
    end = time.time()
    return Run(
        np.asarray(samples[site], np.float64),
        {k: np.asarray(v) for k, v in extra.items()},
        middle - start,
        end - middle,
        clock.seconds_between(middle, end),
    )


def posterior_summary(draws: np.ndarray, name: str = "x") -> dict[str, float]:
    """ArviZ bulk ESS, mean and sd with their MCSE, of (chains, draws) of one scalar."""
    data = {name: np.asarray(draws, np.float64)}
    return {
        "ess_bulk": float(az.ess(data, method="bulk")[name]),
        "mean": float(data[name].mean()),
        "mcse_mean": float(az.mcse(data, method="mean")[name]),
        "sd": float(data[name].std()),
        "mcse_sd": float(az.mcse(data, method="sd")[name]),
    }


def load_average() -> tuple[float, ...]:
    """The system load averages (1, 5, 15 min), or () where the platform has none."""
    try:
        return tuple(round(x, 2) for x in os.getloadavg())
    except OSError:
        return ()


def add_loops_option(parser: argparse.ArgumentParser, extra_help: str = "") -> None:
    """``--loops whole|default``: whether the process calls ``zhat.compile_small_loops()``."""
    parser.add_argument(
        "--loops",
        choices=["whole", "default"],
        default="whole",
        help="whole: zhat.compile_small_loops() first (the default, as the zhat command does); "
        "default: XLA's default loop runtime" + extra_help,
    )


def apply_loops_option(args: argparse.Namespace) -> None:
    """Call ``zhat.compile_small_loops()`` for ``--loops whole``; before any computation."""
    if args.loops == "whole":
        import zhat

        zhat.compile_small_loops()
