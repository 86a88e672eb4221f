"""Ising-lattice benchmark: simulator throughput, and ESS per second of every lattice sampler.

Three parts, all in one run, each sampler on the same data; readable tables per part and, as the
last line, one JSON object with every figure and the goal verdicts.

(a) Simulator throughput on a 256×256 torus, coupling 0.4, zero field: site-updates per second
    of zhat's heat-bath chequerboard sweep (``zhat.families.lattice.gibbs_sweeps``, jitted, noise
    passed in, compilation excluded; the field passed as the one number 0, as the families pass a
    field that is one number) against a NumPy chequerboard heat-bath sweep written here
    as fast as we could make it honestly: int8 spins, the conditional probabilities
    σ(2J·Σ neighbours) precomputed as a 9-entry table (zero field: the neighbour sum takes the
    values −4..4), preallocated buffers, uniforms drawn in advance. Two NumPy forms are timed
    and the faster is the reference: precomputed chequerboard masks with ``np.roll`` neighbour
    sums, and the two sublattices stored as separate (L, L/2) arrays, so that each half-sweep
    touches only the sites it updates. Also reported: both sides with the random numbers drawn
    inside the timed call (zhat: ``jax.random.normal`` in the jitted function; NumPy:
    ``Generator.random`` into a preallocated buffer), zhat with the field given per site (an
    array of N zeros: no threshold list shared by a colour class, so every noise value goes
    through Φ), both on a batch of independent chains at once as the estimators run their
    auxiliary chains (8; zhat: ``gibbs_sweeps`` with the chains on leading axes, and
    ``jax.vmap`` of it; NumPy: the sublattice form on 3-D arrays), and zhat's Swendsen–Wang
    updates per second. Variants are timed in interleaved rounds (the machine is shared); in a
    round a variant is called again and again, each call on the state the last one left, for
    at least 0.2 s (as ``timeit`` repeats a statement; a single call of well under a
    millisecond would be timed with the dispatch and synchronisation of a jitted call, about
    40 µs, and with its noise block pushed out of cache by the variants run before). The
    goal uses each variant's best round (other work only ever slows a call down, as in
    ``timeit``), and the medians are printed beside. A sanity check compares the energy per
    site of both simulators after the rounds with Onsager's infinite-lattice value.

(b) An 8×8 free-boundary Ising lattice, zero field, coupling J ~ Uniform(0, 1); data drawn
    exactly by coupling from the past at J = 0.35 (fixed key). Exact oracle: the posterior of J
    by quadrature on 1000 grid cells with log Z(J) from the numpy transfer matrix of
    ``tests/references/lattice_exact.py``. Samplers, on the same data, from the same start
    (J = the maximum pseudo-likelihood estimate of the coupling with the field at 0):

    1. NUTS on the exact posterior: log Z(J) by a differentiable JAX transfer matrix over the
       2^8 = 256 column states (checked against the numpy oracle on the grid);
    2. ``zhat.kernels.Exchange(model)`` (perfect draws, its default budget of 8192 sweeps);
    3. a hand-written exchange loop: one jitted ``lax.scan``, random walk on logit(J) with the
       step size zhat's Exchange ended its warmup with (chain by chain), a perfect draw by
       ``coupling_from_the_past`` with the same budget, accept/reject;
    4. ``pseudo_marginal_gibbs`` with RandomWalk on θ and each noise move (EllipticalSlice,
       IndependentRefresh, BlockRefresh), and Slice + IndependentRefresh, each with the single
       auxiliary-variable estimator and the annealed multiple auxiliary estimator with 8
       temperatures (perfect draws), except Slice, run with the single estimator only;
    5. standard ``PseudoMarginalMH`` (fresh noise at every proposal) with the same estimators;
    6. (full run) "out of the box": ``pseudo_marginal_gibbs(zhat.expose(model))``, the family's
       default estimator with its default reference point.

    Estimator reference. The auxiliary-variable estimators compare each draw with a reference
    point θ̂. Their default, ``reference="pseudo_likelihood"``, fits the free parameters the
    model does not fix: the model passes no field, so the field is held at 0 and the coupling
    is fitted. (Fitting the field too gave θ̂ with field −0.23 on these data and a spread
    sd(log f̂) ten times larger.) Samplers 4 and 5 (and in (c) both compared samplers) pass that
    point explicitly, ``reference={"field": 0.0, "coupling": <estimate>}``; the spread with
    either is printed, and sampler 6 shows the default.

    Every sampler's posterior mean is compared with the exact one in units of its MCSE.

(c) A 64×64 free lattice (no oracle), data drawn exactly at J = 0.3. The cost of the perfect
    sampler there is measured first (sweeps to coalescence, milliseconds per draw); the budget
    of the perfect draws is twice the largest number of sweeps seen in 16 draws at the maximum
    pseudo-likelihood estimate (a power of two ≥ 64), and the approximate simulator form is used
    instead only if one estimate with fresh noise would take more than 0.1 s. Compared:
    ``pseudo_marginal_gibbs`` (the library's default blocks) vs standard ``PseudoMarginalMH``,
    both with the annealed multiple auxiliary estimator (8 temperatures, the reference as in
    (b)), plus (full run) Exchange and
    DoubleMetropolisHastings (heat-bath sweeps from the data; their number is ten times the
    integrated autocorrelation time of the edge statistic under heat-bath sweeps at the
    estimate, measured) for reference.

Settings. Every MCMC sampler of a part runs the same chains × (warmup + draws) — (b): 2 × (300 +
2500), (c): 2 × (250 + 600) — with the kernels' default tuning (random-walk scales adapt during
warmup only), except Slice in (b), whose steps cost tens of estimator evaluations: it runs
2 × (100 + 200) (ESS per second of a stationary chain does not depend on run length). The
hand-written loop has no adaptation of its own (it copies zhat's step) and runs the same warmup
length with that step. ESS is ArviZ's bulk ESS of J over all chains; MCSE is ArviZ's MCSE of
the mean. The pseudo-marginal chains stick now and then, so short runs overestimate their ESS
(in a pilot, 2 × 1000 draws gave two to three times the ESS per draw of 4 × 4000): the draws
are as many as the 15-minute budget allows. With the loops compiled whole
(:func:`zhat.compile_small_loops`) a draw costs well under a millisecond and a sampling phase
of (b) takes 1–3 s, the order of the fixed cost of starting a run: the ESS-per-second ratios of
(b) and (c) are then less precise than with ``--loops default``. (Runs four times as long were
tried: one chain of ``pseudo_marginal_gibbs`` with elliptical slice and the single estimator
then did not finish, with either loop runtime, until the elliptical slice move was given its
evaluation budget; see :mod:`zhat.kernels.elliptical_slice`.)

Timing. As in ``latent_gaussian.py`` (helpers in ``_common.py``): each sampling phase is timed
whole with ``jax.block_until_ready`` and the compile time JAX reports through ``jax.monitoring``
within it is subtracted. Chains run one at a time, and the samplers of a part take turns chain
by chain (chain 1 of every sampler, then chain 2, ...), so slow spells of the shared machine
spread over all samplers instead of hitting one. Seconds are summed over chains. zhat's kernels
expose their step function, so NumPyro's MCMC continues the warmed-up state without a new
``init``; an eager ``init``, measured separately, is printed as "init" for reference.
To keep the run short, JAX's persistent compilation cache is pointed at a temporary directory
(removed at exit): a chain whose program is identical to an earlier chain's loads it instead of
compiling again. This changes only compile time, which is excluded anyway.

    .venv/bin/python benchmarks/lattice.py [--quick] [--part a]

``--quick`` is a smoke run (one chain, short runs, fewer samplers, smaller simulator calls);
``--part a`` runs part (a) alone (about a minute) and reports its goal only. The process first
calls :func:`zhat.compile_small_loops` (XLA compiles small loops whole, as the ``zhat`` command
has it; the hand-written exchange loop of (b) is compiled with it as well as zhat's samplers);
``--loops default`` keeps XLA's default loop runtime instead.
"""

from __future__ import annotations

import argparse
import importlib
import json
import math
import shutil
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any, NamedTuple

import arviz as az
import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist
from jax import lax, random
from jax.scipy.special import logsumexp
from numpyro.handlers import seed, substitute, trace
from numpyro.infer import MCMC, NUTS, init_to_value

import zhat
from _common import (
    Budget,
    CompileClock,
    add_loops_option,
    apply_loops_option,
    listening,
    load_average,
    posterior_summary,
)
from zhat.families import lattice
from zhat.kernels import (
    BlockRefresh,
    DoubleMetropolisHastings,
    EllipticalSlice,
    Exchange,
    IndependentRefresh,
    PseudoMarginalMH,
    RandomWalk,
    Slice,
    pseudo_marginal_gibbs,
)

Array = jax.Array
ROOT = Path(__file__).resolve().parents[1]

# (a)
THROUGHPUT_SIDE = 256
THROUGHPUT_COUPLING = 0.4
# (b)
SMALL_SIDE = 8
SMALL_COUPLING = 0.35
SMALL_BUDGET = 1024  # perfect-sampler budget (sweeps) of the estimators, the library default
EXCHANGE_BUDGET = 8192  # the exchange kernel's default (it draws only the sweeps it uses)
NUM_TEMPERATURES = 8
GRID_CELLS = 1000
NOISE_CHECKS = 400
# (c)
LARGE_SIDE = 64
LARGE_COUPLING = 0.3
LARGE_DATA_BUDGET = 4096
COALESCENCE_DRAWS = 16
PERFECT_SECONDS_LIMIT = 0.1  # per estimate with fresh noise; beyond it use a simulator
DMH_TAU_MULTIPLE = 10

