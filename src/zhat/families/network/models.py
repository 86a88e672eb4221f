"""Exponential-family random graph models of an undirected or directed graph on n nodes.

    p(A | θ) = exp(θ · s(A)) / Z(θ),   Z(θ) = Σ over the 2^M graphs of exp(θ · s(A)),

with s(A) a vector of graph statistics (:mod:`zhat.families.network.statistics`; Frank & Strauss
1986, JASA 81(395); Wasserman & Pattison 1996, Psychometrika 61(3)) and M the number of dyads:
the n(n−1)/2 pairs i < j of an undirected graph, the n(n−1) ordered pairs i ≠ j of a directed
one (A_ij = 1: the tie i → j). Z is intractable beyond a handful of nodes.

Pseudo-likelihood (Strauss & Ikeda 1990, JASA 85(409)): each dyad given the rest is a logistic
regression on its change statistics, p(A_ij = 1 | rest) = σ(θ · δ_ij(A)), and the pseudo-log-
likelihood is Σ_dyads [A_ij θ·δ_ij − log(1 + e^{θ·δ_ij})], over i < j (undirected) or all
i ≠ j (directed: each tie i → j given everything else, the tie j → i included).

Simulators: the Metropolis–Hastings toggle samplers of :mod:`zhat.families.network.toggles`.
There is no perfect sampler, so estimators that draw auxiliary graphs from these simulators
are APPROXIMATE.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike
from numpyro.distributions import constraints

from zhat.families.network.graph import (
    NetworkStructure,
    adjacency,
    check_adjacency,
    is_directed,
)
from zhat.families.network.statistics import Statistic, change_statistics, statistics
from zhat.families.network.toggles import toggle_simulators
from zhat.model.unnormalized import Degeneracy, Family

Array = jax.Array

__all__ = ["dyad_design", "dyads", "model"]


class _Graphs(constraints.Constraint):
    """0/1 adjacency matrices (a discrete support of two event dimensions)."""

    is_discrete = True
    event_dim = 2

    def __call__(self, x: ArrayLike) -> Array:
        x = jnp.asarray(x)
        return jnp.all((x == 0) | (x == 1), axis=(-2, -1))

    def feasible_like(self, prototype: ArrayLike) -> Array:
        return jnp.zeros(jnp.shape(prototype))

    def tree_flatten(self):
        return (), ((), {})


def _matrix(x: ArrayLike, n: int) -> Array:
    return jnp.asarray(x).reshape(n, n).astype(jnp.result_type(float))


def dyads(n: int, directed: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """The (rows, cols) of the M dyads of a graph on n nodes, row-major: i < j (undirected) or
    every ordered pair i ≠ j (directed)."""
    if directed:
        return np.nonzero(~np.eye(n, dtype=bool))
    return np.triu_indices(n, k=1)


def dyad_design(
    stats: tuple[Statistic, ...], a: ArrayLike, *, directed: bool = False
) -> tuple[Array, Array]:
    """The pseudo-likelihood regression: (M, p) change statistics of every dyad (in the order
    of :func:`dyads`) and the (M,) responses A_ij."""
    return _dyad_design(tuple(stats), jnp.asarray(a, jnp.result_type(float)), directed)


@functools.partial(jax.jit, static_argnums=(0, 2))
def _dyad_design(stats: tuple[Statistic, ...], a: Array, directed: bool) -> tuple[Array, Array]:
    rows, cols = dyads(a.shape[0], directed)
    design = jax.vmap(lambda i, j: change_statistics(stats, a, i, j, directed=directed))(rows, cols)
    return design, a[rows, cols]


@functools.lru_cache(maxsize=64)
def _network_family(
    n: int, stats: tuple[Statistic, ...], toggles: int, directed: bool = False
) -> Family:
    def log_potential(x, coefficients):
        return jnp.dot(coefficients, statistics(stats, _matrix(x, n), directed=directed))

    def pseudo(x, coefficients):
        design, response = dyad_design(stats, _matrix(x, n), directed=directed)
        eta = design @ coefficients
        return jnp.sum(response * eta - jnp.logaddexp(0.0, eta))

    def validate(x):
        arr = check_adjacency(x, directed)
        if arr.shape != (n, n):
            raise ValueError(
                f"the observed graph has {arr.shape[0]} nodes, but the model was built for {n}. "
                "Build the model from the same graph (or its number of nodes)."
            )

    names = ", ".join(s.name for s in stats)
    # the family is cached and may first be built while a model is traced: its constant
    # arrays must be concrete, not tracers of that trace
    with jax.ensure_compile_time_eval():
        simulators = toggle_simulators(n, stats, toggles, directed=directed)
    return Family(
        name=f"random graph, {'directed' if directed else 'undirected'} ({names})",
        log_potential=log_potential,
        support=_Graphs(),
        event_shape=(n, n),
        statistics=lambda x: statistics(stats, _matrix(x, n), directed=directed),
        simulators=simulators,
        perfect_sampler=None,
        default_estimator=None,
        validate=validate,
        pseudo_log_likelihood=pseudo,
        free_parameters=("coefficients",),
        structure=NetworkStructure(n, stats, directed=directed),
        degeneracy=Degeneracy(
            fill=lambda x: jnp.sum(_matrix(x, n)) / (n * (n - 1)),  # tie density
            empty="the empty graph",
            full="the complete graph",
            advice=(
                "This is common with triangles or k-stars, whose simulations jump between "
                "nearly empty and nearly complete graphs. Replace them with the geometrically "
                "weighted forms (network.weighted_shared_partners(decay), "
                "network.weighted_degrees(decay)), or start from / give a reference point "
                "closer to the data, e.g. zhat.fit.maximum_likelihood."
            ),
        ),
    )


def model(
    graph,
    statistics: list[Statistic],
    coefficients: ArrayLike | None = None,
    *,
    toggles: int | None = None,
    directed: bool | None = None,
):
    """A random graph distribution log g(A; θ) = θ · s(A) on the nodes of ``graph``.

    :param graph: the number of nodes, a networkx ``Graph`` / ``DiGraph`` or a 0/1 adjacency
        matrix (only its number of nodes and, for networkx, its directedness are used; pass
        the observed graph as ``obs=network.adjacency(g)``).
    :param statistics: the statistics s, e.g. ``[network.edges(), network.triangles()]``.
    :param coefficients: θ, one per statistic; default zeros (held fixed by reference fits).
    :param toggles: Metropolis toggles per simulator call; default M, one per dyad.
    :param directed: whether ties have a direction (entry [i, j]: the tie i → j); default as a
        networkx graph says, and undirected for a matrix or a number of nodes.

    A directed model of who asks whom for advice among the staff of an invented workshop, with
    reciprocity, transitivity and seniority x raising the ties a member sends::

        network.model(advice, [network.edges(), network.mutual(), network.triangles(),
                               network.covariate(x, role="sender")], theta, directed=True)
    """
    directed = is_directed(graph, directed)
    if isinstance(graph, (int, np.integer)) and not isinstance(graph, bool):
        n = int(graph)
    elif isinstance(graph, (bool, float, str)):
        raise TypeError(
            f"graph must be a number of nodes, a networkx Graph or an adjacency matrix; got "
            f"{graph!r}."
        )
    else:
        n = adjacency(graph, directed).shape[0]
    if n < 2:
        raise ValueError(f"a random graph model needs at least 2 nodes; got {n}.")
    stats = tuple(statistics) if isinstance(statistics, (list, tuple)) else (statistics,)
    if not stats or not all(isinstance(s, Statistic) for s in stats):
        raise TypeError(
            "statistics must be a non-empty list of network statistics, e.g. "
            f"[network.edges(), network.stars(2)]; got {statistics!r}."
        )
    if len(set(stats)) != len(stats):
        raise ValueError(
            f"statistics {[s.name for s in stats]} repeat one; each may appear once (the "
            "coefficients would not be identified)."
        )
    for s in stats:
        s.check(directed)
        if s.values and len(s.values) != n:
            raise ValueError(
                f"the statistic '{s.name}' has {len(s.values)} node values but the graph has "
                f"{n} nodes; give one value per node, in node order."
            )
    toggles = len(dyads(n, directed)[0]) if toggles is None else toggles
    if isinstance(toggles, bool) or not isinstance(toggles, (int, np.integer)) or toggles < 1:
        raise ValueError(f"toggles must be a positive whole number; got {toggles!r}.")
    if coefficients is None:
        coefficients = np.zeros((len(stats),))  # numpy: held fixed by reference fits
    if not isinstance(coefficients, (jax.Array, jax.core.Tracer)):
        coefficients = np.asarray(coefficients, dtype=float).reshape(-1)
    if jnp.shape(coefficients) != (len(stats),):
        raise ValueError(
            f"coefficients must have shape ({len(stats)},), one per statistic "
            f"{[s.name for s in stats]}; got shape {jnp.shape(coefficients)}."
        )
    return _network_family(n, stats, int(toggles), directed)(coefficients=coefficients)
