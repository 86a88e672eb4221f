"""A fitting problem: the free parameters of one family as a flat vector, with checked inputs.

Every fit in :mod:`zhat.fit` works on a flat vector v of the parameters it estimates (the
family's free parameters that the model does not hold, or those named by ``parameters``); the
other parameters (fixed inputs such as covariates, and held parameters) stay at their values.
The score term of every likelihood gradient is ∇_v log g(x; v) by automatic differentiation:
for an exponential family, log g = θ·s(x) + a(x), so it is the sufficient statistic s(x);
the identity ∇ log L(θ) = ∇ log g(y; θ) − E_θ[∇ log g(x; θ)] holds for any family.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax.flatten_util import ravel_pytree

from zhat.model.degeneracy import check_collapse
from zhat.model.unnormalized import Transition, UnnormalizedDistribution

Array = jax.Array
LogPriorFn = Callable[[dict[str, Array]], Array]


class Problem(NamedTuple):
    """What a fit needs, built once per call by :func:`setup`."""

    dist: UnnormalizedDistribution
    data: Array
    fitted: tuple[str, ...]
    labels: tuple[str, ...]  # one per coordinate of v, e.g. 'coefficients[1]'
    start: Array  # v at the distribution's parameter values
    unravel: Callable[[Array], dict[str, Array]]
    fixed: dict[str, Array]
    log_prior: LogPriorFn | None
    linear: bool  # log g(x; v) linear in v (an exponential family in these parameters)

    def params(self, v: Array) -> dict[str, Array]:
        return {**self.fixed, **self.unravel(v)}

    def log_potential(self, v: Array, x: Array) -> Array:
        return self.dist.family.log_potential(x, **self.params(v))

    def score(self, v: Array, x: Array) -> Array:
        """∇_v log g(x; v) (the sufficient statistic for an exponential family)."""
        return jax.grad(self.log_potential)(v, x)

    def prior_value(self, v: Array) -> Array:
        if self.log_prior is None:
            return jnp.zeros((), v.dtype)
        return jnp.asarray(self.log_prior(self.unravel(v)), v.dtype)

    def prior_hessian(self, v: Array) -> Array:
        return jax.hessian(self.prior_value)(v)

    def label(self, values: Array) -> dict[str, float]:
        return {k: float(x) for k, x in zip(self.labels, np.asarray(values), strict=True)}


def setup(
    dist: Any,
    data: Any,
    parameters: tuple[str, ...] | None,
    log_prior: LogPriorFn | None = None,
    start: dict[str, Any] | None = None,
    needs: str = "",
) -> Problem:
    """Check the inputs of a fit and flatten its parameters.

    :param needs: 'pseudo_likelihood' or 'simulator': what the fit needs from the family.
    """
    if not isinstance(dist, UnnormalizedDistribution):
        raise TypeError(
            "zhat.fit needs a family called with its parameters, e.g. "
            f"`lattice.ising(graph, field=jnp.asarray(0.0), coupling=jnp.asarray(0.2))`; got "
            f"{type(dist).__name__}."
        )
    family = dist.family
    if needs == "pseudo_likelihood" and family.pseudo_log_likelihood is None:
        raise ValueError(
            f"Family '{family.name}' defines no pseudo-likelihood; use "
            "zhat.fit.stochastic_approximation (it needs a simulator) or give the family a "
            "`pseudo_log_likelihood`."
        )
    if needs == "simulator" and not family.simulators:
        raise ValueError(
            f"Family '{family.name}' has no simulator, so its expectations E_θ[·] cannot be "
            "simulated; give the family `simulators={'name': Transition(step, noise_shape)}`, "
            "or use zhat.fit.pseudo_likelihood."
        )
    fitted = dist.fitted_parameters if parameters is None else tuple(parameters)
    unknown = sorted(set(fitted) - set(family.free_parameters))
    if unknown:
        raise ValueError(
            f"Family '{family.name}' has no free parameters {unknown}; its free parameters "
            f"are {list(family.free_parameters)}."
        )
    if not fitted:
        raise ValueError(
            f"Nothing to fit: every free parameter of '{family.name}' "
            f"({list(family.free_parameters)}) is held because it was given as a plain number. "
            "Pass `parameters=(...)` to name the ones to estimate, or give them as JAX arrays "
            "(e.g. jnp.asarray(0.0))."
        )
    y = _checked_data(dist, data)
    values = dict(dist.params)
    if start is not None:
        extra = sorted(set(start) - set(fitted))
        if extra:
            raise ValueError(
                f"start has values for {extra}, which this fit does not estimate; it "
                f"estimates {list(fitted)}."
            )
        values.update({k: jnp.asarray(v, jnp.result_type(float)) for k, v in start.items()})
    free = {k: jnp.asarray(values[k], jnp.result_type(float)) for k in fitted}
    v0, unravel_tuple = ravel_pytree(tuple(free[k] for k in fitted))  # in the order named

    def unravel(v: Array) -> dict[str, Array]:
        return dict(zip(fitted, unravel_tuple(v), strict=True))

    if not bool(jnp.all(jnp.isfinite(v0))):
        raise ValueError(f"The starting values {free} are not all finite; give finite `start`.")
    fixed = {k: v for k, v in dist.params.items() if k not in fitted}
    labels = tuple(
        name if np.ndim(free[name]) == 0 else f"{name}[{i}]"
        for name in fitted
        for i in range(max(1, int(np.size(free[name]))))
    )
    if log_prior is not None and not callable(log_prior):
        raise TypeError(
            "log_prior must be a function of a dict of the fitted parameters returning a log "
            f"density, e.g. `lambda p: -0.5 * p['coupling'] ** 2`; got {log_prior!r}."
        )
    problem = Problem(dist, y, fitted, labels, v0, unravel, fixed, log_prior, False)
    hess = jax.hessian(problem.log_potential)(v0, y)
    if not bool(jnp.all(jnp.isfinite(hess))) or not bool(
        jnp.isfinite(problem.log_potential(v0, y))
    ):
        raise ValueError(
            f"log g(y; θ) of '{family.name}' is not finite at the start {problem.label(v0)}; "
            "give a `start` inside the parameter space."
        )
    if log_prior is not None and not bool(jnp.isfinite(problem.prior_value(v0))):
        raise ValueError(f"log_prior is not finite at the start {problem.label(v0)}.")
    return problem._replace(linear=bool(jnp.all(hess == 0)))


def check_degenerate(problem: Problem, v: Array, states: Array, where: str) -> None:
    """Stop when the chain states simulated at v collapsed (see :mod:`zhat.model.degeneracy`)."""
    dist = problem.dist.with_params(**problem.unravel(v))
    check_collapse(dist, problem.data, states, where)


def simulator(dist: UnnormalizedDistribution, name: str | None) -> Transition:
    """The family's named simulator (its first by default)."""
    sims = dist.family.simulators
    if name is None:
        return next(iter(sims.values()))
    if name not in sims:
        raise ValueError(
            f"Family '{dist.family.name}' has no simulator {name!r}; it has {sorted(sims)}."
        )
    return sims[name]


def _checked_data(dist: UnnormalizedDistribution, data: Any) -> Array:
    if isinstance(data, jax.core.Tracer):
        raise ValueError("zhat.fit needs concrete data; call it outside jit.")
    arr = np.asarray(data)
    if arr.dtype == object or not np.issubdtype(arr.dtype, np.number):
        raise TypeError(f"The data must be a numeric array; got dtype {arr.dtype}.")
    if np.issubdtype(arr.dtype, np.floating) and not np.isfinite(arr).all():
        where = np.argwhere(~np.isfinite(arr))[:3].tolist()
        raise ValueError(
            f"The data contain NaN or infinite values at {where}; remove or impute them "
            "before fitting."
        )
    if dist.family.validate is not None:
        try:
            dist.family.validate(arr)
        except (ValueError, TypeError) as err:
            raise type(err)(f"Data for '{dist.family.name}': {err}") from err
    return jnp.asarray(arr, jnp.result_type(float)) if arr.dtype == bool else jnp.asarray(arr)