DATA_SEED = 35
RUN_SEED = 2026

GOAL_SIMULATOR = 5.0  # zhat heat bath ≥ 5 × NumPy
GOAL_EXCHANGE = 0.8  # zhat Exchange ≥ 0.8 × hand-written loop
GOAL_PMG_SMALL = 0.5  # best pseudo_marginal_gibbs ≥ 0.5 × Exchange
GOAL_PMG_LARGE = 3.0  # pseudo_marginal_gibbs ≥ 3 × PM-MH on 64×64
GOAL_Z = 4.0  # |posterior mean − exact| ≤ 4 MCSE

SETTINGS = {
    "full": {
        "rounds": 7,
        "round_seconds": 0.2,
        "sweeps_per_call": 20,
        "batch_chains": 8,
        "sw_per_call": 5,
        "small": Budget(2, 300, 2500),
        "small_slice": Budget(2, 100, 200),
        "large": Budget(2, 250, 600),
    },
    "quick": {
        "rounds": 3,
        "round_seconds": 0.05,
        "sweeps_per_call": 10,
        "batch_chains": 4,
        "sw_per_call": 2,
        "small": Budget(1, 150, 300),
        "small_slice": Budget(1, 30, 60),
        "large": Budget(1, 50, 100),
    },
}


def exact_references():
    """The numpy oracle of tests/references (the repository root is not on sys.path)."""
    if str(ROOT) not in sys.path:
        sys.path.insert(0, str(ROOT))
    return importlib.import_module("tests.references.lattice_exact")


def energy_per_site_torus(spins: np.ndarray) -> float:
    """−Σ_edges s_i s_j / N on a torus, spins (L, L)."""
    s = np.asarray(spins, np.float64)
    return float(-(s * np.roll(s, 1, 0) + s * np.roll(s, 1, 1)).sum() / s.size)


# === (a) simulator throughput =====================================================================
class NumpyRollSweep:
    """Chequerboard heat bath with precomputed masks and ``np.roll`` neighbour sums (int8)."""

    def __init__(self, side: int, coupling: float, rng: np.random.Generator) -> None:
        r, c = np.indices((side, side))
        self.masks = ((r + c) % 2 == 0, (r + c) % 2 == 1)
        self.table = (1.0 / (1.0 + np.exp(-2.0 * coupling * np.arange(-4, 5)))).astype(np.float32)
        self.spins = rng.choice(np.array([-1, 1], np.int8), (side, side))
        self.plus = np.ones((side, side), np.int8)
        self.minus = -self.plus
        self.buffer = np.empty((side, side), np.float32)

    def sweep(self, uniform: np.ndarray) -> None:
        """One sweep; ``uniform`` (side, side) float32."""
        s = self.spins
        for mask in self.masks:
            total = np.roll(s, 1, 0) + np.roll(s, -1, 0) + np.roll(s, 1, 1) + np.roll(s, -1, 1)
            total += 4
            np.take(self.table, total, out=self.buffer)
            new = np.where(uniform < self.buffer, self.plus, self.minus)
            np.copyto(s, new, where=mask)

    def state(self) -> np.ndarray:
        return self.spins


class NumpySublatticeSweep:
    """Chequerboard heat bath with the two sublattices as separate (L, L/2) int8 arrays.

    Site (r, c) belongs to sublattice (r + c) mod 2 and is stored at column c // 2 of its row.
    Its up and down neighbours sit at the same stored column of the other sublattice; its left
    and right neighbours at the same column and at column k − 1 (sublattice 0 on even rows,
    sublattice 1 on odd rows) or k + 1 (the other cases), periodic in k. With ``chains``, every
    array has a leading axis of that many independent chains (the same operations, on 3-D
    arrays).
    """

    def __init__(
        self, side: int, coupling: float, rng: np.random.Generator, chains: int | None = None
    ) -> None:
        if side % 2:
            raise ValueError("the sublattice form needs an even side")
        half = side // 2
        lead = () if chains is None else (chains,)
        self.table = (1.0 / (1.0 + np.exp(-2.0 * coupling * np.arange(-4, 5)))).astype(np.float32)
        start = rng.choice(np.array([-1, 1], np.int8), (*lead, side, side))
        self.sides = (
            np.empty((*lead, side, half), np.int8),
            np.empty((*lead, side, half), np.int8),
        )
        for r in range(side):
            self.sides[0][..., r, :] = start[..., r, r % 2 :: 2]
            self.sides[1][..., r, :] = start[..., r, 1 - r % 2 :: 2]
        self.total = np.empty((*lead, side, half), np.int8)
        self.prob = np.empty((*lead, side, half), np.float32)
        self.up = np.empty((*lead, side, half), bool)

    def _neighbour_sum(self, other: np.ndarray, side: int) -> np.ndarray:
        t = self.total
        t[..., 1:, :] = other[..., :-1, :]
        t[..., 0, :] = other[..., -1, :]
        t[..., :-1, :] += other[..., 1:, :]
        t[..., -1, :] += other[..., 0, :]
        t += other
        even, odd = slice(0, None, 2), slice(1, None, 2)
        left, right = (even, odd) if side == 0 else (odd, even)
        t[..., left, 1:] += other[..., left, :-1]
        t[..., left, 0] += other[..., left, -1]
        t[..., right, :-1] += other[..., right, 1:]
        t[..., right, -1] += other[..., right, 0]
        return t

    def sweep(self, uniform: np.ndarray) -> None:
        """One sweep; ``uniform`` (2, [chains,] side, side/2) float32."""
        for side in (0, 1):
            mine, other = self.sides[side], self.sides[1 - side]
            total = self._neighbour_sum(other, side)
            total += 4
            np.take(self.table, total, out=self.prob)
            np.less(uniform[side], self.prob, out=self.up)
            np.multiply(self.up, 2, out=mine, casting="unsafe")
            mine -= 1

    def state(self) -> np.ndarray:
        side = self.sides[0].shape[-2]
        s = np.empty((*self.sides[0].shape[:-2], side, side), np.int8)
        for r in range(side):
            s[..., r, r % 2 :: 2] = self.sides[0][..., r, :]
            s[..., r, 1 - r % 2 :: 2] = self.sides[1][..., r, :]
        return s


