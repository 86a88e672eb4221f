"""Point estimates beyond the binary lattice: an edges-only random graph and a Potts lattice.

- Edges-only random graph: log g(A; θ) = θ·E(A), so Z(θ) = (1 + e^θ)^M over the M = n(n−1)/2
  dyads (ties are independent Bernoulli(σ(θ)); Frank & Strauss 1986, JASA 81(395)). The MLE is
  logit(E(y)/M) exactly and the Fisher information is M p(1 − p) with p = σ(θ).
  Data: the karate-club network shipped with networkx (Zachary 1977, J. Anthropol. Res. 33(4)).
- Potts on a 3×4 grid with q = 3: log g(x; J) = J·t(x), t = the number of neighbour pairs with
  equal labels; Z(J) = Σ_k N_k e^{Jk} with N_k the number of the 3^12 labellings with t = k,
  counted here by enumeration, and the exact MLE solves t(y) = E_J[t] (scipy).

Monte Carlo checks: |estimate − exact| < 4 reported Monte Carlo errors, with the reported
error required to be small enough to mean something. Fixed keys throughout.
"""

import itertools

import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
from scipy import optimize, special

from zhat import fit
from zhat.families import lattice, network


def assert_within_mc_error(result, exact, what, largest=0.05):
    mc = np.array([result.monte_carlo_error[k] for k in result.labels])
    assert np.all((mc > 0) & (mc < largest)), f"{what}: Monte Carlo error {mc} unusable"
    z = (result.vector - np.atleast_1d(exact)) / mc
    assert np.all(np.abs(z) < 4), f"{what}: {result.vector} vs exact {exact}, z = {z}"


# --- edges-only random graph: closed form ------------------------------------------------
def karate():
    a = network.adjacency(nx.karate_club_graph())
    n = a.shape[0]
    m = n * (n - 1) // 2
    ties = int(a.sum() // 2)
    assert (n, ties) == (34, 78)  # the graph as networkx ships it (Zachary 1977)
    return a, m, ties


def test_edges_only_maximum_likelihood_is_logit_of_density():
    a, m, ties = karate()
    p = ties / m
    exact = special.logit(p)
    d = network.model(a, [network.edges()], jnp.zeros(1))  # a jax array: fitted, not held
    result = fit.maximum_likelihood(jax.random.key(11), d, a, steps=400, draws=400)
    assert result.labels == ("coefficients[0]",)
    assert_within_mc_error(result, exact, "edges-only MLE vs logit(density)")
    # Standard error 1/sqrt(M p (1 − p)) from the closed-form Fisher information. The simulated
    # information is a variance from 16 chains × 400 draws; its relative error is about
    # sqrt(2 τ / 6400) ≈ 3 % for an integrated autocorrelation τ ≤ 3 (the edge count decorrelates
    # within a few toggle sweeps, common practice), so 4 such errors give the 12 % below.
    se = float(result.standard_errors["coefficients[0]"])
    closed = 1.0 / np.sqrt(m * p * (1 - p))
    assert abs(se / closed - 1) < 0.12, (se, closed)


def test_edges_only_pseudo_likelihood_is_exact():
    """With independent dyads the pseudo-likelihood is the likelihood (Strauss & Ikeda 1990,
    JASA 85(409)): its maximiser is logit(density) up to the optimiser's tolerance."""
    a, m, ties = karate()
    d = network.model(a, [network.edges()], jnp.zeros(1))
    result = fit.pseudo_likelihood(d, a)
    np.testing.assert_allclose(result.vector, [special.logit(ties / m)], atol=1e-5)
    np.testing.assert_allclose(
        result.standard_errors["coefficients[0]"],
        1.0 / np.sqrt(m * (ties / m) * (1 - ties / m)),
        rtol=1e-4,
    )


# --- Potts on a small grid: enumeration ------------------------------------------------------
ROWS, COLS, Q = 3, 4, 3
# An invented labelling of 12 plots with three ground-cover types: 8 of the 17 neighbour pairs
# agree, inside (0, 17), so the MLE exists.
POTTS_Y = np.array([[0, 0, 1, 1], [0, 2, 2, 1], [2, 2, 0, 1]])


def agreement_counts():
    """N_k: the number of the 3^12 labellings with k equal neighbour pairs, by enumeration."""
    edges = [(r * COLS + c, r * COLS + c + 1) for r in range(ROWS) for c in range(COLS - 1)]
    edges += [(r * COLS + c, (r + 1) * COLS + c) for r in range(ROWS - 1) for c in range(COLS)]
    configs = np.array(list(itertools.product(range(Q), repeat=ROWS * COLS)), np.int8)
    i, j = np.array(edges).T
    t = (configs[:, i] == configs[:, j]).sum(axis=1)
    return np.bincount(t, minlength=len(edges) + 1), edges


def test_potts_likelihood_equals_exact_mle():
    counts, edges = agreement_counts()
    assert counts.sum() == Q ** (ROWS * COLS)
    y = POTTS_Y.reshape(-1)
    t_obs = sum(int(y[a] == y[b]) for a, b in edges)
    assert t_obs == 8
    k = np.arange(counts.size)

    def mean_t(coupling):
        w = np.log(counts, where=counts > 0, out=np.full(counts.size, -np.inf)) + coupling * k
        w = np.exp(w - special.logsumexp(w))
        return w @ k, w @ k**2 - (w @ k) ** 2

    exact = optimize.brentq(lambda c: mean_t(c)[0] - t_obs, -5.0, 5.0, xtol=1e-12)
    nb = lattice.grid(ROWS, COLS)
    d = lattice.potts(nb, coupling=jnp.asarray(0.0), q=Q)  # the field (zeros) is held
    result = fit.maximum_likelihood(jax.random.key(12), d, y, steps=600, draws=500)
    assert result.labels == ("coupling",)
    assert_within_mc_error(result, exact, "Potts MLE vs enumeration", largest=0.1)
    # Maximum pseudo-likelihood (Besag 1975, The Statistician 24(3)): each site's label given
    # its neighbours is a softmax over the three labels of J × (neighbours with that label);
    # maximised here with scipy.
    neighbours = [[b for a, b in edges if a == s] + [a for a, b in edges if b == s]
                  for s in range(y.size)]  # fmt: skip
    same = np.array([[sum(int(y[m] == c) for m in nbrs) for c in range(Q)] for nbrs in neighbours])

    def negative_pl(c):
        return -np.sum(c * same[np.arange(y.size), y] - special.logsumexp(c * same, axis=1))

    pl_exact = optimize.minimize_scalar(negative_pl, bounds=(-5, 5), method="bounded",
                                        options={"xatol": 1e-10}).x  # fmt: skip
    pl = fit.pseudo_likelihood(d, y)
    np.testing.assert_allclose(pl.vector, [pl_exact], atol=1e-5)
    # Standard error against the exact information Var_J[t] at the exact MLE.
    se = float(result.standard_errors["coupling"])
    closed = 1.0 / np.sqrt(mean_t(exact)[1])
    assert abs(se / closed - 1) < 0.15, (se, closed)
