"""From a point estimate to a sampler: initial values, reference points and the number of draws.

- :func:`chain_inits` - initial values for MCMC chains near a point estimate: the point's
  parameters, jittered on the unconstrained scale (so every chain stays inside the support),
  and fresh N(0, I) noise for every noise site of the exposed model.
- :func:`reference_at` - the family parameters of an intractable factor at the point, to give
  an auxiliary-draw estimator as its reference θ̂ (``single_auxiliary(reference=...)``).
- :func:`factor_estimate` - log f̂(θ, u) of one factor as a pure function of the parameter
  dict and the noise (differentiable in θ when the estimator is smooth).
- :func:`tune_num_draws` - the number of draws K of an estimator for which sd(log f̂) at the
  point is near a target, 1.2 by default: about the optimum for pseudo-marginal
  Metropolis–Hastings (Doucet, Pitt, Deligiannidis & Kohn 2015, Biometrika 102(2)). The
  variance of log f̂ of an average of K draws falls roughly as 1/K (common practice), so each
  round moves K to K·(sd/target)² and measures again with fresh noise; it stops when the sd is
  within two standard errors of the target, the standard error of a sample sd being
  sd/√(2(n − 1)) (normal approximation, common practice).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax import random
from numpyro.distributions.transforms import biject_to
from numpyro.handlers import seed, substitute, trace

from zhat.model.expose import expose, is_noise_site
from zhat.model.factor import Estimator, IntractableFactor
from zhat.model.unnormalized import UnnormalizedDistribution

Array = jax.Array

__all__ = [
    "DrawsTuning",
    "FactorEstimate",
    "chain_inits",
    "factor_estimate",
    "reference_at",
    "tune_num_draws",
]


def _trace(model: Callable, point: Mapping[str, Any], args: tuple, kwargs: dict) -> dict:
    values = {k: jnp.asarray(v) for k, v in point.items()}
    return trace(substitute(seed(model, random.key(0)), data=values)).get_trace(*args, **kwargs)


def _latent(model_trace: dict) -> list[str]:
    return [
        name
        for name, site in model_trace.items()
        if site["type"] == "sample" and not site["is_observed"] and not is_noise_site(site)
    ]


def _site_layout(exposed: expose, args: tuple, kwargs: dict) -> dict[str, tuple]:
    """(support, shape, is noise) of every latent site, from an abstract trace: the estimates
    themselves are not computed."""
    found: dict[str, tuple] = {}

    def run() -> None:
        model_trace = trace(seed(exposed, random.key(0))).get_trace(*args, **kwargs)
        for name, site in model_trace.items():
            if site["type"] == "sample" and not site["is_observed"]:
                found[name] = (site["fn"].support, jnp.shape(site["value"]), is_noise_site(site))

    jax.eval_shape(run)
    return found


def _check_point(point: Any, latent: list[str], noise: list[str]) -> None:
    if not isinstance(point, Mapping):
        raise TypeError(
            f"point must be a dict from site name to value; got {type(point).__name__}."
        )
    missing = sorted(set(latent) - set(point))
    unknown = sorted(set(point) - set(latent) - set(noise))
    if missing:
        raise ValueError(f"The point lacks the latent sites {missing}; give a value for each.")
    if unknown:
        raise ValueError(
            f"The point has values for {unknown}, which are not latent sites of the model; "
            f"its latent sites are {latent}."
        )


def chain_inits(
    rng_key: Array,
    exposed: expose,
    point: Mapping[str, Any],
    *args: Any,
    num_chains: int = 4,
    jitter: float = 0.1,
    unconstrained: bool = False,
    **kwargs: Any,
) -> dict[str, Array]:
    """``init_params`` for ``num_chains`` chains of ``exposed`` started near ``point``.

    :param point: constrained values of the model's parameter sites (e.g. a fit).
    :param jitter: sd of the normal jitter added on the unconstrained scale (0: exact copies).
    :param unconstrained: return unconstrained values (NumPyro's HMC/NUTS) instead of
        constrained ones (zhat's kernels and ``pseudo_marginal_gibbs``).
    :return: a dict of arrays with a leading axis of ``num_chains`` (none when it is 1), for
        ``zhat.MCMC(..., num_chains=num_chains).run(key, *args, init_params=...)``.
    """
    if not isinstance(exposed, expose):
        raise TypeError("chain_inits needs the exposed model, `zhat.expose(model, ...)`.")
    if not isinstance(num_chains, int) or num_chains < 1:
        raise ValueError(f"num_chains must be a positive integer, got {num_chains!r}.")
    if not jitter >= 0:
        raise ValueError(f"jitter must be ≥ 0, got {jitter!r}.")
    sites = _site_layout(exposed, args, kwargs)
    noise = [n for n, (_, _, is_noise) in sites.items() if is_noise]
    latent = [n for n, (_, _, is_noise) in sites.items() if not is_noise]
    _check_point(point, latent, noise)
    dtype = jnp.result_type(float)

    def one(key: Array) -> dict[str, Array]:
        out = {}
        for i, name in enumerate(latent + noise):
            support, shape, _ = sites[name]
            k = random.fold_in(key, i)
            if name in noise:
                out[name] = random.normal(k, shape, dtype)
                continue
            transform = biject_to(support)
            value = jnp.broadcast_to(jnp.asarray(point[name], dtype), shape)
            free = transform.inv(value)
            if not bool(jnp.all(jnp.isfinite(free))):
                raise ValueError(
                    f"The point's value of '{name}' is outside the support of its prior "
                    f"({support}); give a value inside it."
                )
            free = free + jitter * random.normal(k, jnp.shape(free), dtype)
            out[name] = free if unconstrained else transform(free)
        return out

    if num_chains == 1:
        return one(rng_key)
    chains = [one(k) for k in random.split(rng_key, num_chains)]
    return {name: jnp.stack([c[name] for c in chains]) for name in chains[0]}


def _factor_sites(model_trace: dict) -> dict[str, dict]:
    return {
        name: site
        for name, site in model_trace.items()
        if site["type"] == "sample" and isinstance(site["fn"], IntractableFactor)
    }


def _one_factor(model: Callable, point, args, kwargs, site: str | None) -> tuple[dict, str]:
    if isinstance(model, expose):
        model = model.fn  # the factors themselves, not their estimates
    model_trace = _trace(model, point, args, kwargs)
    _check_point(point, _latent(model_trace), [])
    factors = _factor_sites(model_trace)
    if not factors:
        raise ValueError("The model has no intractable factor.")
    if site is None:
        if len(factors) > 1:
            raise ValueError(
                f"The model has several intractable factors {sorted(factors)}: name one with site=."
            )
        site = next(iter(factors))
    if site not in factors:
        raise ValueError(
            f"No intractable factor at site {site!r}; the factors are {sorted(factors)}."
        )
    return factors[site], site


def reference_at(
    model: Callable, point: Mapping[str, Any], *args: Any, site: str | None = None, **kwargs: Any
) -> dict[str, Array]:
    """The free parameters of the unnormalized family at ``site`` when the model's parameters
    are ``point``: pass it as ``reference=`` to ``single_auxiliary`` / ``multiple_auxiliary``."""
    factor, name = _one_factor(model, point, args, kwargs, site)
    dist = factor["fn"]
    if not isinstance(dist, UnnormalizedDistribution):
        raise TypeError(f"The factor at '{name}' is a {dist.kind}, which takes no reference point.")
    return {k: dist.params[k] for k in dist.fitted_parameters}


class FactorEstimate(NamedTuple):
    """log f̂ of one factor as a pure function.

    - **site** / **estimator** - the factor and its estimator.
    - **noise_shape** - the shape of the noise u of one estimate.
    - **log_estimate** - ``(point, noise) -> log f̂`` with ``point`` the parameter sites' values.
    """

    site: str
    estimator: Estimator
    noise_shape: tuple[int, ...]
    log_estimate: Callable[[Mapping[str, Any], Array], Array]


def factor_estimate(
    model: Callable,
    estimator: Estimator,
    point: Mapping[str, Any],
    *args: Any,
    site: str | None = None,
    **kwargs: Any,
) -> FactorEstimate:
    """log f̂(θ, u) of the factor at ``site`` of ``model`` under ``estimator`` (the noise shape
    taken at ``point``)."""
    if not isinstance(estimator, Estimator):
        raise TypeError(f"estimator must be a zhat Estimator; got {type(estimator).__name__}.")
    factor, name = _one_factor(model, point, args, kwargs, site)
    shape = tuple(int(n) for n in estimator.noise_shape(factor["fn"], factor["value"]))
    base = model.fn if isinstance(model, expose) else model

    def log_estimate(params: Mapping[str, Any], noise: Array) -> Array:
        here = _trace(base, params, args, kwargs)[name]
        return estimator.log_estimate(here["fn"], here["value"], noise)

    return FactorEstimate(name, estimator, shape, log_estimate)


class DrawsTuning(NamedTuple):
    """What :func:`tune_num_draws` chose: ``num_draws`` with sd(log f̂) = ``sd`` ± ``sd_error``
    at the point (target ``target``), the tuned ``estimator``, and every (draws, sd) tried."""

    num_draws: int
    sd: float
    sd_error: float
    target: float
    estimator: Estimator
    history: tuple[tuple[int, float], ...]


def _noise_sd(key: Array, fe: FactorEstimate, point, n: int) -> tuple[float, float]:
    noise = random.normal(key, (n, *fe.noise_shape))
    values = jax.lax.map(jax.jit(lambda u: fe.log_estimate(point, u)), noise, batch_size=8)
    values = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(values)):
        return math.inf, math.inf
    sd = float(np.std(values, ddof=1))
    return sd, sd / math.sqrt(2 * (n - 1))


def tune_num_draws(
    rng_key: Array,
    make_estimator: Callable[..., Estimator],
    model: Callable,
    point: Mapping[str, Any],
    *args: Any,
    target: float = 1.2,
    first: int = 1,
    max_draws: int = 4096,
    num_noise: int = 400,
    max_rounds: int = 8,
    site: str | None = None,
    **kwargs: Any,
) -> DrawsTuning:
    """The number of draws for which sd(log f̂) at ``point`` is within 2 standard errors of
    ``target`` (see the module docstring).

    :param make_estimator: ``num_draws -> Estimator``, e.g. ``importance_sampling`` or
        ``lambda num_draws: single_auxiliary(num_draws, reference=...)``.
    :param num_noise: fresh noise draws per measurement of the sd.
    :raises ValueError: when even ``max_draws`` draws leave the sd above the target.
    """
    if not target > 0:
        raise ValueError(f"target must be a positive sd, got {target!r}.")
    if not isinstance(num_noise, int) or num_noise < 3:
        raise ValueError(f"num_noise must be an integer ≥ 3, got {num_noise!r}.")
    if not (isinstance(first, int) and isinstance(max_draws, int) and 1 <= first <= max_draws):
        raise ValueError(f"need integers 1 ≤ first ≤ max_draws; got {first!r}, {max_draws!r}.")
    k, history, tried = first, [], {}
    for i in range(max_rounds):
        estimator = make_estimator(num_draws=k)
        fe = factor_estimate(model, estimator, point, *args, site=site, **kwargs)
        sd, err = _noise_sd(random.fold_in(rng_key, i), fe, point, num_noise)
        history.append((k, sd))
        tried[k] = (sd, err, estimator)
        close = abs(sd - target) <= 2 * err
        if close or (sd < target and k == 1):
            return DrawsTuning(k, sd, err, float(target), estimator, tuple(history))
        if sd > target and k == max_draws:
            raise ValueError(
                f"sd(log f̂) is {sd:.3g} ± {err:.2g} with max_draws={max_draws} draws, above "
                f"the target {target}: raise max_draws (the sd falls about as 1/√draws), or "
                "use a better proposal or reference point."
            )
        ratio = (sd / target) ** 2 if math.isfinite(sd) else 4.0
        new = min(max_draws, max(1, math.ceil(k * ratio)))
        if new == k:
            new = k + 1 if sd > target else k - 1
        if new in tried:  # stepping between two neighbours: keep the closer that is not above
            below = [(d, v) for d, v in tried.items() if v[0] <= target + 2 * v[1]]
            d, (sd, err, estimator) = min(
                below or tried.items(), key=lambda dv: abs(dv[1][0] - target)
            )
            return DrawsTuning(d, sd, err, float(target), estimator, tuple(history))
        k = new
    raise ValueError(
        f"No number of draws gave sd(log f̂) within 2 standard errors of {target} in "
        f"{max_rounds} rounds (tried {history}); raise max_rounds or num_noise."
    )