def part_a(settings: dict[str, Any]) -> dict[str, Any]:
    side, coupling = THROUGHPUT_SIDE, THROUGHPUT_COUPLING
    sweeps, sw_updates, rounds, chains, round_seconds = (
        settings["sweeps_per_call"],
        settings["sw_per_call"],
        settings["rounds"],
        settings["batch_chains"],
        settings["round_seconds"],
    )
    nb = lattice.grid(side, side, "periodic")
    n, e = nb.num_sites, nb.num_edges
    h, h_sites, j = jnp.asarray(0.0), jnp.zeros((n,)), jnp.asarray(coupling)
    key = random.key(RUN_SEED)
    k_noise, k_sw, k_start, k_draw, k_batch = random.split(key, 5)
    rng = np.random.default_rng(RUN_SEED)

    gibbs_given = jax.jit(lambda s, z: lattice.gibbs_sweeps(nb, s, h, j, z))
    gibbs_sites = jax.jit(lambda s, z: lattice.gibbs_sweeps(nb, s, h_sites, j, z))
    # independent chains at once, as the estimators run their auxiliary chains
    gibbs_batched = jax.jit(jax.vmap(lambda s, z: lattice.gibbs_sweeps(nb, s, h, j, z)))
    gibbs_chains = jax.jit(lambda s, z: lattice.gibbs_sweeps(nb, s, h, j, z))  # leading axes
    gibbs_drawn = jax.jit(
        lambda s, k: lattice.gibbs_sweeps(nb, s, h, j, random.normal(k, (sweeps, n)))
    )

    def sw_run(s: Array, z: Array) -> Array:
        step = lambda s, zz: (lattice.swendsen_wang(nb, s, h_sites, j, zz), None)  # noqa: E731
        return lax.scan(step, s, z)[0]

    sw_given = jax.jit(sw_run)
    noise = random.normal(k_noise, (sweeps, n))
    sw_noise = random.normal(k_sw, (sw_updates, e + n))
    # strongly typed like the outputs, so that the second call does not trace again
    start = jnp.where(random.bernoulli(k_start, 0.5, (n,)), 1.0, -1.0).astype(jnp.float32)
    state = {"zhat_given": start, "zhat_sites": start, "zhat_drawn": start, "sw": start}
    batch_noise = random.normal(k_batch, (chains, sweeps, n))
    state["zhat_batched"] = jnp.broadcast_to(start, (chains, n))
    state["zhat_chains"] = state["zhat_batched"]
    roll = NumpyRollSweep(side, coupling, rng)
    sub_given, sub_drawn = (NumpySublatticeSweep(side, coupling, rng) for _ in range(2))
    roll_uniforms = rng.random((sweeps, side, side), dtype=np.float32)
    sub_uniforms = rng.random((sweeps, 2, side, side // 2), dtype=np.float32)
    sub_buffer = np.empty((2, side, side // 2), np.float32)
    sub_batched = NumpySublatticeSweep(side, coupling, rng, chains)
    batch_uniforms = rng.random((sweeps, 2, chains, side, side // 2), dtype=np.float32)

    def run_zhat_given() -> None:
        state["zhat_given"] = jax.block_until_ready(gibbs_given(state["zhat_given"], noise))

    def run_zhat_sites() -> None:
        state["zhat_sites"] = jax.block_until_ready(gibbs_sites(state["zhat_sites"], noise))

    def run_zhat_batched() -> None:
        state["zhat_batched"] = jax.block_until_ready(
            gibbs_batched(state["zhat_batched"], batch_noise)
        )

    def run_zhat_chains() -> None:
        state["zhat_chains"] = jax.block_until_ready(
            gibbs_chains(state["zhat_chains"], batch_noise)
        )

    def run_sub_batched() -> None:
        for t in range(sweeps):
            sub_batched.sweep(batch_uniforms[t])

    draw_count = [0]

    def run_zhat_drawn() -> None:
        draw_count[0] += 1
        k = random.fold_in(k_draw, draw_count[0])
        state["zhat_drawn"] = jax.block_until_ready(gibbs_drawn(state["zhat_drawn"], k))

    def run_sw() -> None:
        state["sw"] = jax.block_until_ready(sw_given(state["sw"], sw_noise))

    def run_roll() -> None:
        for t in range(sweeps):
            roll.sweep(roll_uniforms[t])

    def run_sub_given() -> None:
        for t in range(sweeps):
            sub_given.sweep(sub_uniforms[t])

    def run_sub_drawn() -> None:
        for _ in range(sweeps):
            rng.random(out=sub_buffer, dtype=np.float32)
            sub_drawn.sweep(sub_buffer)

    variants = {
        "zhat_gibbs_noise_given": (run_zhat_given, sweeps * n),
        "zhat_gibbs_noise_given_site_field": (run_zhat_sites, sweeps * n),
        "zhat_gibbs_noise_drawn": (run_zhat_drawn, sweeps * n),
        "numpy_roll_uniforms_given": (run_roll, sweeps * n),
        "numpy_sublattice_uniforms_given": (run_sub_given, sweeps * n),
        "numpy_sublattice_uniforms_drawn": (run_sub_drawn, sweeps * n),
        "zhat_gibbs_chains_noise_given": (run_zhat_chains, chains * sweeps * n),
        "zhat_gibbs_batched_noise_given": (run_zhat_batched, chains * sweeps * n),
        "numpy_sublattice_batched_uniforms_given": (run_sub_batched, chains * sweeps * n),
        "zhat_swendsen_wang": (run_sw, sw_updates),
    }
    clock = CompileClock()
    with listening(clock):
        t0 = time.time()
        for fn, _ in variants.values():  # compile and warm every variant once
            fn()
        compile_seconds = clock.seconds_between(t0, time.time())
    rates: dict[str, list[float]] = {name: [] for name in variants}
    energies: dict[str, list[float]] = {"zhat": [], "numpy": []}
    calls: dict[str, list[int]] = {name: [] for name in variants}
    for _ in range(rounds):
        for name, (fn, units) in variants.items():
            # calls one after the other for at least round_seconds (module docstring, (a))
            count, t = 0, time.perf_counter()
            while True:
                fn()
                count += 1
                elapsed = time.perf_counter() - t
                if elapsed >= round_seconds:
                    break
            rates[name].append(count * units / elapsed)
            calls[name].append(count)
        energies["zhat"].append(
            energy_per_site_torus(np.asarray(state["zhat_drawn"]).reshape(side, side))
        )
        energies["numpy"].append(energy_per_site_torus(sub_drawn.state()))
    # best round of each variant (noise from other work only ever slows a call down), and the
    # median for comparison
    best = {name: float(np.max(r)) for name, r in rates.items()}
    median = {name: float(np.median(r)) for name, r in rates.items()}
    ratio = lambda a, b: best[a] / best[b]  # noqa: E731
    fastest_given = max(
        ("numpy_roll_uniforms_given", "numpy_sublattice_uniforms_given"), key=best.get
    )
    onsager = float(exact_references().onsager_energy_per_site(coupling))
    return {
        "side": side,
        "coupling": coupling,
        "sweeps_per_call": sweeps,
        "batch_chains": chains,
        "swendsen_wang_updates_per_call": sw_updates,
        "rounds": rounds,
        "compile_seconds": compile_seconds,
        "site_updates_per_second": {k: v for k, v in best.items() if k != "zhat_swendsen_wang"},
        "site_updates_per_second_median": {
            k: v for k, v in median.items() if k != "zhat_swendsen_wang"
        },
        "site_updates_per_second_all_rounds": rates,
        "round_seconds": round_seconds,
        "calls_per_round": calls,
        "swendsen_wang_updates_per_second": best["zhat_swendsen_wang"],
        "swendsen_wang_updates_per_second_median": median["zhat_swendsen_wang"],
        "numpy_reference": fastest_given,
        "zhat_over_numpy": ratio("zhat_gibbs_noise_given", fastest_given),
        "zhat_over_numpy_median": median["zhat_gibbs_noise_given"] / median[fastest_given],
        "zhat_over_numpy_roll": ratio("zhat_gibbs_noise_given", "numpy_roll_uniforms_given"),
        "zhat_site_field_over_numpy": ratio("zhat_gibbs_noise_given_site_field", fastest_given),
        "zhat_over_numpy_batched": ratio(
            "zhat_gibbs_chains_noise_given", "numpy_sublattice_batched_uniforms_given"
        ),
        "zhat_over_numpy_batched_median": median["zhat_gibbs_chains_noise_given"]
        / median["numpy_sublattice_batched_uniforms_given"],
        "zhat_vmap_over_numpy_batched": ratio(
            "zhat_gibbs_batched_noise_given", "numpy_sublattice_batched_uniforms_given"
        ),
        "zhat_over_numpy_random_numbers_drawn": ratio(
            "zhat_gibbs_noise_drawn", "numpy_sublattice_uniforms_drawn"
        ),
        "energy_per_site": {k: float(np.mean(v)) for k, v in energies.items()},
        "energy_per_site_onsager_infinite_lattice": onsager,
    }


def print_part_a(a: dict[str, Any]) -> None:
    print(
        f"(a) heat-bath throughput, {a['side']}x{a['side']} torus, coupling {a['coupling']}, "
        f"zero field; {a['sweeps_per_call']} sweeps per call, {a['rounds']} interleaved rounds"
    )
    head = f"  {'simulator':<52} {'best round':>13} {'median':>11}"
    print(head + "   (site-updates per second)")
    print("  " + "-" * (len(head) - 2))
    labels = {
        "zhat_gibbs_noise_given": "zhat gibbs_sweeps (jit; noise passed in)",
        "zhat_gibbs_noise_given_site_field": "zhat gibbs_sweeps, field per site (noise in)",
        "zhat_gibbs_noise_drawn": "zhat gibbs_sweeps + jax.random.normal inside jit",
        "numpy_roll_uniforms_given": "NumPy masks + np.roll (uniforms drawn in advance)",
        "numpy_sublattice_uniforms_given": "NumPy sublattice arrays (uniforms in advance)",
        "numpy_sublattice_uniforms_drawn": "NumPy sublattice arrays + Generator.random",
        "zhat_gibbs_chains_noise_given": (
            f"zhat gibbs_sweeps, {a['batch_chains']} chains as leading axes"
        ),
        "zhat_gibbs_batched_noise_given": f"zhat jax.vmap over {a['batch_chains']} chains",
        "numpy_sublattice_batched_uniforms_given": (
            f"NumPy sublattice, {a['batch_chains']} chains as 3-D arrays"
        ),
    }
    for name, label in labels.items():
        print(
            f"  {label:<52} {a['site_updates_per_second'][name]:>13.3e} "
            f"{a['site_updates_per_second_median'][name]:>11.3e}"
        )
    sw = a["swendsen_wang_updates_per_second"]
    print(
        f"  zhat swendsen_wang: {sw:.1f} updates/s in the best round "
        f"(median {a['swendsen_wang_updates_per_second_median']:.1f}; "
        f"{sw * a['side'] ** 2:.3e} site-updates/s; {a['swendsen_wang_updates_per_call']} "
        "updates per call)"
    )
    en = a["energy_per_site"]
    print(
        f"  sanity: energy per site after the rounds: zhat {en['zhat']:.4f}, NumPy "
        f"{en['numpy']:.4f}, Onsager (infinite lattice) "
        f"{a['energy_per_site_onsager_infinite_lattice']:.4f}"
    )
    print(
        f"  zhat / fastest NumPy ({a['numpy_reference']}): {a['zhat_over_numpy']:.2f}x "
        f"(medians: {a['zhat_over_numpy_median']:.2f}x); zhat / NumPy np.roll form: "
        f"{a['zhat_over_numpy_roll']:.2f}x; random numbers drawn inside the call on both "
        f"sides: {a['zhat_over_numpy_random_numbers_drawn']:.2f}x; field per site: "
        f"{a['zhat_site_field_over_numpy']:.2f}x"
    )
    print(
        f"  {a['batch_chains']} chains at once, zhat / NumPy on the same batch: "
        f"{a['zhat_over_numpy_batched']:.2f}x (medians: {a['zhat_over_numpy_batched_median']:.2f}x)"
        f"; with jax.vmap instead of leading axes: {a['zhat_vmap_over_numpy_batched']:.2f}x"
    )


# === shared: models, samplers, chain-by-chain runs ==============================================
def ising_model(nb: lattice.Neighbours) -> Callable:
    def model(y: Array) -> None:
        coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
        numpyro.sample("y", lattice.ising(nb, coupling=coupling), obs=y)

    return model


def perfect_draw(nb: lattice.Neighbours, coupling: float, budget: int, key: Array) -> Array:
    z = random.normal(key, (budget, nb.num_sites))
    s, ok, sweeps = jax.jit(
        lambda z: lattice.coupling_from_the_past(nb, jnp.zeros(()), jnp.asarray(coupling), z)
    )(z)
    if not bool(ok):
        raise RuntimeError(f"the data draw did not coalesce within {budget} sweeps")
    return s.reshape(nb.shape)


def edge_statistic(nb: lattice.Neighbours, s: Array) -> Array:
    edges = jnp.asarray(nb.edges)
    s = jnp.asarray(s).reshape(-1)
    return jnp.sum(s[edges[:, 0]] * s[edges[:, 1]])


def pseudo_likelihood_estimate(nb: lattice.Neighbours, y: Array) -> float:
    """Maximum pseudo-likelihood estimate of the coupling with the field held at 0, as in the
    model: Newton steps on Σ_i log σ(2 s_i J n_i), n_i the neighbour sum (concave in J)."""
    s = np.asarray(y, np.float64).reshape(-1)
    a = 2.0 * s * np.asarray(lattice.neighbour_sum(nb, jnp.asarray(s, jnp.float32)), np.float64)
    coupling = 0.0
    for _ in range(50):
        p = 1.0 / (1.0 + np.exp(-a * coupling))
        grad, hess = float(np.sum(a * (1.0 - p))), float(-np.sum(a * a * p * (1.0 - p)))
        step = grad / hess
        coupling -= step
        if abs(step) < 1e-12:
            break
    return coupling


def joint_pseudo_likelihood_estimate(nb: lattice.Neighbours, y: Array) -> dict[str, float]:
    """What the estimators' default reference is for this model: the model passes no field, so
    the family holds it at 0 and the pseudo-likelihood fits the coupling alone."""
    fit = zhat.estimators.maximum_pseudo_likelihood(lattice.ising(nb, coupling=jnp.asarray(0.0)), y)
    return {k: float(v) for k, v in fit.items()}


def estimate_milliseconds(exposed: Callable, y: Array, coupling: float, key: Array) -> float:
    """Median wall time of one log f̂(θ, u) at fixed noise u (what a θ-move or refresh costs,
    without drawing noise), compiled once first."""
    (info,) = exposed.describe(y)
    noise = random.normal(key, info.noise_shape)

    def once(theta: Array) -> Array:
        values = {"coupling": theta, info.noise_site: noise}
        return trace(substitute(seed(exposed, random.key(0)), values)).get_trace(y)[
            info.estimate_site
        ]["value"]

    fn = jax.jit(once)
    jax.block_until_ready(fn(jnp.asarray(coupling)))
    seconds = []
    for _ in range(20):
        start = time.perf_counter()
        jax.block_until_ready(fn(jnp.asarray(coupling)))
        seconds.append(time.perf_counter() - start)
    return 1e3 * float(np.median(seconds))


def log_estimate_spread(
    key: Array, exposed: Callable, y: Array, coupling: float, num: int
) -> dict[str, Any]:
    """sd of log f̂(θ, u) over ``num`` noise draws at θ, the fraction of failed (−inf) ones."""
    (info,) = exposed.describe(y)

    def log_fhat(noise: Array) -> Array:
        values = {"coupling": jnp.asarray(coupling), info.noise_site: noise}
        model_trace = trace(substitute(seed(exposed, random.key(0)), values)).get_trace(y)
        return model_trace[info.estimate_site]["value"]

    keys = random.split(key, num)
    values = jax.jit(
        lambda ks: lax.map(lambda k: log_fhat(random.normal(k, info.noise_shape)), ks)
    )(keys)
    values = np.asarray(values, np.float64)
    finite = np.isfinite(values)
    return {
        "sd": float(values[finite].std()) if finite.sum() > 1 else float("nan"),
        "failed_fraction": float(1.0 - finite.mean()),
        "noise_shape": list(info.noise_shape),
    }


class Sampler(NamedTuple):
    """One sampler of a part: how to build a one-chain MCMC, or run a chain by hand."""

    label: str
    group: str
    budget: Budget
    make: Callable[[], Any] | None  # -> MCMC with num_chains=1
    init_params: Callable[[int], dict[str, Any] | None]  # chain -> constrained init values
    args: tuple = ()  # the model's arguments
    extra_fields: tuple[str, ...] = ()
    runner: Callable[..., ChainRun] | None = None  # (chain, key, clock, runs so far) -> run


class ChainRun(NamedTuple):
    draws: np.ndarray  # (draws,) of the coupling
    extra: dict[str, np.ndarray]
    warmup_seconds: float
    sampling_wall_seconds: float
    sampling_compile_seconds: float
    post_warmup: Any


def run_mcmc_chain(sampler: Sampler, key: Array, chain: int, clock: CompileClock) -> ChainRun:
    mcmc = sampler.make()
    init = sampler.init_params(chain)
    key_warmup, key_sample = random.split(key)
    start = time.time()
    mcmc.warmup(key_warmup, *sampler.args, init_params=init)
    post_warmup = jax.block_until_ready(mcmc.post_warmup_state)
    middle = time.time()
    mcmc.run(key_sample, *sampler.args, extra_fields=sampler.extra_fields, init_params=init)
    samples = jax.block_until_ready(mcmc.get_samples())
    extra = jax.block_until_ready(mcmc.get_extra_fields())
    end = time.time()
    return ChainRun(
        np.asarray(samples["coupling"], np.float64),
        {k: np.asarray(v) for k, v in extra.items()},
        middle - start,
        end - middle,
        clock.seconds_between(middle, end),
        post_warmup,
    )


def init_seconds(sampler: Sampler, key: Array) -> float | None:
    """Wall time of the kernel's eager ``init`` (which NumPyro repeats in the sampling phase)."""
    if sampler.make is None:
        return None
    kernel = sampler.make().sampler
    jax.block_until_ready(
        kernel.init(key, sampler.budget.warmup, sampler.init_params(0), sampler.args, {})
    )  # once for the compile of its small eager pieces
    if getattr(kernel, "_sample_fn", None) is not None:
        return None  # NumPyro keeps such a kernel between phases: no second init
    start = time.time()
    jax.block_until_ready(
        kernel.init(key, sampler.budget.warmup, sampler.init_params(0), sampler.args, {})
    )
    return time.time() - start


def run_in_turns(
    samplers: dict[str, Sampler], key: Array, clock: CompileClock
) -> dict[str, list[ChainRun]]:
    """Chain c of every sampler, for c = 1, 2, ...; samplers in the order given."""
    runs: dict[str, list[ChainRun]] = {name: [] for name in samplers}
    most = max(s.budget.chains for s in samplers.values())
    for chain in range(most):
        for i, (name, sampler) in enumerate(samplers.items()):
            if chain >= sampler.budget.chains:
                continue
            print(f"  chain {chain + 1}: {sampler.label} ...", file=sys.stderr, flush=True)
            k = random.fold_in(random.fold_in(key, i), chain)
            if sampler.runner is not None:
                runs[name].append(sampler.runner(chain, k, clock, runs))
            else:
                runs[name].append(run_mcmc_chain(sampler, k, chain, clock))
    return runs


def acceptance(extra: dict[str, np.ndarray]) -> dict[str, float]:
    out = {}
    for field, name in (
        ("info.accepted", "acceptance"),
        ("block_states.0.info.accepted", "theta_acceptance"),
        ("block_states.1.info.accepted", "noise_acceptance"),
        ("block_states.1.info.subiter", "noise_slice_evaluations"),
        ("block_states.0.info.num_shrink", "theta_slice_shrinks"),
        ("block_states.0.info.num_expansions", "theta_slice_expansions"),
        ("info.exact", "coalesced_fraction"),
        ("num_steps", "mean_leapfrog_steps"),
        ("diverging", "divergent_fraction"),
    ):
        if field in extra:
            out[name] = float(np.mean(extra[field]))
    return out


def summarize(
    sampler: Sampler, chains: list[ChainRun], exact_mean: float | None, init_s: float | None
) -> dict[str, Any]:
    draws = np.stack([c.draws for c in chains])
    stats = posterior_summary(draws, "coupling")
    seconds = sum(c.sampling_wall_seconds - c.sampling_compile_seconds for c in chains)
    extra = {k: np.concatenate([c.extra[k] for c in chains]) for k in chains[0].extra}
    out = {
        "label": sampler.label,
        "group": sampler.group,
        "chains": int(draws.shape[0]),
        "warmup_per_chain": sampler.budget.warmup,
        "draws_per_chain": int(draws.shape[1]),
        **stats,
        "sampling_seconds": seconds,
        "sampling_wall_seconds": sum(c.sampling_wall_seconds for c in chains),
        "sampling_compile_seconds": sum(c.sampling_compile_seconds for c in chains),
        "warmup_seconds_with_compile": sum(c.warmup_seconds for c in chains),
        "eager_init_seconds_per_chain": init_s,
        "ms_per_draw": 1e3 * seconds / draws.size,
        "ess_per_second": stats["ess_bulk"] / seconds,
        "rhat": float(az.rhat({"coupling": draws})["coupling"]) if draws.shape[0] > 1 else None,
        **acceptance(extra),
    }
    if exact_mean is not None:
        out["z_score"] = (stats["mean"] - exact_mean) / stats["mcse_mean"]
    return out


def print_samplers(results: dict[str, dict[str, Any]], exact: tuple[float, float] | None) -> None:
    head = (
        f"  {'sampler':<44} {'chains x draws':>15} {'ESS':>6} {'s':>7} {'ms/draw':>8} "
        f"{'ESS/s':>7} {'mean ± MCSE':>17}" + (f" {'z':>6}" if exact else "") + "  notes"
    )
    print(head)
    print("  " + "-" * (len(head) - 2))
    for r in results.values():
        notes = []
        for key, fmt in (
            ("acceptance", "acc {:.2f}"),
            ("theta_acceptance", "θ acc {:.2f}"),
            ("noise_acceptance", "u acc {:.2f}"),
            ("noise_slice_evaluations", "u evals {:.1f}"),
            ("theta_slice_shrinks", "θ shrinks {:.1f}"),
            ("coalesced_fraction", "coalesced {:.3f}"),
            ("mean_leapfrog_steps", "leapfrog {:.1f}"),
            ("rhat", "R-hat {:.3f}"),
            ("eager_init_seconds_per_chain", "init {:.2f}s"),
        ):
            if r.get(key) is not None:
                notes.append(fmt.format(r[key]))
        size = f"{r['chains']} x {r['warmup_per_chain']}+{r['draws_per_chain']}"
        line = (
            f"  {r['label']:<44} {size:>15} {r['ess_bulk']:>6.0f} {r['sampling_seconds']:>7.1f} "
            f"{r['ms_per_draw']:>8.2f} {r['ess_per_second']:>7.1f} "
            f"{r['mean']:>8.4f} ± {r['mcse_mean']:.4f}"
        )
        if exact:
            line += f" {r['z_score']:>+6.1f}"
        print(line + "  " + ", ".join(notes))


def exposed_samplers(
    prefix: str,
    label: str,
    exposed: Callable,
    y: Array,
    budgets: tuple[Budget, Budget],
    theta0: float,
    configs: tuple[tuple[str, str], ...],
    key: Array,
) -> dict[str, Sampler]:
    """``pseudo_marginal_gibbs`` configurations and PM-MH (last) on one exposed model.

    ``configs`` are (θ kernel, noise kernel) pairs; ("default", "default") lets
    ``pseudo_marginal_gibbs`` choose; ("PseudoMarginalMH", "") is the standard method.
    """
    theta_kernels = {"RandomWalk": RandomWalk, "Slice": Slice}
    noise_kernels = {
        "EllipticalSlice": EllipticalSlice,
        "IndependentRefresh": IndependentRefresh,
        "BlockRefresh": BlockRefresh,
    }
    (info,) = exposed.describe(y)
    noise0 = random.normal(key, info.noise_shape)
    theta_init = lambda chain: {"coupling": jnp.asarray(theta0)}  # noqa: E731
    joint_init = lambda chain: {"coupling": jnp.asarray(theta0), info.noise_site: noise0}  # noqa: E731
    out = {}
    for theta, noise in configs:
        b = budgets[1] if theta == "Slice" else budgets[0]
        options = dict(num_warmup=b.warmup, num_samples=b.draws, progress_bar=False)
        if theta == "PseudoMarginalMH":
            out[f"pmmh_{prefix}"] = Sampler(
                f"PM-MH {label}",
                "PseudoMarginalMH",
                b,
                lambda options=options: zhat.MCMC(PseudoMarginalMH(exposed), **options),
                joint_init,
                (y,),
                ("info.accepted",),
            )
            continue

        def make(theta=theta, noise=noise, options=options):
            if theta == "default":
                kernel = pseudo_marginal_gibbs(exposed)
            else:
                kernel = pseudo_marginal_gibbs(
                    exposed, theta_kernels[theta](exposed), noise_kernels[noise](exposed)
                )
            return zhat.MCMC(kernel, **options)

        fields = ["block_states.0.info.accepted"] if theta in ("RandomWalk", "default") else []
        if theta == "Slice":
            fields.append("block_states.0.info.num_shrink")
        if noise == "EllipticalSlice":
            fields.append("block_states.1.info.subiter")
        else:
            fields.append("block_states.1.info.accepted")
        if theta == "default":
            text = "default blocks (RandomWalk + IndependentRefresh)"
        elif (theta, noise) == ("RandomWalk", "IndependentRefresh"):
            text = "RandomWalk + IndependentRefresh (default)"
        else:
            text = f"{theta} + {noise}"
        out[f"pmg_{prefix}_{theta}_{noise}"] = Sampler(
            f"PMG {label}: {text}",
            "pseudo_marginal_gibbs",
            b,
            make,
            theta_init,
            (y,),
            tuple(fields),
        )
    return out


# === (b) 8×8 lattice with an exact oracle =========================================================
def transfer_log_z(rows: int, cols: int) -> Callable[[Array], Array]:
    """Differentiable log Z(J) of the zero-field Ising model on a free rows×cols grid.

    Column states a ∈ {−1, 1}^rows (2^rows of them); with V(a) = Σ_r a_r a_{r+1} (edges inside
    a column) and H(a, b) = Σ_r a_r b_r (edges between neighbouring columns),
    Z = 1ᵀ D T D ⋯ T D 1, D = diag(e^{J V}), T = e^{J H} (Kramers & Wannier 1941, Phys. Rev.
    60, 252), evaluated as a log-sum-exp recursion over the columns.
    """
    bits = (np.arange(2**rows)[:, None] >> np.arange(rows)) & 1
    sigma = 2.0 * bits - 1.0
    inside = jnp.asarray((sigma[:, :-1] * sigma[:, 1:]).sum(axis=1))
    between = jnp.asarray(sigma @ sigma.T)

    def log_z(coupling: Array) -> Array:
        factor = jnp.exp(coupling * between)
        first = coupling * inside

        def step(v: Array, _: None) -> tuple[Array, None]:
            top = jnp.max(v)
            return jnp.log(jnp.exp(v - top) @ factor) + top + first, None

        v, _ = lax.scan(step, first, None, length=cols - 1)
        return logsumexp(v)

    return log_z


def exact_model(edge_sum: Array, log_z: Callable[[Array], Array]) -> None:
    """The same posterior with the exact likelihood exp(J t(y)) / Z(J)."""
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
    numpyro.factor("likelihood", coupling * edge_sum - log_z(coupling))


def hand_exchange(nb: lattice.Neighbours, y: Array, budget: int) -> Callable:
    """The exchange algorithm as one jitted scan: what one would script by hand.

    Random walk on z = logit J (the space zhat's kernel moves in), Uniform(0, 1) prior with its
    Jacobian J(1 − J), auxiliary x ~ p(· | J') by coupling from the past driven by a fresh key
    (random numbers only for the sweeps used) within ``budget`` sweeps, accept with
    min{1, π(z') g(x; J) / (π(z) g(x; J'))}; a draw that did not coalesce rejects.
    """
    t_y = edge_statistic(nb, y)

    def log_target(z: Array) -> Array:
        return jax.nn.sigmoid(z) * t_y + jax.nn.log_sigmoid(z) + jax.nn.log_sigmoid(-z)

    def run(key: Array, z0: Array, scale: Array, length: int):
        def step(carry, key):
            z, lp = carry
            k_move, k_aux, k_accept = random.split(key, 3)
            z_new = z + scale * random.normal(k_move, ())
            j_old, j_new = jax.nn.sigmoid(z), jax.nn.sigmoid(z_new)
            x, ok, _ = lattice.coupling_from_the_past(
                nb, jnp.zeros(()), j_new, k_aux, max_sweeps=budget
            )
            lp_new = log_target(z_new)
            log_ratio = lp_new - lp + (j_old - j_new) * edge_statistic(nb, x)
            log_ratio = jnp.where(ok, log_ratio, -jnp.inf)
            accept = jnp.log(random.uniform(k_accept)) < log_ratio
            z, lp = jnp.where(accept, z_new, z), jnp.where(accept, lp_new, lp)
            return (z, lp), (jax.nn.sigmoid(z), accept, ok)

        z0 = jnp.asarray(z0)
        return lax.scan(step, (z0, log_target(z0)), random.split(key, length))

    return jax.jit(run, static_argnums=3)


def hand_runner(loop: Callable, theta0: float, budget: Budget, follow: str) -> Callable:
    def runner(chain: int, key: Array, clock: CompileClock, runs: dict) -> ChainRun:
        carry = runs[follow][chain].post_warmup.carry
        scale = jnp.asarray(
            math.exp(float(jnp.ravel(carry.log_step)[0])) * float(jnp.ravel(carry.scale)[0])
        )
        key_warmup, key_sample = random.split(key)
        z0 = jnp.log(theta0) - jnp.log1p(-theta0)
        start = time.time()
        (z, _), _ = jax.block_until_ready(loop(key_warmup, z0, scale, budget.warmup))
        middle = time.time()
        _, (draws, accepted, ok) = jax.block_until_ready(loop(key_sample, z, scale, budget.draws))
        end = time.time()
        return ChainRun(
            np.asarray(draws, np.float64),
            {"info.accepted": np.asarray(accepted), "info.exact": np.asarray(ok)},
            middle - start,
            end - middle,
            clock.seconds_between(middle, end),
            {"step": float(scale)},
        )

    return runner


def part_b(settings: dict[str, Any], quick: bool, key: Array) -> dict[str, Any]:
    refs = exact_references()
    nb = lattice.grid(SMALL_SIDE, SMALL_SIDE, "free")
    k_data, k_noise, k_init, k_runs, k_spread = random.split(key, 5)
    y = perfect_draw(nb, SMALL_COUPLING, SMALL_BUDGET, k_data)
    t_y = float(edge_statistic(nb, y))
    theta0 = pseudo_likelihood_estimate(nb, y)

    # exact posterior by quadrature on cell midpoints, exact log Z from the numpy oracle
    grid = (np.arange(GRID_CELLS) + 0.5) / GRID_CELLS
    log_z_np = np.array([refs.transfer_matrix_log_z(SMALL_SIDE, SMALL_SIDE, c) for c in grid])
    table = dict(zip(grid.tolist(), log_z_np.tolist(), strict=True))
    post = refs.exact_posterior_on_grid([t_y], lambda th: table[float(th[0])], grid, lambda th: 0.0)
    exact_mean, exact_sd = float(post.mean[0]), float(post.sd[0])
    log_z = transfer_log_z(SMALL_SIDE, SMALL_SIDE)
    log_z_jax = np.asarray(jax.jit(jax.vmap(log_z))(jnp.asarray(grid, jnp.float32)))
    log_z_error = float(np.max(np.abs(log_z_jax - log_z_np)))

    model = ising_model(nb)
    reference = {"field": 0.0, "coupling": theta0}
    exposed, default_exposed = {}, {}
    for name, make in (
        ("single", lambda **kw: zhat.estimators.single_auxiliary(budget=SMALL_BUDGET, **kw)),
        (
            "annealed",
            lambda **kw: zhat.estimators.multiple_auxiliary(
                NUM_TEMPERATURES, budget=SMALL_BUDGET, **kw
            ),
        ),
    ):
        exposed[name] = zhat.expose(model, make(reference=reference))
        default_exposed[name] = zhat.expose(model, make())
    spread = {
        name: log_estimate_spread(random.fold_in(k_spread, i), ex, y, exact_mean, NOISE_CHECKS)
        for i, (name, ex) in enumerate(exposed.items())
    }
    spread_default = {
        name: log_estimate_spread(random.fold_in(k_spread, i), ex, y, exact_mean, NOISE_CHECKS)
        for i, (name, ex) in enumerate(default_exposed.items())
    }
    estimate_ms = {
        name: estimate_milliseconds(ex, y, exact_mean, random.fold_in(k_noise, i))
        for i, (name, ex) in enumerate(exposed.items())
    }

    budget, slice_budget = settings["small"], settings["small_slice"]
    options = dict(num_warmup=budget.warmup, num_samples=budget.draws, progress_bar=False)
    samplers: dict[str, Sampler] = {
        "nuts_exact": Sampler(
            "NUTS, exact likelihood (JAX transfer matrix)",
            "exact",
            budget,
            lambda: MCMC(
                NUTS(exact_model, init_strategy=init_to_value(values={"coupling": theta0})),
                **options,
            ),
            lambda chain: None,
            (jnp.asarray(t_y), log_z),
            ("num_steps", "diverging"),
        ),
        "exchange": Sampler(
            "zhat Exchange (perfect draws)",
            "exchange",
            budget,
            lambda: zhat.MCMC(Exchange(model), **options),
            lambda chain: {"coupling": jnp.asarray(theta0)},
            (y,),
            ("info.accepted", "info.exact"),
        ),
        "hand_exchange": Sampler(
            "hand-written lax.scan exchange (zhat's step)",
            "exchange",
            budget,
            None,
            lambda chain: None,
            runner=hand_runner(hand_exchange(nb, y, EXCHANGE_BUDGET), theta0, budget, "exchange"),
        ),
    }
    if quick:
        configs = {
            "single": (("RandomWalk", "IndependentRefresh"), ("PseudoMarginalMH", "")),
            "annealed": (),
        }
    else:
        configs = {
            "single": (
                ("RandomWalk", "EllipticalSlice"),
                ("RandomWalk", "IndependentRefresh"),
                ("RandomWalk", "BlockRefresh"),
                ("Slice", "IndependentRefresh"),
                ("PseudoMarginalMH", ""),
            ),
            "annealed": (
                ("RandomWalk", "EllipticalSlice"),
                ("RandomWalk", "IndependentRefresh"),
                ("RandomWalk", "BlockRefresh"),
                ("PseudoMarginalMH", ""),
            ),
        }
    labels = {"single": "single aux.", "annealed": f"annealed T={NUM_TEMPERATURES}"}
    for i, (name, ex) in enumerate(exposed.items()):
        samplers.update(
            exposed_samplers(
                name,
                labels[name],
                ex,
                y,
                (budget, slice_budget),
                theta0,
                configs[name],
                random.fold_in(k_init, i),
            )
        )
    if not quick:
        samplers["pmg_out_of_the_box"] = Sampler(
            "PMG out of the box: expose(model), family default",
            "out_of_the_box",
            budget,
            lambda: zhat.MCMC(pseudo_marginal_gibbs(zhat.expose(model)), **options),
            lambda chain: {"coupling": jnp.asarray(theta0)},
            (y,),
            ("block_states.0.info.accepted", "block_states.1.info.accepted"),
        )

    clock = CompileClock()
    with listening(clock):
        runs = run_in_turns(samplers, k_runs, clock)
        init_s = {name: init_seconds(s, random.key(0)) for name, s in samplers.items()}
    results = {
        name: summarize(s, runs[name], exact_mean, init_s[name]) for name, s in samplers.items()
    }
    results["hand_exchange"]["step_sizes"] = [r.post_warmup["step"] for r in runs["hand_exchange"]]
    rate = {name: r["ess_per_second"] for name, r in results.items()}
    pmg = {name: r for name, r in results.items() if r["group"] == "pseudo_marginal_gibbs"}
    best = max(pmg, key=lambda n: pmg[n]["ess_per_second"])
    ranking = sorted(pmg, key=lambda n: -pmg[n]["ess_per_second"])
    # the library's default kernels (RandomWalk + IndependentRefresh) against the other kernel
    # pairs run with the same estimator
    default_kernels = {}
    for prefix in exposed:
        names = [n for n in ranking if n.startswith(f"pmg_{prefix}_")]
        default = f"pmg_{prefix}_RandomWalk_IndependentRefresh"
        if default in names and len(names) > 1:
            default_kernels[prefix] = {
                "ranking": names,
                "rank": names.index(default) + 1,
                "over_best": rate[default] / rate[names[0]],
            }
    z = {name: r["z_score"] for name, r in results.items()}
    draw_rate = lambda n: 1.0 / results[n]["ms_per_draw"]  # noqa: E731
    return {
        "side": SMALL_SIDE,
        "data_coupling": SMALL_COUPLING,
        "data_edge_statistic": t_y,
        "data_magnetisation": float(jnp.sum(y)),
        "pseudo_likelihood_estimate": theta0,
        "joint_pseudo_likelihood_estimate": joint_pseudo_likelihood_estimate(nb, y),
        "estimator_reference": reference,
        "exact_mean": exact_mean,
        "exact_sd": exact_sd,
        "exact_grid_cells": GRID_CELLS,
        "exact_grid_edge_mass": refs.grid_edge_mass(post).tolist(),
        "jax_transfer_matrix_max_abs_error": log_z_error,
        "perfect_budget": SMALL_BUDGET,
        "log_estimate_spread_at_exact_mean": spread,
        "log_estimate_spread_default_reference": spread_default,
        "ms_per_estimate_fixed_noise": estimate_ms,
        "samplers": results,
        "exchange_over_hand": rate["exchange"] / rate["hand_exchange"],
        "exchange_over_hand_draws_per_second": draw_rate("exchange") / draw_rate("hand_exchange"),
        "best_pmg": best,
        "best_pmg_over_exchange": rate[best] / rate["exchange"],
        "pmg_ranking": ranking,
        "default_kernels_by_estimator": default_kernels,
        "default_kernels_best_with_every_estimator": (
            all(v["rank"] == 1 for v in default_kernels.values()) if default_kernels else None
        ),
        "z_scores": z,
        "max_abs_z": float(max(abs(v) for v in z.values())),
    }


# === (c) 64×64 lattice ============================================================================
def coalescence(nb: lattice.Neighbours, coupling: float, budget: int, key: Array, num: int):
    """Sweeps to coalescence and milliseconds per perfect draw (fresh noise) at ``coupling``."""
    draw = jax.jit(
        lambda k: lattice.coupling_from_the_past(
            nb, jnp.zeros(()), jnp.asarray(coupling), random.normal(k, (budget, nb.num_sites))
        )[1:]
    )
    jax.block_until_ready(draw(key))
    sweeps, ok, seconds = [], [], []
    for i in range(num):
        start = time.perf_counter()
        flag, t = jax.block_until_ready(draw(random.fold_in(key, i)))
        seconds.append(time.perf_counter() - start)
        sweeps.append(int(t))
        ok.append(bool(flag))
    return sweeps, ok, 1e3 * float(np.median(seconds))


def estimate_seconds(exposed: Callable, y: Array, coupling: float, key: Array, num: int = 5):
    """Median wall time of one log f̂ with fresh noise (compiled once first)."""
    (info,) = exposed.describe(y)

    def once(k: Array) -> Array:
        values = {
            "coupling": jnp.asarray(coupling),
            info.noise_site: random.normal(k, info.noise_shape),
        }
        return trace(substitute(seed(exposed, random.key(0)), values)).get_trace(y)[
            info.estimate_site
        ]["value"]

    fn = jax.jit(once)
    jax.block_until_ready(fn(key))
    seconds = []
    for i in range(num):
        start = time.perf_counter()
        jax.block_until_ready(fn(random.fold_in(key, i)))
        seconds.append(time.perf_counter() - start)
    return float(np.median(seconds))


def heat_bath_autocorrelation(
    nb: lattice.Neighbours, y: Array, coupling: float, sweeps: int, key: Array
) -> float:
    """Integrated autocorrelation time (in sweeps) of Σ_edges s_i s_j under heat-bath sweeps
    at ``coupling``, started from the data: n / ESS (ArviZ, method "mean")."""
    h, j = jnp.zeros(()), jnp.asarray(coupling)

    def run(key: Array) -> Array:
        def body(s, z):
            s = lattice.heat_bath_sweep(nb, s, h, j, jax.scipy.special.ndtr(z))
            return s, edge_statistic(nb, s)

        noise = random.normal(key, (sweeps, nb.num_sites))
        return lax.scan(body, jnp.asarray(y, jnp.float32).reshape(-1), noise)[1]

    series = np.asarray(jax.jit(run)(key), np.float64)
    return float(sweeps / az.ess(series[None, :], method="mean"))


def reference_samplers(
    model: Callable, y: Array, b: Budget, budget: int, dmh_sweeps: int, theta_init: Callable
) -> dict[str, Sampler]:
    """Exchange and double Metropolis–Hastings on the 64×64 data, for reference."""
    options = dict(num_warmup=b.warmup, num_samples=b.draws, progress_bar=False)
    samplers = {}
    samplers["exchange"] = Sampler(
        f"zhat Exchange (perfect draws, budget {budget})",
        "reference",
        b,
        lambda: zhat.MCMC(Exchange(model, budget=budget), **options),
        theta_init,
        (y,),
        ("info.accepted", "info.exact"),
    )
    samplers["dmh"] = Sampler(
        f"zhat DoubleMetropolisHastings ({dmh_sweeps} heat-bath sweeps)",
        "reference",
        b,
        lambda: zhat.MCMC(DoubleMetropolisHastings(model, sweeps=dmh_sweeps), **options),
        theta_init,
        (y,),
        ("info.accepted",),
    )
    return samplers


def part_c(settings: dict[str, Any], quick: bool, key: Array) -> dict[str, Any]:
    nb = lattice.grid(LARGE_SIDE, LARGE_SIDE, "free")
    k_data, k_coal, k_est, k_init, k_runs, k_tau, k_spread = random.split(key, 7)
    y = perfect_draw(nb, LARGE_COUPLING, LARGE_DATA_BUDGET, k_data)
    theta0 = pseudo_likelihood_estimate(nb, y)
    num_coal = 4 if quick else COALESCENCE_DRAWS
    sweeps_seen, coalesced, ms_default = coalescence(nb, theta0, SMALL_BUDGET, k_coal, num_coal)
    budget = max(64, 2 ** math.ceil(math.log2(2 * max(sweeps_seen))))
    _, _, ms_chosen = coalescence(nb, theta0, budget, k_coal, num_coal)
    tau = heat_bath_autocorrelation(nb, y, theta0, 500 if quick else 2000, k_tau)
    dmh_sweeps = max(1, math.ceil(DMH_TAU_MULTIPLE * tau))

    model = ising_model(nb)
    reference = {"field": 0.0, "coupling": theta0}
    perfect_estimator = zhat.estimators.multiple_auxiliary(
        NUM_TEMPERATURES, budget=budget, reference=reference
    )
    perfect_exposed = zhat.expose(model, perfect_estimator)
    seconds_per_estimate = estimate_seconds(perfect_exposed, y, theta0, k_est)
    use_perfect = seconds_per_estimate <= PERFECT_SECONDS_LIMIT
    if use_perfect:
        estimator, exposed = perfect_estimator, perfect_exposed
    else:
        estimator = zhat.estimators.multiple_auxiliary(
            NUM_TEMPERATURES, sampler="gibbs", sweeps=dmh_sweeps, reference=reference
        )
        exposed = zhat.expose(model, estimator)

    b = settings["large"]
    samplers = exposed_samplers(
        "large",
        f"annealed T={NUM_TEMPERATURES}",
        exposed,
        y,
        (b, b),
        theta0,
        (("default", "default"), ("PseudoMarginalMH", "")),
        k_init,
    )
    if not quick:
        theta_init = lambda chain: {"coupling": jnp.asarray(theta0)}  # noqa: E731
        samplers.update(reference_samplers(model, y, b, budget, dmh_sweeps, theta_init))
    clock = CompileClock()
    with listening(clock):
        runs = run_in_turns(samplers, k_runs, clock)
        init_s = {name: init_seconds(s, random.key(0)) for name, s in samplers.items()}
    results = {name: summarize(s, runs[name], None, init_s[name]) for name, s in samplers.items()}
    pmg, pmmh = results["pmg_large_default_default"], results["pmmh_large"]
    # the estimator's spread one posterior sd either side of the posterior mean (pooled draws)
    pooled = np.concatenate([c.draws for r in runs.values() for c in r])
    points = [float(pooled.mean() - pooled.std()), float(pooled.mean() + pooled.std())]
    num_spread = 4 if quick else 16
    default_exposed = zhat.expose(
        model, zhat.estimators.multiple_auxiliary(NUM_TEMPERATURES, budget=budget)
    )
    spread = {
        "points": points,
        "chosen_reference": [
            log_estimate_spread(random.fold_in(k_spread, i), exposed, y, p, num_spread)
            for i, p in enumerate(points)
        ],
        "default_reference": [
            log_estimate_spread(random.fold_in(k_spread, i), default_exposed, y, p, num_spread)
            for i, p in enumerate(points)
        ],
    }
    return {
        "side": LARGE_SIDE,
        "data_coupling": LARGE_COUPLING,
        "data_edge_statistic": float(edge_statistic(nb, y)),
        "pseudo_likelihood_estimate": theta0,
        "joint_pseudo_likelihood_estimate": joint_pseudo_likelihood_estimate(nb, y),
        "estimator_reference": reference,
        "coalescence_sweeps_at_estimate": sweeps_seen,
        "coalesced_within_1024": coalesced,
        "ms_per_perfect_draw_budget_1024": ms_default,
        "perfect_budget": budget,
        "ms_per_perfect_draw_chosen_budget": ms_chosen,
        "seconds_per_perfect_estimate": seconds_per_estimate,
        "perfect_seconds_limit": PERFECT_SECONDS_LIMIT,
        "estimator": estimator.name,
        "estimator_exact": bool(estimator.unbiased),
        "heat_bath_autocorrelation_sweeps": tau,
        "dmh_sweeps": dmh_sweeps,
        "log_estimate_spread": spread,
        "samplers": results,
        "pmg_over_pmmh": pmg["ess_per_second"] / pmmh["ess_per_second"],
    }


# === report =======================================================================================
def verdict(ok: bool) -> str:
    return "MET" if ok else "NOT MET"


def print_part_b(b: dict[str, Any]) -> None:
    print(
        f"\n(b) {b['side']}x{b['side']} free lattice, zero field, J ~ Uniform(0, 1); data by "
        f"coupling from the past at J = {b['data_coupling']} (edge sum "
        f"{b['data_edge_statistic']:.0f}, magnetisation {b['data_magnetisation']:.0f}); "
        "start at the pseudo-likelihood estimate "
        f"{b['pseudo_likelihood_estimate']:.4f}"
    )
    print(
        f"  exact posterior ({b['exact_grid_cells']} grid cells, numpy transfer matrix): mean "
        f"{b['exact_mean']:.4f}, sd {b['exact_sd']:.4f}; JAX transfer matrix max |log Z error| "
        f"{b['jax_transfer_matrix_max_abs_error']:.1e} (float32)"
    )
    joint = b["joint_pseudo_likelihood_estimate"]
    print(
        "  estimator reference: field 0 (as in the model), coupling at its pseudo-likelihood "
        f"estimate; the default reference (it holds the field the model fixes): field "
        f"{joint['field']:+.4f}, coupling {joint['coupling']:.4f}"
    )
    for name, s in b["log_estimate_spread_at_exact_mean"].items():
        d = b["log_estimate_spread_default_reference"][name]
        print(
            f"  {name} estimator at the exact mean: sd(log f-hat) {s['sd']:.3f} "
            f"(default reference: {d['sd']:.3f}); noise shape {tuple(s['noise_shape'])}; "
            f"failed draws {s['failed_fraction']:.3f}; "
            f"{b['ms_per_estimate_fixed_noise'][name]:.2f} ms per estimate at fixed noise"
        )
    print_samplers(b["samplers"], (b["exact_mean"], b["exact_sd"]))
    steps = ", ".join(f"{s:.3f}" for s in b["samplers"]["hand_exchange"]["step_sizes"])
    print(f"  hand-written loop: random-walk sd on logit J copied from zhat's Exchange: {steps}")


def print_part_c(c: dict[str, Any]) -> None:
    print(
        f"\n(c) {c['side']}x{c['side']} free lattice, data by coupling from the past at "
        f"J = {c['data_coupling']}; pseudo-likelihood estimate "
        f"{c['pseudo_likelihood_estimate']:.4f}"
    )
    print(
        "  perfect sampler at the estimate: sweeps to coalescence "
        f"{c['coalescence_sweeps_at_estimate']}; {c['ms_per_perfect_draw_budget_1024']:.1f} "
        "ms per draw with budget 1024 (noise drawn "
        f"for the whole budget), {c['ms_per_perfect_draw_chosen_budget']:.1f} ms with the chosen "
        f"budget {c['perfect_budget']}"
    )
    mode = "perfect draws" if c["estimator_exact"] else "APPROXIMATE simulator draws"
    print(
        "  one annealed estimate with fresh noise: "
        f"{c['seconds_per_perfect_estimate'] * 1e3:.1f} ms (limit "
        f"{c['perfect_seconds_limit'] * 1e3:.0f} ms) -> {mode}: {c['estimator']}"
    )
    s = c["log_estimate_spread"]
    joint = c["joint_pseudo_likelihood_estimate"]
    chosen = ", ".join(f"{v['sd']:.3f}" for v in s["chosen_reference"])
    default = ", ".join(f"{v['sd']:.3f}" for v in s["default_reference"])
    points = ", ".join(f"{p:.4f}" for p in s["points"])
    print(
        "  estimator reference: field 0, coupling at its pseudo-likelihood estimate; the default "
        f"reference would use field {joint['field']:+.4f}, coupling {joint['coupling']:.4f}"
    )
    print(
        f"  sd(log f-hat) at J = {points} (posterior mean -/+ sd): {chosen} (default reference: "
        f"{default}); noise shape {tuple(s['chosen_reference'][0]['noise_shape'])}"
    )
    print(
        "  heat-bath autocorrelation time of the edge sum "
        f"{c['heat_bath_autocorrelation_sweeps']:.1f} sweeps -> DMH uses {c['dmh_sweeps']} sweeps"
    )
    print_samplers(c["samplers"], None)


def print_goals(a: dict, b: dict, c: dict, goals: dict[str, bool]) -> None:
    print("\ngoals:")
    print(
        f"  (a) zhat heat bath >= {GOAL_SIMULATOR:.0f}x NumPy: {a['zhat_over_numpy']:.2f}x  "
        f"{verdict(goals['a_simulator'])}"
    )
    print(
        f"  (b) zhat Exchange >= {GOAL_EXCHANGE}x hand-written loop (ESS/s): "
        f"{b['exchange_over_hand']:.2f}x  {verdict(goals['b_exchange'])}  (draws/s ratio "
        f"{b['exchange_over_hand_draws_per_second']:.2f}x)"
    )
    best = b["samplers"][b["best_pmg"]]
    print(
        f"  (b) best pseudo_marginal_gibbs >= {GOAL_PMG_SMALL}x Exchange (ESS/s): "
        f"{b['best_pmg_over_exchange']:.2f}x  {verdict(goals['b_pmg'])}  (best: {best['label']}, "
        f"{best['ess_per_second']:.1f} ESS/s vs {b['samplers']['exchange']['ess_per_second']:.1f})"
    )
    print(
        f"  (b) every posterior mean within {GOAL_Z:.0f} MCSE of the exact one: max |z| = "
        f"{b['max_abs_z']:.2f}  {verdict(goals['b_z'])}"
    )
    kernels = b["default_kernels_by_estimator"]
    if not kernels:
        print("  (b) library default kernels vs other kernel pairs: not tested (--quick)")
    else:
        parts = [
            f"rank {v['rank']} of {len(v['ranking'])} with the {name} estimator "
            f"({v['over_best']:.2f}x its best)"
            for name, v in kernels.items()
        ]
        supported = b["default_kernels_best_with_every_estimator"]
        print(
            "  (b) library default kernels for piecewise-constant estimators (RandomWalk + "
            f"IndependentRefresh): {'; '.join(parts)} -> the measurement "
            + ("SUPPORTS the default" if supported else "does NOT support the default")
        )
        single = b["samplers"].get("pmg_single_RandomWalk_IndependentRefresh")
        if single is not None and b["best_pmg"] != "pmg_single_RandomWalk_IndependentRefresh":
            top = b["samplers"][b["best_pmg"]]["ess_per_second"]
            print(
                "      (with the family's default estimator, single aux., the default kernels "
                f"reach {single['ess_per_second'] / top:.2f}x the best configuration)"
            )
    print(
        f"  (c) pseudo_marginal_gibbs >= {GOAL_PMG_LARGE:.0f}x PM-MH (ESS/s): "
        f"{c['pmg_over_pmmh']:.2f}x  {verdict(goals['c_pmg'])}"
    )


def finite_or_none(obj: Any) -> Any:
    """The object with NaN and infinities replaced by None (valid JSON)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: finite_or_none(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [finite_or_none(v) for v in obj]
    if isinstance(obj, np.generic):
        return finite_or_none(obj.item())
    return obj


def finish_part_a(
    a: dict, mode: str, settings: dict, load_before: Any, started: float, elapsed: dict
) -> None:
    """Goal, load and JSON summary of a run of part (a) alone."""
    goal = a["zhat_over_numpy"] >= GOAL_SIMULATOR
    print("\ngoals:")
    print(
        f"  (a) zhat heat bath >= {GOAL_SIMULATOR:.0f}x NumPy: {a['zhat_over_numpy']:.2f}x  "
        f"{verdict(goal)}"
    )
    load_after = load_average()
    total = time.time() - started
    print(f"load average after: {load_after}; wall time {total:.0f} s (a {elapsed['a']:.0f})")
    summary = {
        "benchmark": "lattice",
        "mode": mode,
        "parts": ["a"],
        "settings": {k: (v._asdict() if isinstance(v, Budget) else v) for k, v in settings.items()},
        "load_average_before": list(load_before),
        "load_average_after": list(load_after),
        "total_wall_seconds": total,
        "part_wall_seconds": elapsed,
        "a": a,
        "goals_met": {"a_simulator": goal},
    }
    print(json.dumps(finite_or_none(summary)))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smoke run (about 3 minutes)")
    parser.add_argument(
        "--part", choices=["a"], help="run one part alone (a: simulator throughput)"
    )
    add_loops_option(parser)
    args = parser.parse_args(argv)
    apply_loops_option(args)
    mode = "quick" if args.quick else "full"
    settings = {**SETTINGS[mode], "loops": args.loops}
    cache = tempfile.mkdtemp(prefix="zhat-lattice-bench-")
    jax.config.update("jax_compilation_cache_dir", cache)
    jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.0)
    started = time.time()
    try:
        load_before = load_average()
        print(
            f"lattice benchmark ({mode}); jax {jax.__version__}, numpyro {numpyro.__version__}, "
            f"numpy {np.__version__}, {jax.device_count()} CPU device(s), float32; loops "
            f"{args.loops}"
        )
        print(f"load average before: {load_before} (1, 5, 15 min)\n")
        key_b, key_c = random.split(random.key(DATA_SEED))
        elapsed = {}
        t = time.time()
        a = part_a(settings)
        elapsed["a"] = time.time() - t
        print_part_a(a)
        if args.part == "a":
            return finish_part_a(a, mode, settings, load_before, started, elapsed)
        print("(b) running ...", file=sys.stderr, flush=True)
        t = time.time()
        b = part_b(settings, args.quick, key_b)
        elapsed["b"] = time.time() - t
        print_part_b(b)
        print("(c) running ...", file=sys.stderr, flush=True)
        t = time.time()
        c = part_c(settings, args.quick, key_c)
        elapsed["c"] = time.time() - t
        print_part_c(c)
    finally:
        shutil.rmtree(cache, ignore_errors=True)
    goals = {
        "a_simulator": a["zhat_over_numpy"] >= GOAL_SIMULATOR,
        "b_exchange": b["exchange_over_hand"] >= GOAL_EXCHANGE,
        "b_pmg": b["best_pmg_over_exchange"] >= GOAL_PMG_SMALL,
        "b_z": b["max_abs_z"] <= GOAL_Z,
        "c_pmg": c["pmg_over_pmmh"] >= GOAL_PMG_LARGE,
    }
    print_goals(a, b, c, goals)
    load_after = load_average()
    total = time.time() - started
    print(
        f"load average after: {load_after}; wall time {total:.0f} s (a {elapsed['a']:.0f}, "
        f"b {elapsed['b']:.0f}, c {elapsed['c']:.0f})"
    )
    summary = {
        "benchmark": "lattice",
        "mode": mode,
        "settings": {k: (v._asdict() if isinstance(v, Budget) else v) for k, v in settings.items()},
        "load_average_before": list(load_before),
        "load_average_after": list(load_after),
        "total_wall_seconds": total,
        "part_wall_seconds": elapsed,
        "a": a,
        "b": b,
        "c": c,
        "goals_met": goals,
    }
    print(json.dumps(finite_or_none(summary)))


if __name__ == "__main__":
    main()
