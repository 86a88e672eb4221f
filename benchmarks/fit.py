"""Stochastic-approximation maximum likelihood on a large autologistic lattice: persistent chains
against a loop that restarts the simulator at every iteration.

The problem (invented): a 128×128 free-boundary grid, labels x_i ∈ {0, 1},

    log g(x) = Σ_i x_i (β_0 + β_1 z_i) + J Σ_{i~j} x_i x_j       (Besag 1974, JRSS B 36(2)),

with a smooth invented covariate z_i = sin(r/15) + cos(c/20) + 0.3·ε_i (fixed generator) and
true values J = 1.0, β = (−2.0, 0.5). The data are one exact draw by coupling from the past
(fixed key). Both fits start from the maximum pseudo-likelihood estimate (timed separately),
precondition the gradient by the inverse simulated Fisher information at that start, take the
same SGD steps a_t = 0.5 / (1 + t/t_0)^0.6 (t_0 = steps/20) with K chains, and average the
second half of the iterates (Polyak–Ruppert):

1. zhat — ``zhat.fit.stochastic_approximation``: K persistent heat-bath chains, one sweep per
   iteration, everything in one ``lax.scan``; then one Newton step from fresh draws at the
   average (its reported Monte Carlo error is printed).
2. restart loop — a plain Python loop over iterations, each a jitted call that starts K chains
   afresh (independent fair labels), runs R burn-in sweeps at the current θ and uses the last
   state for the gradient (the family's heat-bath transition, the same optimiser arithmetic).

Accuracy. The exact MLE is out of reach at this size, so each method's averaged iterate θ̄ is
judged by the distance to the MLE that one Newton step estimates, δ = I(θ̄)⁻¹ (s(y) − Ê_θ̄[s]),
from a common long check run (``zhat.fit.fisher_information``, K chains × 1000 draws after
200 burn-in), reported in units of the statistical standard error, with its Monte Carlo error.
For an exponential family I(θ) = Cov_θ[s] and s is the sufficient statistic
(Σ_{i~j} x_i x_j, Σ_i x_i, Σ_i x_i z_i) (e.g. Lehmann & Casella 1998, §1.5).

Timing. Wall seconds of each fit with ``jax.block_until_ready``; the time JAX reports spending
in tracing, lowering and compiling within it (``jax.monitoring``, see ``_common.py``) is
subtracted and printed beside. The machine is shared: the load average is printed.

    .venv/bin/python benchmarks/fit.py [--quick]

``--quick`` is a smoke run on a 48×48 grid with fewer iterations. Output: a table and, as the
last line, one JSON object with every figure.
"""

from __future__ import annotations

import argparse
import json
import os
import time
from typing import Any

import numpyro

numpyro.enable_x64()

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402
from jax import lax  # noqa: E402

from _common import CompileClock, listening, load_average  # noqa: E402
from zhat import fit  # noqa: E402
from zhat.families import lattice  # noqa: E402

Array = jax.Array

TRUE_COUPLING = 1.0
TRUE_COEFFICIENTS = (-2.0, 0.5)
DATA_KEY = 11
RUN_KEY = 2026
STEP_SIZE = 0.5
SETTINGS = {
    "full": {"side": 128, "chains": 8, "steps": 400, "restart_sweeps": 40, "burn_in": 200},
    "quick": {"side": 48, "chains": 4, "steps": 100, "restart_sweeps": 10, "burn_in": 50},
}
CHECK_DRAWS = 1000
LABELS = ("coupling", "coefficients[0]", "coefficients[1]")


def make_problem(side: int):
    nb = lattice.grid(side, side)
    n = side * side
    rng = np.random.default_rng(5)
    r, c = np.divmod(np.arange(n), side)
    z = np.sin(r / 15.0) + np.cos(c / 20.0) + 0.3 * rng.normal(size=n)
    covariates = np.stack([np.ones(n), z], axis=1)
    truth = lattice.autologistic(
        nb, jnp.asarray(TRUE_COUPLING), covariates, jnp.asarray(TRUE_COEFFICIENTS)
    )
    x, exact = truth.family.perfect_sampler.draw(truth.params, jax.random.key(DATA_KEY), 4096)
    if not bool(exact):
        raise RuntimeError("coupling from the past did not coalesce within 4096 sweeps")
    return nb, covariates, truth, np.asarray(x)


def statistics(nb, covariates: np.ndarray, x: np.ndarray) -> np.ndarray:
    """(Σ_{i~j} x_i x_j, Xᵀx), in the order of the fitted parameters."""
    edges = np.asarray(nb.edges)
    return np.concatenate([[np.sum(x[edges[:, 0]] * x[edges[:, 1]])], covariates.T @ x])


