"""An XLA option that makes zhat's toggle and sweep loops several times faster on CPU.

XLA's CPU runtime runs the operations of a compiled loop one after another, each at a fixed cost
of tens of nanoseconds. A loop whose body does little work per step (a Metropolis toggle of a
graph: a few hundred numbers read and written) is dominated by that cost. XLA can instead
compile such a loop, whole, into one function: it does so for loops whose body touches fewer
bytes than a threshold (the backend option ``xla_cpu_small_while_loop_byte_threshold``, 1024
bytes by default, too small for a toggle of a 200-node graph). :func:`compile_small_loops`
raises that threshold for the process. Loops that use scatters, sorts or library calls are
never compiled this way (XLA's rule), which is why zhat's toggle loops avoid scatters.

The option is read once, when JAX starts its CPU backend (at the first computation; importing
zhat does not start it), so it must be set before: call :func:`compile_small_loops` at the top
of a script, or put the flag printed by :func:`small_loops_flag` in the ``XLA_FLAGS``
environment variable. It changes how, not what, XLA computes: the tests check that the toggle
samplers make the same draws with and without it. The ``zhat`` command line sets it.

Measured on a 2-core CPU (``benchmarks/network.py``): the tie/no-tie toggle sampler of a
200-node graph with edges, geometrically weighted degree and shared-partner statistics makes
about three times as many toggles per second with the option as without it (1.3 million on one
core), and the network samplers built on it run four to five times as fast.
"""

from __future__ import annotations

import os

__all__ = [
    "DEFAULT_MAX_BYTES",
    "compile_small_loops",
    "merged_flags",
    "small_loops_flag",
    "small_loops_threshold",
]

OPTION = "xla_cpu_small_while_loop_byte_threshold"
EXTRA = "--xla_backend_extra_options="
# a toggle of an n-node graph touches about 150 n bytes (measured at n = 200): enough for some
# thousands of nodes, small enough that a loop over big arrays (which gains from XLA's threads)
# keeps the default runtime
DEFAULT_MAX_BYTES = 1 << 20


def small_loops_flag(max_bytes: int = DEFAULT_MAX_BYTES) -> str:
    """The ``XLA_FLAGS`` entry that compiles loops touching < ``max_bytes`` per step whole."""
    _check_bytes(max_bytes)
    return f"{EXTRA}{OPTION}={max_bytes}"


def merged_flags(flags: str, max_bytes: int = DEFAULT_MAX_BYTES) -> str:
    """``flags`` (an ``XLA_FLAGS`` value) with the threshold set, other options kept.

    The backend options are one ``--xla_backend_extra_options`` entry of comma-separated
    ``key=value`` pairs; pairs already there are kept in it (a second entry is not added).
    """
    _check_bytes(max_bytes)
    kept, pairs = _split_flags(flags)
    pairs[OPTION] = str(max_bytes)
    extra = ",".join(k if v is None else f"{k}={v}" for k, v in pairs.items())
    return " ".join([*kept, EXTRA + extra])


def small_loops_threshold() -> int | None:
    """The threshold this process set in ``XLA_FLAGS`` (None if not set: XLA's 1024 bytes).

    Read from the environment, where JAX's backend read it when it started; code that picks a
    loop layout by it (zhat's toggle samplers) assumes it was set before, as
    :func:`compile_small_loops` ensures.
    """
    text = _split_flags(os.environ.get("XLA_FLAGS", ""))[1].get(OPTION)
    return int(text) if text is not None and text.isdigit() else None


def _split_flags(flags: str) -> tuple[list[str], dict[str, str | None]]:
    """The flags other than the backend options, and the backend options as key → value
    (None for a key given without a value)."""
    kept: list[str] = []
    pairs: dict[str, str | None] = {}
    for token in flags.split():
        if token.startswith(EXTRA):
            for item in filter(None, token[len(EXTRA) :].split(",")):
                key, sep, value = item.partition("=")
                pairs[key] = value if sep else None
        else:
            kept.append(token)
    return kept, pairs


def compile_small_loops(max_bytes: int = DEFAULT_MAX_BYTES) -> None:
    """Let XLA compile each loop whose body touches fewer than ``max_bytes`` bytes per step
    into one function (module docstring). Call it before the first JAX computation.

    :raises RuntimeError: if JAX's backend has already started (the option would have no
        effect); calling it again with the same value is allowed.
    """
    wanted = merged_flags(os.environ.get("XLA_FLAGS", ""), max_bytes)
    if _backend_started():
        if small_loops_threshold() == max_bytes:
            return
        raise RuntimeError(
            "compile_small_loops() must run before JAX's first computation: XLA reads its "
            "options once, when JAX starts its backend, and it has started already. Call it "
            "at the top of the script (after `import zhat` is fine), or start Python with "
            f"XLA_FLAGS='{small_loops_flag(max_bytes)}'."
        )
    os.environ["XLA_FLAGS"] = wanted


def _check_bytes(max_bytes: int) -> None:
    if isinstance(max_bytes, bool) or not isinstance(max_bytes, int) or max_bytes <= 0:
        raise ValueError(f"max_bytes must be a positive whole number of bytes; got {max_bytes!r}.")


def _backend_started() -> bool:
    from jax._src import xla_bridge  # JAX has no public test for this

    return xla_bridge.backends_are_initialized()
