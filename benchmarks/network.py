"""Random graph benchmark: throughput of the toggle samplers on an invented 200-member club.

The network (invented): a club of 200 members in four sections of 50; two members of the same
section are tied with probability 0.08, of different sections with probability 0.012 (fixed
generator seed), about 3% of the 19,900 dyads. The model has the statistics edges,
weighted_degrees(0.5) and weighted_shared_partners(0.5), coefficients (−3.5, 0.3, 0.5).

Part "toggles": Metropolis–Hastings toggles per second of the two simulators ``tie_no_tie`` and
``toggle`` (:mod:`zhat.families.network.toggles`), each

1. zhat, one chain: O(n) per toggle (degrees, S = A A and, for ``tie_no_tie``, the partner
   lists carried and updated),
2. zhat, ``jax.vmap`` over 8 chains (the rate counts the toggles of all chains); the simulators'
   batching rule runs the chains in turn (200 nodes, above ``IN_TURN_NODES``), each the
   single-chain loop,
3. zhat, the same toggle loop vmapped over 8 chains with the state batched (what ``jax.vmap``
   made of the loop before the batching rule: every row read and write a gather or scatter),
4. zhat, 8 chains split over the CPU devices (``jax.pmap``), each device running its chains in
   turn (``lax.map``); with 2 cores this is the use of both,
5. plain reference, one chain: the former implementation (copied below as
   ``plain_simulators``): each toggle scans all dyads to choose a tie, O(n²), and computes
   the shared-partner change statistic from the adjacency matrix, O(n²).

The process calls :func:`zhat.compile_small_loops` first (``--loops whole``, the default, as the
``zhat`` command does), so that XLA compiles each toggle loop whole; the part is also run in a
child process with XLA's default loop runtime (``--loops default``), whose table is printed
first, and the ratios of the two are printed and stored (``toggles_whole_over_default``).

Each is jit-compiled and warmed up first; a call makes ``toggles`` toggles per chain from the
club graph (``plain_toggles`` for the plain reference, which is slow; the rate is per toggle, and
zhat's rate includes computing S = A A at the start of each call) and is waited for with
``jax.block_until_ready``; the best and the median of the repeats are reported. The machine is
shared: the load average is printed, and the speed-ups are ratios measured in the same run.

Part "samplers" (:mod:`_network_samplers`): effective samples per second of
``pseudo_marginal_gibbs``, the approximate exchange algorithm (double Metropolis–Hastings) and
standard pseudo-marginal Metropolis–Hastings on an invented 50-member club, same data, same
estimator, timed without compilation.

    .venv/bin/python benchmarks/network.py [--quick] [--part toggles|samplers] [--loops default]

``--quick`` makes fewer toggles per call and fewer repeats; ``--part`` runs one part only.
Output: a table and, as the last line, one JSON object with every figure.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics as stats_lib
import subprocess
import sys
import time
from typing import Any

import numpyro

numpyro.set_host_device_count(2)
numpyro.enable_x64()

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402
from jax import lax  # noqa: E402
from jax.scipy.special import ndtr  # noqa: E402

import _network_samplers as samplers_part  # noqa: E402
from _common import add_loops_option, apply_loops_option, load_average  # noqa: E402
from zhat.families import network  # noqa: E402
from zhat.families.network.toggles import run, toggle_moves, toggle_simulators  # noqa: E402
from zhat.model.unnormalized import Transition  # noqa: E402

Array = jax.Array

CLUB_SEED = 7
RUN_SEED = 2026
MEMBERS = 200
SECTIONS = 4
WITHIN, BETWEEN = 0.08, 0.012
COEFFICIENTS = (-3.5, 0.3, 0.5)
SIMULATORS = ("tie_no_tie", "toggle")
SETTINGS = {
    "full": {"toggles": 19_900, "plain_toggles": 1_000, "repeats": 5, "chains": 8},
    "quick": {"toggles": 4_000, "plain_toggles": 200, "repeats": 3, "chains": 8},
}


def club_graph() -> np.ndarray:
    """The invented club network: (200, 200) 0/1, symmetric, empty diagonal."""
    rng = np.random.default_rng(CLUB_SEED)
    section = np.arange(MEMBERS) % SECTIONS
    same = section[:, None] == section[None, :]
    ties = np.triu(rng.random((MEMBERS, MEMBERS)) < np.where(same, WITHIN, BETWEEN), k=1)
    return (ties | ties.T).astype(float)


def club_statistics() -> tuple[network.Statistic, ...]:
    return (network.edges(), network.weighted_degrees(0.5), network.weighted_shared_partners(0.5))


# --- the plain reference: the former O(n²)-per-toggle implementation -----------------------
def plain_simulators(n: int, stats: tuple, toggles: int) -> dict[str, Transition]:
    """The former toggle samplers, kept as the reference: the tie/no-tie proposal chooses its
    dyad by a cumulative sum over all n(n−1)/2 dyads, and every change statistic comes from
    ``change_statistics`` on the adjacency matrix."""
    rows, cols = (jnp.asarray(v) for v in np.triu_indices(n, k=1))
    m_dyads = rows.size

    def flip(a, i, j, accept):
        new = jnp.where(accept, 1.0 - a[i, j], a[i, j])
        return a.at[i, j].set(new).at[j, i].set(new)

    def tie_no_tie(theta, a, z):
        u = ndtr(z)
        upper = a[rows, cols]
        ties = jnp.sum(upper)
        remove = u[0] < 0.5
        count = jnp.where(remove, ties, m_dyads - ties)
        chosen = jnp.where(remove, upper, 1.0 - upper)
        rank = jnp.clip(jnp.floor(u[1] * count), 0.0, jnp.maximum(count - 1.0, 0.0))
        m = jnp.clip(jnp.searchsorted(jnp.cumsum(chosen), rank, side="right"), 0, m_dyads - 1)
        i, j = rows[m], cols[m]
        gain = jnp.dot(theta, network.change_statistics(stats, a, i, j))
        log_ratio = jnp.where(
            remove,
            -gain + jnp.log(ties) - jnp.log(m_dyads - ties + 1.0),
            gain + jnp.log(m_dyads - ties) - jnp.log(ties + 1.0),
        )
        accept = (count > 0) & (jnp.log(u[2]) < log_ratio)
        return flip(a, i, j, accept)

    def toggle(theta, a, z):
        u = ndtr(z)
        m = jnp.clip(jnp.floor(u[0] * m_dyads).astype(jnp.int32), 0, m_dyads - 1)
        i, j = rows[m], cols[m]
        gain = jnp.dot(theta, network.change_statistics(stats, a, i, j))
        log_ratio = jnp.where(a[i, j] > 0, -gain, gain)
        return flip(a, i, j, jnp.log(u[1]) < log_ratio)

    def transition(move, width):
        def step(params, x, noise):
            theta = jnp.asarray(params["coefficients"], jnp.result_type(float))
            a = jnp.asarray(x).reshape(n, n).astype(jnp.result_type(float))
            a = lax.scan(lambda a, z: (move(theta, a, z), None), a, noise)[0]
            return a.reshape(jnp.shape(x)).astype(jnp.result_type(x))

        return Transition(step, lambda x: (toggles, width))

    return {"tie_no_tie": transition(tie_no_tie, 3), "toggle": transition(toggle, 2)}


# --- timing ------------------------------------------------------------------------------
def rates(fn, args: tuple, toggles: int, repeats: int) -> dict[str, Any]:
    """Toggles per second of a jitted call (compiled and run once before the clock)."""
    start = time.perf_counter()
    out = jax.block_until_ready(fn(*args))
    first = time.perf_counter() - start
    seconds = []
    for _ in range(repeats):
        start = time.perf_counter()
        jax.block_until_ready(fn(*args))
        seconds.append(time.perf_counter() - start)
    return {
        "best": toggles / min(seconds),
        "median": toggles / stats_lib.median(seconds),
        "seconds": seconds,
        "first_call_seconds": first,
        "output": out,
    }


def batched_state_simulator(stats: tuple, name: str) -> Any:
    """zhat's toggle loop for one chain, ``(params, x, noise) -> x``, without the simulators'
    batching rule: under ``jax.vmap`` its state is batched (same draws as the simulator)."""
    moves = toggle_moves(MEMBERS, stats, lists=name == "tie_no_tie")
    move = getattr(moves, name)

    def step(params, x, noise):
        theta = jnp.asarray(params["coefficients"], jnp.result_type(float))
        return run(moves, move, theta, moves.init(x), noise).adjacency

    return step


def part_toggles(settings: dict[str, Any]) -> dict[str, Any]:
    """Toggles per second of zhat's samplers (one chain, vmapped chains in turn and with
    batched state, chains over the CPU devices) and of the plain reference (one chain), on the
    club network."""
    a = jnp.asarray(club_graph())
    stats = club_statistics()
    params = {"coefficients": jnp.asarray(COEFFICIENTS)}
    toggles, plain_toggles = settings["toggles"], settings["plain_toggles"]
    chains, repeats = settings["chains"], settings["repeats"]
    devices = jax.local_device_count()
    per_device = chains // devices if chains % devices == 0 else None
    fast = toggle_simulators(MEMBERS, stats, toggles)
    plain = plain_simulators(MEMBERS, stats, plain_toggles)
    key = jax.random.key(RUN_SEED)
    out: dict[str, Any] = {}
    for s, name in enumerate(SIMULATORS):
        step = fast[name].step
        width = fast[name].noise_shape(a)[1]
        k_one, k_many, k_plain = jax.random.split(jax.random.fold_in(key, s), 3)
        z_one = jax.random.normal(k_one, (toggles, width))
        z_many = jax.random.normal(k_many, (chains, toggles, width))
        z_plain = jax.random.normal(k_plain, (plain_toggles, width))
        starts = jnp.broadcast_to(a, (chains, *a.shape))
        single = jax.jit(step)
        vmapped = jax.jit(jax.vmap(step, in_axes=(None, 0, 0)))
        batched = jax.jit(jax.vmap(batched_state_simulator(stats, name), in_axes=(None, 0, 0)))
        row = {
            "one_chain": rates(single, (params, a, z_one), toggles, repeats),
            "vmapped": rates(vmapped, (params, starts, z_many), chains * toggles, repeats),
            "vmapped_batched_state": rates(
                batched, (params, starts, z_many), chains * toggles, repeats
            ),
        }
        if per_device is not None and devices > 1:

            def in_turn(x, z, step=step):
                return lax.map(lambda xz: step(params, *xz), (x, z))

            split = jax.pmap(in_turn)
            shape = (devices, per_device)
            row["over_devices"] = rates(
                split,
                (starts.reshape(*shape, *a.shape), z_many.reshape(*shape, toggles, width)),
                chains * toggles,
                repeats,
            )
        row["plain"] = rates(
            jax.jit(plain[name].step), (params, a, z_plain), plain_toggles, repeats
        )
        final = row["one_chain"].pop("output")
        row["batched_state_equals_vmapped"] = bool(
            jnp.array_equal(row["vmapped"]["output"], row["vmapped_batched_state"]["output"])
        )
        for v in row.values():
            if isinstance(v, dict):
                v.pop("output", None)
        row["final_density"] = float(jnp.sum(final) / (MEMBERS * (MEMBERS - 1)))
        row["one_chain_over_plain"] = row["one_chain"]["best"] / row["plain"]["best"]
        row["vmapped_over_plain"] = row["vmapped"]["best"] / row["plain"]["best"]
        out[name] = row
    return {
        "nodes": MEMBERS,
        "dyads": MEMBERS * (MEMBERS - 1) // 2,
        "club_ties": int(np.sum(np.asarray(a)) // 2),
        "club_density": float(np.sum(np.asarray(a)) / (MEMBERS * (MEMBERS - 1))),
        "statistics": [x.name for x in stats],
        "coefficients": list(COEFFICIENTS),
        "toggles_per_call": toggles,
        "plain_toggles_per_call": plain_toggles,
        "chains": chains,
        "devices": devices,
        "repeats": repeats,
        "simulators": out,
    }


def print_part_toggles(result: dict[str, Any]) -> None:
    print(
        f"(toggles) club of {result['nodes']} members, {result['club_ties']} ties (density "
        f"{result['club_density']:.3f}); statistics {', '.join(result['statistics'])}; "
        f"coefficients {result['coefficients']}"
    )
    print(
        f"  {result['toggles_per_call']:,} toggles per call and chain "
        f"({result['plain_toggles_per_call']:,} for the plain reference); best and median of "
        f"{result['repeats']} warm calls\n"
    )
    labels = {
        "one_chain": "zhat, 1 chain",
        "vmapped": f"zhat, vmap {result['chains']} chains",
        "vmapped_batched_state": "zhat, same, batched state",
        "over_devices": f"zhat, {result['chains']} chains on {result['devices']} devices",
        "plain": "plain reference, 1 chain",
    }
    header = f"{'simulator':<12}{'run':<30}{'toggles/s best':>16}{'median':>14}{'vs plain':>10}"
    print(header)
    for name, row in result["simulators"].items():
        plain = row["plain"]["best"]
        for run_name, label in labels.items():
            if run_name not in row:
                continue
            r = row[run_name]
            print(
                f"{name:<12}{label:<30}{r['best']:>16,.0f}{r['median']:>14,.0f}"
                f"{r['best'] / plain:>9.1f}x"
            )
        print(f"{'':<12}(density after one call from the club graph: {row['final_density']:.3f})")
    print()


def toggles_with_default_loops(quick: bool) -> dict[str, Any]:
    """Part "toggles" run in a child process with XLA's default loop runtime (the option of
    :func:`zhat.compile_small_loops` is read when a process starts JAX, so it takes a process
    of its own); its table is printed here, its JSON returned."""
    command = [sys.executable, __file__, "--part", "toggles", "--loops", "default"]
    env = dict(os.environ)
    env.pop("XLA_FLAGS", None)  # the child sets its own device count
    done = subprocess.run(
        [*command, *(["--quick"] if quick else [])], capture_output=True, text=True, env=env
    )
    if done.returncode != 0:
        raise RuntimeError(f"the toggles part with default loops failed:\n{done.stderr}")
    lines = done.stdout.strip().splitlines()
    print("--- with XLA's default loop runtime (child process) ---")
    print("\n".join(lines[1:-1]))
    print("--- with zhat.compile_small_loops() (this process) ---\n")
    return json.loads(lines[-1])["toggles"]


def print_whole_over_default(ratios: dict[str, dict[str, float]]) -> None:
    print("toggles/s with loops compiled whole / with XLA's default loop runtime (best rounds):")
    for name, row in ratios.items():
        cells = ", ".join(f"{run} {value:.2f}x" for run, value in row.items())
        print(f"  {name}: {cells}")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer toggles and repeats")
    parser.add_argument("--part", choices=["toggles", "samplers"], help="run this part only")
    add_loops_option(
        parser, ". With 'whole' the toggles part is also run with 'default' in a child process"
    )
    args = parser.parse_args(argv)
    apply_loops_option(args)
    mode = "quick" if args.quick else "full"
    settings = SETTINGS[mode]
    load_before = load_average()
    print(
        f"network benchmark ({mode}); jax {jax.__version__}, {jax.device_count()} CPU "
        f"device(s), float64; loops {args.loops}; load average {load_before} "
        f"({os.cpu_count()} cores)\n"
    )
    started = time.time()
    default_loops = None
    if args.loops == "whole" and args.part in (None, "toggles"):
        default_loops = toggles_with_default_loops(args.quick)
    settings = {**settings, "samplers": samplers_part.SETTINGS[mode]}
    # The parts of this benchmark, run in order: (name, run, print).
    parts = [
        ("toggles", part_toggles, print_part_toggles),
        ("samplers", samplers_part.part_samplers, samplers_part.print_part_samplers),
    ]
    if args.part is not None:
        parts = [part for part in parts if part[0] == args.part]
    results: dict[str, Any] = {}
    elapsed: dict[str, float] = {}
    for name, run_part, print_part in parts:
        t = time.time()
        results[name] = run_part(settings)
        elapsed[name] = time.time() - t
        print_part(results[name])
    load_after = load_average()
    print(f"load average after: {load_after}; wall time {time.time() - started:.0f} s")
    if default_loops is not None:
        results["toggles_default_loops"] = default_loops
        results["toggles_whole_over_default"] = {
            name: {
                run: row[run]["best"] / default_loops["simulators"][name][run]["best"]
                for run in ("one_chain", "vmapped", "over_devices")
                if run in row
            }
            for name, row in results["toggles"]["simulators"].items()
        }
        print_whole_over_default(results["toggles_whole_over_default"])
    summary = {
        "benchmark": "network",
        "mode": mode,
        "loops": args.loops,
        "settings": settings,
        "load_average_before": list(load_before),
        "load_average_after": list(load_after),
        "part_seconds": elapsed,
        **results,
    }
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