def at(nb, covariates, theta: np.ndarray):
    return lattice.autologistic(nb, jnp.asarray(theta[0]), covariates, jnp.asarray(theta[1:]))


def restart_loop(key, nb, covariates, y, start, scale, chains, steps, restart_sweeps):
    """The baseline: every iteration simulates K chains from scratch (R sweeps from fair labels)."""
    family = at(nb, covariates, start).family
    step_fn = family.simulators["gibbs"].step
    n = y.size
    s_y = jnp.asarray(statistics(nb, covariates, y))
    pairs = jnp.asarray(np.asarray(nb.edges))
    x_cov = jnp.asarray(covariates)
    t0 = max(1.0, steps / 20)

    @jax.jit
    def iteration(key, theta, t):
        k_start, k_noise = jax.random.split(key)
        params = {"coupling": theta[0], "covariates": x_cov, "coefficients": theta[1:]}
        states = jax.random.bernoulli(k_start, 0.5, (chains, n)).astype(y.dtype)
        noise = jax.random.normal(k_noise, (restart_sweeps, chains, n))

        def sweep(states, z):
            return jax.vmap(lambda a, b: step_fn(params, a, b))(states, z), None

        states = lax.scan(sweep, states, noise)[0]
        s_x = jnp.concatenate(
            [
                jnp.sum(states[:, pairs[:, 0]] * states[:, pairs[:, 1]], axis=1)[:, None],
                states @ x_cov,
            ],
            axis=1,
        )
        gradient = s_y - jnp.mean(s_x, axis=0)
        return theta + STEP_SIZE / (1.0 + t / t0) ** 0.6 * (scale @ gradient)

    theta = jnp.asarray(start)
    path = []
    for t in range(steps):
        theta = iteration(jax.random.fold_in(key, t), theta, t)
        path.append(theta)
    path = np.asarray(jax.block_until_ready(jnp.stack(path)))
    return path[steps // 2 :].mean(axis=0), path


def check(key, nb, covariates, y, theta, chains, burn_in) -> dict[str, Any]:
    """δ = I(θ)⁻¹ (s(y) − Ê_θ[s]) from a long run: the estimated distance to the MLE."""
    info = fit.fisher_information(
        key, at(nb, covariates, theta), y, chains=chains, draws=CHECK_DRAWS, burn_in=burn_in
    )
    inverse = np.linalg.inv(info.matrix)
    delta = inverse @ (statistics(nb, covariates, y) - info.mean)
    delta_mc = np.sqrt(np.diag(inverse @ info.mean_covariance @ inverse))
    se = np.sqrt(np.diag(inverse))
    return {
        "estimate": dict(zip(LABELS, map(float, theta), strict=True)),
        "distance_to_mle": dict(zip(LABELS, map(float, delta), strict=True)),
        "distance_mc_error": dict(zip(LABELS, map(float, delta_mc), strict=True)),
        "distance_in_se": dict(zip(LABELS, map(float, np.abs(delta) / se), strict=True)),
        "standard_error": dict(zip(LABELS, map(float, se), strict=True)),
    }


def timed(clock: CompileClock, fn, *args, **kwargs):
    start = time.time()
    out = jax.block_until_ready(fn(*args, **kwargs))
    end = time.time()
    return out, end - start, clock.seconds_between(start, end)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="48×48 grid, 100 iterations")
    args = parser.parse_args(argv)
    mode = "quick" if args.quick else "full"
    cfg = SETTINGS[mode]
    side, chains, steps = cfg["side"], cfg["chains"], cfg["steps"]
    load_before = load_average()
    print(
        f"fit benchmark ({mode}); jax {jax.__version__}, {jax.device_count()} CPU device(s), "
        f"float64; load average {load_before} ({os.cpu_count()} cores)"
    )
    nb, covariates, truth, y = make_problem(side)
    print(
        f"autologistic {side}x{side}, true coupling {TRUE_COUPLING}, coefficients "
        f"{TRUE_COEFFICIENTS}; mean label {y.mean():.3f}; K = {chains} chains, {steps} "
        f"iterations, restart loop {cfg['restart_sweeps']} sweeps per iteration"
    )
    keys = jax.random.split(jax.random.key(RUN_KEY), 6)
    clock = CompileClock()
    with listening(clock):
        pl, pl_wall, pl_compile = timed(clock, lambda: fit.pseudo_likelihood(truth, y))
        start = pl.vector
        sa, sa_wall, sa_compile = timed(
            clock,
            lambda: fit.stochastic_approximation(
                keys[0], truth, y, start=pl.estimate, chains=chains, steps=steps,
                burn_in=cfg["burn_in"], step_size=STEP_SIZE,
            ),
        )  # fmt: skip
        # the baseline's preconditioner: the simulated information at the same start
        info0, info_wall, info_compile = timed(
            clock,
            lambda: fit.fisher_information(
                keys[1], at(nb, covariates, start), y, chains=chains, draws=500,
                burn_in=cfg["burn_in"],
            ),
        )  # fmt: skip
        scale = jnp.asarray(np.linalg.inv(info0.matrix))
        (loop_avg, _), loop_wall, loop_compile = timed(
            clock,
            lambda: restart_loop(
                keys[2], nb, covariates, y, start, scale, chains, steps, cfg["restart_sweeps"]
            ),
        )
        loop_wall += info_wall
        loop_compile += info_compile
    sa_avg = np.asarray(sa.path[steps // 2 :]).mean(axis=0)
    checks = {
        "zhat_average": check(keys[3], nb, covariates, y, sa_avg, chains, cfg["burn_in"]),
        "zhat_final": check(keys[4], nb, covariates, y, sa.vector, chains, cfg["burn_in"]),
        "restart_loop_average": check(keys[5], nb, covariates, y, loop_avg, chains, cfg["burn_in"]),
    }
    seconds = {
        "zhat": sa_wall - sa_compile,
        "restart_loop": loop_wall - loop_compile,
    }
    sweeps = {
        "zhat": sa.num_simulations,
        "restart_loop": chains * steps * cfg["restart_sweeps"] + info0.num_simulations,
    }
    start_text = dict(zip(LABELS, np.round(start, 4).tolist(), strict=True))
    print(f"\nmaximum pseudo-likelihood start: {start_text}")
    print(f"  ({pl_wall - pl_compile:.2f} s + {pl_compile:.2f} s compile)\n")
    header = f"{'method':<24}{'seconds':>9}{'compile':>9}{'sweeps':>10}"
    header += "".join(f"{lab:>18}" for lab in LABELS)
    print(header)
    rows = [
        ("zhat, averaged", "zhat", "zhat_average"),
        ("zhat, final estimate", "zhat", "zhat_final"),
        ("restart loop, averaged", "restart_loop", "restart_loop_average"),
    ]
    for label, method, name in rows:
        c = checks[name]
        compile_s = sa_compile if method == "zhat" else loop_compile
        line = f"{label:<24}{seconds[method]:>9.2f}{compile_s:>9.2f}{sweeps[method]:>10,}"
        line += "".join(f"{c['estimate'][lab]:>18.5f}" for lab in LABELS)
        print(line)
        line = f"{'  |distance to MLE|/SE':<52}"
        for lab in LABELS:
            mc_in_se = c["distance_mc_error"][lab] / c["standard_error"][lab]
            line += f"{c['distance_in_se'][lab]:>11.3f}±{mc_in_se:<6.3f}"
        print(line)
    print(
        "\nzhat reported: "
        + ", ".join(
            f"{lab} {sa.vector[i]:.5f} (SE {sa.standard_errors[lab]:.4f}, MC error "
            f"{sa.monte_carlo_error[lab]:.2g})"
            for i, lab in enumerate(LABELS)
        )
    )
    speedup = seconds["restart_loop"] / seconds["zhat"]
    print(f"restart loop / zhat seconds: {speedup:.1f}x")
    load_after = load_average()
    print(f"load average after: {load_after}")
    summary = {
        "benchmark": "fit",
        "mode": mode,
        "side": side,
        "chains": chains,
        "steps": steps,
        "restart_sweeps": cfg["restart_sweeps"],
        "truth": {"coupling": TRUE_COUPLING, "coefficients": list(TRUE_COEFFICIENTS)},
        "pseudo_likelihood": {"estimate": dict(zip(LABELS, map(float, start), strict=True))},
        "seconds": seconds,
        "compile_seconds": {"zhat": sa_compile, "restart_loop": loop_compile},
        "sweeps": sweeps,
        "zhat_reported": {
            "estimate": dict(zip(LABELS, map(float, sa.vector), strict=True)),
            "standard_errors": sa.standard_errors,
            "monte_carlo_error": sa.monte_carlo_error,
        },
        "checks": checks,
        "restart_over_zhat_seconds": speedup,
        "load_average_before": list(load_before),
        "load_average_after": list(load_after),
    }
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
