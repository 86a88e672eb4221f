"""Shared helpers of the lattice tests: exact draws by enumeration and Monte Carlo checks.

Exact draws are taken with numpy from the enumerated distribution p(x) = g(x)/Z (the
configuration order of ``tests/references/lattice_exact.py``: site i of configuration j takes
labels[(j // q^i) mod q]), so they do not depend on any zhat sampler.
"""

from __future__ import annotations

import numpy as np
from scipy import special


def configurations(num_sites: int, labels=(-1, 1)) -> np.ndarray:
    """All labels^num_sites configurations, (q^N, N), in the reference's enumeration order."""
    labels = np.asarray(labels, dtype=np.float64)
    q = labels.shape[0]
    index = np.arange(q**num_sites, dtype=np.int64)
    powers = q ** np.arange(num_sites, dtype=np.int64)
    return labels[(index[:, None] // powers) % q]


def exact_draws(
    rng: np.random.Generator, log_potential, num_sites: int, size: int, labels=(-1, 1)
) -> np.ndarray:
    """``size`` iid exact draws (size, N) from g/Z by enumeration."""
    configs = configurations(num_sites, labels)
    log_w = np.asarray(log_potential(configs), dtype=np.float64)
    p = np.exp(log_w - special.logsumexp(log_w))
    return configs[rng.choice(configs.shape[0], size=size, p=p)]


def potts_statistics(edges: np.ndarray, q: int):
    """Vectorised (label counts, agreements) of Potts configurations, for enumeration."""
    edges = np.asarray(edges)

    def statistics(configs: np.ndarray) -> np.ndarray:
        x = np.asarray(configs).astype(np.int64)
        counts = np.stack([(x == k).sum(axis=1) for k in range(q)], axis=1)
        agree = (x[:, edges[:, 0]] == x[:, edges[:, 1]]).sum(axis=1)
        return np.concatenate([counts, agree[:, None]], axis=1).astype(np.float64)

    return statistics


def potts_log_potential(edges: np.ndarray, coupling: float, field: np.ndarray):
    """Vectorised log g(x) = Σ_i f_{i, x_i} + J Σ_edges 1[x_i = x_j]; field (q,) or (N, q)."""
    edges = np.asarray(edges)
    field = np.asarray(field, dtype=np.float64)

    def log_potential(configs: np.ndarray) -> np.ndarray:
        x = np.asarray(configs).astype(np.int64)
        f = np.broadcast_to(field, (x.shape[1], field.shape[-1]))
        site = f[np.arange(x.shape[1])[None, :], x].sum(axis=1)
        return site + coupling * (x[:, edges[:, 0]] == x[:, edges[:, 1]]).sum(axis=1)

    return log_potential


def assert_iid_means(samples: np.ndarray, exact: np.ndarray, what: str) -> None:
    """Each column's sample mean within 4 standard errors (sd/√n, iid draws) of ``exact``."""
    samples = np.asarray(samples, dtype=np.float64)
    n = samples.shape[0]
    mean = samples.mean(axis=0)
    se = samples.std(axis=0, ddof=1) / np.sqrt(n)
    exact = np.asarray(exact, dtype=np.float64)
    assert np.all(se > 0), f"{what}: a statistic is constant over the draws ({se})."
    assert np.all(np.abs(mean - exact) < 4 * se), (what, mean, exact, se)


def assert_iid_variances(samples: np.ndarray, exact_var: np.ndarray, what: str) -> None:
    """Each column's sample variance within 4 standard errors of ``exact_var``.

    SE of the sample variance of iid draws, √((m4 − s⁴)/n) with m4 the fourth central moment
    (common practice; e.g. Kendall & Stuart, The Advanced Theory of Statistics, Vol. 1, the
    large-sample variance of the sample variance, from memory).
    """
    samples = np.asarray(samples, dtype=np.float64)
    n = samples.shape[0]
    centred = samples - samples.mean(axis=0)
    var = (centred**2).mean(axis=0) * n / (n - 1)
    m4 = (centred**4).mean(axis=0)
    se = np.sqrt((m4 - var**2) / n)
    exact_var = np.asarray(exact_var, dtype=np.float64)
    assert np.all(np.abs(var - exact_var) < 4 * se), (what, var, exact_var, se)
