"""Families with an unnormalized density g(x; θ) and an unknown normalizer Z(θ).

    p(x | θ) = g(x; θ) / Z(θ),        Z(θ) = Σ_x g(x; θ)  (or ∫ g(x; θ) dx)

The :func:`unnormalized` decorator turns a log-potential ``log g(x, **params)`` into a family:
calling the family with parameters gives a NumPyro distribution for
``numpyro.sample("y", family(**params), obs=y)``. A family can also carry

- ``statistics(x) -> s(x)``: sufficient statistics (exponential families: log g = θ·s(x)),
- ``simulators``: named :class:`Transition` s, each one MCMC transition leaving p(· | θ)
  invariant, driven by explicit noise (the first is the default),
- ``perfect_sampler``: a :class:`PerfectSampler`, an exact draw from p(· | θ) given explicit
  noise, with a flag saying whether it succeeded within its budget,
- ``default_estimator(family) -> Estimator``: the documented estimator used by
  :func:`zhat.expose` when the user names none,
- ``validate(x)``: raise a clear error for data outside the family (wrong labels, shape, NaN),
- ``pseudo_log_likelihood(x, **params)``: Σ_i log p(x_i | x_{−i}; θ) (Besag 1975),
- ``free_parameters``: the parameter names a point estimate fits (others are fixed inputs,
  e.g. covariates). A free parameter the model passes as a plain number or NumPy array (not a
  JAX array, as sampled sites are) is *held* at that value: a model that fixes the field of an
  Ising model at zero gets a reference point with zero field,
- ``structure``: the fixed structure the family lives on (e.g. a neighbour graph),
- ``degeneracy``: a :class:`Degeneracy`, how to tell that simulated data have collapsed to an
  extreme of the support (e.g. the empty or the complete graph), see :mod:`zhat.model.degeneracy`.

The log density of such a site is unavailable; :func:`zhat.expose` replaces it by an estimate.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax.typing import ArrayLike
from numpyro.distributions import constraints

from zhat.model.factor import Estimator, IntractableFactor

Array = jax.Array
LogPotentialFn = Callable[..., Array]


class Transition(NamedTuple):
    """One MCMC transition of a family driven by explicit standard-normal noise.

    - **step** - ``(params, x, noise) -> x'``, leaving p(· | θ) invariant.
    - **noise_shape** - ``(x) -> shape`` of the noise one step uses.
    """

    step: Callable[[dict[str, Array], Array, Array], Array]
    noise_shape: Callable[[Array], tuple[int, ...]]


class PerfectSampler(NamedTuple):
    """Exact draws of a family from explicit standard-normal noise.

    - **draw** - ``(params, noise) -> (x, exact)``; ``exact`` is False when the budget ran out
      (the draw is then not exact) or the parameters are outside what the sampler handles.
      Kernels with randomness of their own may call ``draw(params, key, budget)`` with a PRNG
      key, so that only the noise actually used is drawn.
    - **noise_shape** - ``(budget) -> shape`` of the noise one draw uses for a budget (e.g.
      the largest number of sweeps).
    - **conditions** - one line on when it applies (e.g. 'coupling ≥ 0 or a bipartite graph').
    """

    draw: Callable[[dict[str, Array], Array], tuple[Array, Array]]
    noise_shape: Callable[[int], tuple[int, ...]]
    conditions: str = ""


class Degeneracy(NamedTuple):
    """How full a data set is, to detect simulations that collapse to an extreme.

    - **fill** - ``(x) -> number in [0, 1]`` (e.g. the tie density of a graph); a jax function.
    - **empty**, **full** - what fill 0 and fill 1 are called ("the empty graph", ...).
    - **advice** - what to change when the model's simulations collapse.
    """

    fill: Callable[[Array], Array]
    empty: str
    full: str
    advice: str


@dataclasses.dataclass(frozen=True, eq=False)
class Family:
    """A named unnormalized family; call it with parameters to get a distribution."""

    name: str
    log_potential: LogPotentialFn
    support: constraints.Constraint = dataclasses.field(default_factory=lambda: constraints.real)
    event_shape: tuple[int, ...] = ()
    statistics: Callable[[Array], Array] | None = None
    simulators: Mapping[str, Transition] = dataclasses.field(default_factory=dict)
    perfect_sampler: PerfectSampler | None = None
    default_estimator: Callable[[Family], Estimator] | None = None
    validate: Callable[[Array], None] | None = None
    pseudo_log_likelihood: Callable[..., Array] | None = None
    free_parameters: tuple[str, ...] = ()
    structure: Any = None
    degeneracy: Degeneracy | None = None

    def __call__(self, *, event_shape: tuple[int, ...] | None = None, **params: ArrayLike):
        shape = self.event_shape if event_shape is None else tuple(event_shape)
        return UnnormalizedDistribution(self, params, shape)

    def __repr__(self) -> str:
        return f"Family({self.name!r})"


class UnnormalizedDistribution(IntractableFactor):
    """A member g(·; θ)/Z(θ) of a :class:`Family` at fixed parameters θ."""

    pytree_data_fields = ("params",)
    pytree_aux_fields = ("family", "held")

    def __init__(
        self,
        family: Family,
        params: dict[str, ArrayLike],
        event_shape: tuple[int, ...] = (),
        held: tuple[str, ...] | None = None,
    ) -> None:
        self.family = family
        if held is None:
            held = tuple(
                k for k in family.free_parameters if k in params and not _is_jax(params[k])
            )
        self.held = held
        # fixed inputs given as numbers stay concrete under jit (the reference fit needs them)
        with jax.ensure_compile_time_eval():
            self.params = {k: jnp.asarray(v) for k, v in params.items()}
        default = family.default_estimator(family) if family.default_estimator else None
        super().__init__(batch_shape=(), event_shape=event_shape, estimator=default)

    @property
    def kind(self) -> str:  # type: ignore[override]
        return f"unnormalized family '{self.family.name}'"

    @property
    def support(self) -> constraints.Constraint:  # type: ignore[override]
        return self.family.support

    def validate_data(self, value: ArrayLike, site: str) -> None:
        if self.family.validate is None or isinstance(value, jax.core.Tracer):
            return
        try:
            self.family.validate(value)
        except (ValueError, TypeError) as err:
            raise type(err)(f"Site '{site}' ({self.family.name}): {err}") from err

    def log_potential(self, x: ArrayLike) -> Array:
        """log g(x; θ), the unnormalized log density (no normalizer)."""
        return jnp.asarray(self.family.log_potential(jnp.asarray(x), **self.params))

    def with_params(self, **params: ArrayLike) -> UnnormalizedDistribution:
        """The same family at other parameter values (the rest unchanged)."""
        held = tuple(k for k in self.held if k not in params)
        return UnnormalizedDistribution(
            self.family, {**self.params, **params}, self.event_shape, held
        )

    @property
    def fitted_parameters(self) -> tuple[str, ...]:
        """The free parameters a reference fit estimates (those the model does not hold)."""
        return tuple(k for k in self.family.free_parameters if k not in self.held)

    def statistics(self, x: ArrayLike) -> Array:
        """Sufficient statistics s(x); a clear error if the family declares none."""
        if self.family.statistics is None:
            raise ValueError(f"Family '{self.family.name}' declares no sufficient statistics.")
        return jnp.asarray(self.family.statistics(jnp.asarray(x)))


def _is_jax(value: Any) -> bool:
    return isinstance(value, (jax.Array, jax.core.Tracer))


def unnormalized(
    log_potential: LogPotentialFn | None = None,
    *,
    name: str | None = None,
    support: constraints.Constraint = constraints.real,
    event_shape: tuple[int, ...] = (),
    **extras: Any,
) -> Family | Callable[[LogPotentialFn], Family]:
    """Turn a log-potential ``log g(x, **params)`` into a :class:`Family`.

    Usable bare (``@unnormalized``) or with options (``@unnormalized(support=..., simulator=...)``);
    ``extras`` are the optional :class:`Family` fields (statistics, simulators, perfect sampler,
    default estimator, validate, pseudo-log-likelihood, free parameters).
    """
    fields = {f.name for f in dataclasses.fields(Family)}
    unknown = sorted(set(extras) - fields)
    if unknown:
        raise TypeError(
            f"unnormalized() got unknown options {unknown}; the options are "
            f"{sorted(fields - {'name', 'log_potential'})}."
        )

    def build(fn: LogPotentialFn) -> Family:
        if not callable(fn):
            raise TypeError(f"unnormalized() needs a log-potential function, got {fn!r}.")
        return Family(
            name=name or getattr(fn, "__name__", "family"),
            log_potential=fn,
            support=support,
            event_shape=tuple(event_shape),
            **extras,
        )

    return build if log_potential is None else build(log_potential)
