"""Ising, autologistic and Potts families on a lattice or an irregular map.

- Ising (spins s ∈ {−1, +1}): log g(s) = h · Σ_i s_i + J Σ_{i~j} s_i s_j, each edge once (the
  usual physics convention); h may vary by site.
- Autologistic (labels x ∈ {0, 1}; Besag 1974, JRSS B 36(2)): log g(x) = Σ_i a_i x_i +
  J Σ_{i~j} x_i x_j with a_i = X_i·β. The centred form (Caragea & Kaiser 2009, JABES 14(3))
  uses p(x_i = 1 | rest) = σ(η_i + J Σ_{j~i} (x_j − κ_j)) with η_i = X_i·β, κ_j = σ(η_j), i.e.
  a_i = η_i − J Σ_{j~i} κ_j, so β keeps its meaning as a regression on the marginal scale.
- Potts (labels x ∈ {0..q−1}): log g(x) = Σ_i f_{i,x_i} + J Σ_{i~j} 1[x_i = x_j].

Autologistic is simulated in spin form: with x = (s + 1)/2, log g = Σ_i s_i (a_i/2 + J d_i/4) +
(J/4) Σ_{i~j} s_i s_j + const (d_i the degree), so one sampler serves both. Perfect sampling
(coupling from the past) covers Ising and autologistic with J ≥ 0, or any J on a bipartite graph.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike
from numpyro.distributions import constraints

from zhat.estimators.auxiliary import single_auxiliary
from zhat.families.lattice.graph import Neighbours
from zhat.families.lattice.perfect import coupling_from_the_past, perfect_noise_shape
from zhat.families.lattice.spin_sweep import spin_sweep
from zhat.families.lattice.sweeps import (
    neighbour_sum,
    potts_heat_bath_sweep,
    potts_swendsen_wang,
    swendsen_wang,
)
from zhat.model.factor import Estimator
from zhat.model.unnormalized import (
    Family,
    PerfectSampler,
    Transition,
)

Array = jax.Array

__all__ = ["autologistic", "ising", "potts"]


class _Labels(constraints.Constraint):
    """Values in a finite label set (a discrete support)."""

    is_discrete = True

    def __init__(self, labels: tuple[int, ...], event_dim: int) -> None:
        self.labels = labels
        self.event_dim = event_dim

    def __call__(self, x: ArrayLike) -> Array:
        x = jnp.asarray(x)
        return jnp.isin(x, jnp.asarray(self.labels))

    def feasible_like(self, prototype: ArrayLike) -> Array:
        return jnp.full(jnp.shape(prototype), self.labels[0])

    def tree_flatten(self):
        return (), ((), {"labels": self.labels, "event_dim": self.event_dim})


def _validator(nb: Neighbours, labels: tuple[int, ...], name: str):
    def validate(x: ArrayLike) -> None:
        arr = np.asarray(x)
        if arr.shape not in (nb.shape, (nb.num_sites,)):
            raise ValueError(
                f"the data have shape {arr.shape}, but the graph has {nb.num_sites} sites "
                f"(shape {nb.shape}). Reshape the labels to the graph."
            )
        if np.issubdtype(arr.dtype, np.floating) and np.isnan(arr).any():
            raise ValueError(f"the data contain NaN at {np.argwhere(np.isnan(arr))[:3].tolist()}.")
        bad = ~np.isin(arr, labels)
        if bad.any():
            values = sorted(set(arr[bad].tolist()))[:5]
            raise ValueError(
                f"{name} labels must be in {list(labels)}; found {values} at "
                f"{np.argwhere(bad)[:3].tolist()}."
                + (" (0/1 data? use the autologistic family)" if labels == (-1, 1) else "")
            )

    return validate


def _flat(x: ArrayLike, dtype=None) -> Array:
    x = jnp.asarray(x)
    return x.reshape(-1).astype(dtype or jnp.result_type(float))


def _site_field(nb: Neighbours, field: ArrayLike, dtype) -> Array:
    field = jnp.asarray(field, dtype)
    if field.ndim == 0:
        return field  # one number: the samplers use their threshold tables
    if field.size != nb.num_sites:
        raise ValueError(f"A site field needs {nb.num_sites} values; got shape {field.shape}.")
    return field.reshape(-1)


def _edge_sum(nb: Neighbours, s: Array) -> Array:
    """Σ_{i~j} s_i s_j (each edge once)."""
    return 0.5 * jnp.sum(s * neighbour_sum(nb, s))


# --- spin form shared by Ising and autologistic ---------------------------------------
def _spin_transitions(nb: Neighbours, to_spin, from_spin, spin_params):
    def gibbs(params, x, noise):
        h, j = spin_params(params)
        plan = spin_sweep(nb, h, j)
        s = plan.sweep(plan.to_state(to_spin(x)), plan.to_noise(noise))
        return from_spin(plan.from_state(s))

    def sw(params, x, noise):
        h, j = spin_params(params)
        h = jnp.broadcast_to(h, (nb.num_sites,))
        return from_spin(swendsen_wang(nb, to_spin(x), h, j, noise))

    return {
        "gibbs": Transition(gibbs, lambda x: (nb.num_sites,)),
        "swendsen_wang": Transition(sw, lambda x: (nb.num_edges + nb.num_sites,)),
    }


def _spin_perfect(nb: Neighbours, from_spin, spin_params) -> PerfectSampler:
    def draw(params, noise, budget=None):
        h, j = spin_params(params)
        s, exact, _ = coupling_from_the_past(nb, h, j, noise, max_sweeps=budget)
        return from_spin(s), exact

    return PerfectSampler(
        draw,
        lambda budget: perfect_noise_shape(nb, budget),
        "coupling ≥ 0, or any coupling on a bipartite graph",
    )


def _default_estimator(family: Family) -> Estimator:
    return single_auxiliary(num_draws=1, sampler="perfect")


@functools.lru_cache(maxsize=64)
def _ising_family(nb: Neighbours) -> Family:
    def spin_params(params):
        dtype = jnp.result_type(float)
        return _site_field(nb, params["field"], dtype), jnp.asarray(params["coupling"], dtype)

    def log_potential(x, field, coupling):
        s = _flat(x)
        h, j = spin_params({"field": field, "coupling": coupling})
        return jnp.sum(h * s) + j * _edge_sum(nb, s)

    def statistics(x):
        s = _flat(x)
        return jnp.stack([jnp.sum(s), _edge_sum(nb, s)])

    def pseudo(x, field, coupling):
        s = _flat(x)
        h, j = spin_params({"field": field, "coupling": coupling})
        return jnp.sum(jax.nn.log_sigmoid(2.0 * s * (h + j * neighbour_sum(nb, s))))

    same = lambda s: s  # noqa: E731
    family = Family(
        name="ising",
        log_potential=log_potential,
        support=_Labels((-1, 1), len(nb.shape)),
        event_shape=nb.shape,
        statistics=statistics,
        simulators=_spin_transitions(nb, _flat, same, spin_params),
        perfect_sampler=_spin_perfect(nb, same, spin_params),
        default_estimator=_default_estimator,
        validate=_validator(nb, (-1, 1), "Ising"),
        pseudo_log_likelihood=pseudo,
        free_parameters=("field", "coupling"),
        structure=nb,
    )
    return family


def ising(graph: Neighbours, field: ArrayLike = 0.0, coupling: ArrayLike = 0.0):
    """Ising distribution on ``graph`` (spins ±1): log g = field·Σ s_i + coupling·Σ_{i~j} s_i s_j.

    ``field`` is a scalar or one value per site.
    """
    _check_graph(graph)
    return _ising_family(graph)(field=field, coupling=coupling)


@functools.lru_cache(maxsize=64)
def _autologistic_family(nb: Neighbours, centred: bool) -> Family:
    degree = np.asarray(nb.degree, dtype=float)  # numpy: the family is cached across traces

    def site_terms(coupling, covariates, coefficients):
        eta = covariates @ coefficients
        if centred:
            return eta - coupling * neighbour_sum(nb, jax.nn.sigmoid(eta))
        return eta

    def spin_params(params):
        dtype = jnp.result_type(float)
        j = jnp.asarray(params["coupling"], dtype)
        a = site_terms(j, params["covariates"].astype(dtype), params["coefficients"].astype(dtype))
        return 0.5 * a + 0.25 * j * degree, 0.25 * j

    def log_potential(x, coupling, covariates, coefficients):
        x = _flat(x)
        a = site_terms(coupling, covariates, coefficients)
        return jnp.sum(a * x) + coupling * _edge_sum(nb, x)

    def pseudo(x, coupling, covariates, coefficients):
        x = _flat(x)
        logit = site_terms(coupling, covariates, coefficients) + coupling * neighbour_sum(nb, x)
        return jnp.sum(x * logit - jnp.logaddexp(0.0, logit))

    to_spin = lambda x: 2.0 * _flat(x) - 1.0  # noqa: E731
    from_spin = lambda s: 0.5 * (s + 1.0)  # noqa: E731
    family = Family(
        name="centred autologistic" if centred else "autologistic",
        log_potential=log_potential,
        support=_Labels((0, 1), len(nb.shape)),
        event_shape=nb.shape,
        statistics=None,
        simulators=_spin_transitions(nb, to_spin, from_spin, spin_params),
        perfect_sampler=_spin_perfect(nb, from_spin, spin_params),
        default_estimator=_default_estimator,
        validate=_validator(nb, (0, 1), "Autologistic"),
        pseudo_log_likelihood=pseudo,
        free_parameters=("coupling", "coefficients"),
        structure=nb,
    )
    return family


def autologistic(
    graph: Neighbours,
    coupling: ArrayLike = 0.0,
    covariates: ArrayLike | None = None,
    coefficients: ArrayLike | None = None,
    *,
    centred: bool = False,
):
    """Autologistic distribution on ``graph`` (labels 0/1) with a regression on site covariates.

    :param covariates: (num_sites, p) site covariates (include a column of ones for an
        intercept); default a single intercept column.
    :param coefficients: (p,) regression coefficients β.
    :param centred: use the centred parameterisation of Caragea & Kaiser (2009).
    """
    _check_graph(graph)
    n = graph.num_sites
    dtype = jnp.result_type(float)
    with jax.ensure_compile_time_eval():  # fixed inputs stay concrete under jit
        covariates = (
            jnp.ones((n, 1), dtype) if covariates is None else jnp.asarray(covariates, dtype)
        )
        if covariates.ndim == 1:
            covariates = covariates[:, None]
    if covariates.shape[0] != n or covariates.ndim != 2:
        raise ValueError(
            f"covariates must have shape ({n}, p) — one row per site; got {covariates.shape}."
        )
    if coefficients is None:
        coefficients = np.zeros((covariates.shape[1],))  # numpy: held fixed by reference fits
    if not isinstance(coefficients, (jax.Array, jax.core.Tracer)):
        coefficients = np.asarray(coefficients, dtype=float)
    coefficients = coefficients.reshape(-1) if np.ndim(coefficients) == 0 else coefficients
    if np.shape(coefficients) != (covariates.shape[1],):
        raise ValueError(
            f"coefficients must have shape ({covariates.shape[1]},) to match the covariates; "
            f"got {np.shape(coefficients)}."
        )
    family = _autologistic_family(graph, bool(centred))
    return family(coupling=coupling, covariates=covariates, coefficients=coefficients)


@functools.lru_cache(maxsize=64)
def _potts_family(nb: Neighbours, q: int) -> Family:
    def site_field(field):
        dtype = jnp.result_type(float)
        field = jnp.asarray(field, dtype)
        return jnp.broadcast_to(field, (nb.num_sites, q))

    def log_potential(x, coupling, field):
        x = jnp.asarray(x).reshape(-1).astype(jnp.int32)
        f = site_field(field)
        same = _potts_agreements(nb, x)
        return jnp.sum(jnp.take_along_axis(f, x[:, None], axis=1)) + coupling * same

    def statistics(x):
        x = jnp.asarray(x).reshape(-1).astype(jnp.int32)
        counts = jnp.sum(jax.nn.one_hot(x, q), axis=0)
        return jnp.concatenate([counts, _potts_agreements(nb, x)[None]])

    def pseudo(x, coupling, field):
        x = jnp.asarray(x).reshape(-1).astype(jnp.int32)
        onehot = jax.nn.one_hot(x, q, dtype=jnp.result_type(float))
        counts = jax.vmap(lambda c: neighbour_sum(nb, c), in_axes=1, out_axes=1)(onehot)
        logits = site_field(field) + coupling * counts
        return jnp.sum(jnp.take_along_axis(jax.nn.log_softmax(logits), x[:, None], axis=1))

    def gibbs(params, x, noise):
        x = jnp.asarray(x).reshape(-1).astype(jnp.int32)
        u = jax.scipy.special.ndtr(noise)
        return potts_heat_bath_sweep(nb, x, site_field(params["field"]), params["coupling"], u)

    def sw(params, x, noise):
        x = jnp.asarray(x).reshape(-1).astype(jnp.int32)
        f = site_field(params["field"])
        return potts_swendsen_wang(nb, x, f, params["coupling"], noise)

    family = Family(
        name=f"potts (q={q})",
        log_potential=log_potential,
        support=_Labels(tuple(range(q)), len(nb.shape)),
        event_shape=nb.shape,
        statistics=statistics,
        simulators={
            "gibbs": Transition(gibbs, lambda x: (nb.num_sites,)),
            "swendsen_wang": Transition(sw, lambda x: (nb.num_edges + nb.num_sites,)),
        },
        perfect_sampler=None,
        default_estimator=None,
        validate=_validator(nb, tuple(range(q)), f"Potts (q={q})"),
        pseudo_log_likelihood=pseudo,
        free_parameters=("coupling", "field"),
        structure=nb,
    )
    return family


def _potts_agreements(nb: Neighbours, x: Array) -> Array:
    edges = jnp.asarray(nb.edges)
    return jnp.sum(x[edges[:, 0]] == x[edges[:, 1]]).astype(jnp.result_type(float))


def potts(graph: Neighbours, coupling: ArrayLike = 0.0, q: int = 3, field: ArrayLike | None = None):
    """Potts distribution on ``graph`` with labels 0..q−1.

    :param field: per-label (q,) or per-site-and-label (num_sites, q) terms f; default zeros.
    """
    _check_graph(graph)
    if not (isinstance(q, (int, np.integer)) and q >= 2):
        raise ValueError(f"q must be an integer ≥ 2, got {q!r}.")
    field = np.zeros((int(q),)) if field is None else field  # numpy: held by reference fits
    if np.shape(field) not in ((q,), (graph.num_sites, q)):
        raise ValueError(
            f"field must have shape ({q},) or ({graph.num_sites}, {q}); got {np.shape(field)}."
        )
    return _potts_family(graph, int(q))(coupling=coupling, field=field)


def _check_graph(graph: object) -> None:
    if not isinstance(graph, Neighbours):
        raise TypeError(
            "Lattice families need a neighbour structure: `lattice.grid(rows, cols)` or "
            f"`lattice.from_adjacency(...)`; got {type(graph).__name__}."
        )
