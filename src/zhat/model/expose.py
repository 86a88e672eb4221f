"""``expose``: the effect handler that turns intractable factors into noise sites and estimates.

For every site whose distribution is an :class:`~zhat.model.factor.IntractableFactor` (an
observed unnormalized family, or a block marked by :func:`zhat.integrate_out`), ``expose``

1. adds a latent site ``f"{name}_noise"`` with a N(0, I) prior, of the estimator's noise shape,
2. replaces the site's density by the estimate log f̂(θ, u) computed from that noise,
3. records log f̂ as the deterministic site ``f"{name}_log_estimate"`` (``record=True``).

The result is an ordinary NumPyro model on the augmented space (θ, u) whose θ-marginal is the
exact posterior when every estimator is unbiased (Andrieu & Roberts 2009, Ann. Statist. 37(2)):
any valid MCMC kernel on (θ, u) is a pseudo-marginal sampler.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpyro
import numpyro.distributions as dist
from jax.typing import ArrayLike
from numpyro.distributions import constraints
from numpyro.handlers import seed, trace
from numpyro.primitives import Messenger

from zhat.model.factor import Estimator, IntractableFactor, as_scalar_log

Array = jax.Array
INFER_KEY = "zhat"
NOISE_SUFFIX = "_noise"
ESTIMATE_SUFFIX = "_log_estimate"


class EstimatedFactor(dist.Distribution):
    """The density of an exposed site: the constant log f̂ whatever the observed value."""

    support = constraints.real
    pytree_data_fields = ("log_estimate",)

    def __init__(self, log_estimate: ArrayLike, event_shape: tuple[int, ...]) -> None:
        self.log_estimate = jnp.asarray(log_estimate)
        super().__init__(batch_shape=(), event_shape=event_shape)

    def log_prob(self, value: ArrayLike) -> Array:
        return self.log_estimate

    def sample(self, key: Array, sample_shape: tuple[int, ...] = ()) -> Array:
        raise NotImplementedError("An estimated factor cannot be sampled.")


class FactorInfo(NamedTuple):
    """What ``expose`` did at one site (see :meth:`expose.describe`)."""

    site: str
    noise_site: str
    estimate_site: str | None
    noise_shape: tuple[int, ...]
    estimator: Estimator


class expose(Messenger):
    """Expose the noise of every intractable factor of ``fn`` as a standard-normal latent site.

    :param fn: the model.
    :param estimators: one :class:`~zhat.model.factor.Estimator` for every marked site, or a
        mapping from site name to estimator. Sites not named use the estimator given at the
        site or the family's documented default; a site with neither is an error.
    :param record: record log f̂ at each draw as ``f"{name}_log_estimate"``.
    """

    def __init__(
        self,
        fn: Callable | None = None,
        estimators: Estimator | Mapping[str, Estimator] | None = None,
        *,
        record: bool = True,
    ) -> None:
        if estimators is not None and not isinstance(estimators, (Estimator, Mapping)):
            raise TypeError(
                "expose(estimators=...) takes one zhat Estimator or a dict from site name to "
                f"Estimator; got {type(estimators).__name__}."
            )
        if isinstance(estimators, Mapping):
            bad = {
                k: type(v).__name__ for k, v in estimators.items() if not isinstance(v, Estimator)
            }
            if bad:
                raise TypeError(f"expose(estimators=...) values must be Estimators; got {bad}.")
        self.estimators = estimators
        self.record = record
        self._names: dict[str, str] = {}
        self._emitting = False
        super().__init__(fn)

    def __enter__(self):
        self._names, self._emitting = {}, False
        return super().__enter__()

    def _claim(self, name: str, owner: str) -> None:
        """Register a site name; a clash with a name zhat adds is an error naming both."""
        if name in self._names:
            first, second = self._names[name], owner
            raise ValueError(
                f"Site name '{name}' is used twice ({first}; {second}). zhat adds the sites "
                f"'<factor>{NOISE_SUFFIX}' and '<factor>{ESTIMATE_SUFFIX}' for each intractable "
                "factor: rename the model's own site."
            )
        self._names[name] = owner

    def _estimator_for(self, name: str, factor: IntractableFactor) -> Estimator:
        if isinstance(self.estimators, Estimator):
            return self.estimators
        if isinstance(self.estimators, Mapping) and name in self.estimators:
            return self.estimators[name]
        chosen = factor.default_estimator()
        if chosen is None:
            raise ValueError(
                f"No estimator for the {factor.kind} at site '{name}', and it has no default. "
                f"Choose one: `zhat.expose(model, estimators={{'{name}': ...}})`, e.g. "
                "`zhat.estimators.importance_sampling(num_draws=32)`."
            )
        return chosen

    def process_message(self, msg: dict[str, Any]) -> None:
        wrapped = _wrapped_factor(msg["fn"]) if msg["type"] == "sample" else None
        if wrapped is not None:
            raise ValueError(
                f"The {wrapped.kind} at site '{msg['name']}' sits inside a plate or was "
                "expanded, masked or reshaped. Give each independent replicate its own site "
                "(a Python loop over sites), or one factor whose estimator sums the replicates."
            )
        if self._emitting:
            return
        if msg["type"] in ("sample", "deterministic"):
            self._claim(msg["name"], "a site of the model")
        if msg["type"] != "sample" or not isinstance(msg["fn"], IntractableFactor):
            return
        name, factor = msg["name"], msg["fn"]
        if not msg["is_observed"]:
            raise ValueError(
                f"The {factor.kind} at site '{name}' is not observed. zhat estimates the "
                "likelihood of observed data only: pass `obs=` at this site."
            )
        if msg["cond_indep_stack"] or factor.batch_shape != ():
            raise ValueError(
                f"The {factor.kind} at site '{name}' sits inside a plate or has batch shape "
                f"{factor.batch_shape}. Give each independent replicate its own site (a Python "
                "loop over sites), or one factor whose estimator sums the replicates."
            )
        estimator = self._estimator_for(name, factor)
        data = msg["value"]
        factor.validate_data(data, name)
        shape = tuple(int(n) for n in estimator.noise_shape(factor, data))
        noise_name = name + NOISE_SUFFIX
        self._claim(noise_name, f"the noise site of factor '{name}'")
        if self.record:
            self._claim(name + ESTIMATE_SUFFIX, f"the log estimate of factor '{name}'")
        tag = {"role": "noise", "factor": name, "estimator": estimator.name}
        self._emitting = True
        try:
            noise = numpyro.sample(
                noise_name,
                dist.Normal(0.0, 1.0).expand(shape).to_event(len(shape)),
                infer={INFER_KEY: tag},
            )
            log_fhat = as_scalar_log(
                estimator.log_estimate(factor, data, noise), f"Estimator '{estimator.name}'"
            )
            if self.record:
                numpyro.deterministic(name + ESTIMATE_SUFFIX, log_fhat)
        finally:
            self._emitting = False
        msg["fn"] = EstimatedFactor(log_fhat, jnp.shape(data))
        msg["infer"] = {
            **msg["infer"],
            INFER_KEY: {
                "role": "estimate",
                "noise_site": noise_name,
                "noise_shape": shape,
                "estimator": estimator,
            },
        }

    def postprocess_message(self, msg: dict[str, Any]) -> None:
        # Latent values reach the model as JAX arrays even when substituted as plain numbers:
        # families hold free parameters the model passes as plain numbers fixed (see
        # zhat.model.unnormalized), and a sampled value must never be mistaken for one.
        if msg["type"] == "sample" and not msg["is_observed"]:
            value = msg["value"]
            if value is not None and not isinstance(value, (jax.Array, jax.core.Tracer)):
                msg["value"] = jnp.asarray(value)

    def describe(self, *args: Any, **kwargs: Any) -> list[FactorInfo]:
        """Trace the model abstractly (no computation) and list what was exposed where."""
        found: list[FactorInfo] = []

        def run() -> None:
            model_trace = trace(seed(self, jax.random.key(0))).get_trace(*args, **kwargs)
            for name, tag in estimate_sites(model_trace).items():
                found.append(
                    FactorInfo(
                        name,
                        tag["noise_site"],
                        name + ESTIMATE_SUFFIX if self.record else None,
                        tag["noise_shape"],
                        tag["estimator"],
                    )
                )

        jax.eval_shape(run)
        return found


def _wrapped_factor(fn: Any) -> IntractableFactor | None:
    """The intractable factor inside NumPyro's wrappers (expand, to_event, mask), if any."""
    wrappers = (dist.ExpandedDistribution, dist.Independent, dist.MaskedDistribution)
    while isinstance(fn, wrappers):
        fn = fn.base_dist
        if isinstance(fn, IntractableFactor):
            return fn
    return None


def is_noise_site(site: dict[str, Any]) -> bool:
    """Whether a trace site is a noise site added by :class:`expose`."""
    return site["type"] == "sample" and site["infer"].get(INFER_KEY, {}).get("role") == "noise"


def noise_sites(model_trace: Mapping[str, dict[str, Any]]) -> tuple[str, ...]:
    """Names of the noise sites of an exposed model's trace, in trace order."""
    return tuple(name for name, site in model_trace.items() if is_noise_site(site))


def estimate_sites(model_trace: Mapping[str, dict[str, Any]]) -> dict[str, dict[str, Any]]:
    """The exposed factor sites of a trace with their tags (estimator, noise site and shape)."""
    return {
        name: site["infer"][INFER_KEY]
        for name, site in model_trace.items()
        if site["type"] == "sample" and site["infer"].get(INFER_KEY, {}).get("role") == "estimate"
    }
