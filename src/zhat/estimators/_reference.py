"""The reference point θ̂ of auxiliary-draw estimators: given, or the maximum pseudo-likelihood.

Maximum pseudo-likelihood (Besag 1975, The Statistician 24(3)) maximises
Σ_i log p(x_i | x_{−i}; θ), concave in the natural parameters of the families here, by damped
Newton steps on the family's free parameters. It runs eagerly, on concrete data, once per
data set.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np
from jax.flatten_util import ravel_pytree

from zhat.model.degeneracy import simulate_and_check
from zhat.model.unnormalized import UnnormalizedDistribution

Array = jax.Array

__all__ = ["maximum_pseudo_likelihood", "reference_params"]

UNBOUNDED = 15.0
"""A free parameter beyond this size at the 'maximum' means the maximum is at infinity: on
the natural scale of these families, e^15 odds are certainty (common practice)."""


def maximum_pseudo_likelihood(
    dist: UnnormalizedDistribution,
    data: Array,
    *,
    parameters: tuple[str, ...] | None = None,
    max_steps: int = 50,
    tol: float = 1e-9,
) -> dict[str, Array]:
    """Maximum pseudo-likelihood estimate of ``dist``'s free parameters from ``data``.

    :param parameters: the names to fit; default the free parameters the model does not hold
        (see :attr:`UnnormalizedDistribution.fitted_parameters`).

    :return: the full parameter dict (fixed inputs and held parameters unchanged, the other
        free ones at the estimate).
    """
    family = dist.family
    if family.pseudo_log_likelihood is None or not family.free_parameters:
        raise ValueError(
            f"Family '{family.name}' defines no pseudo-likelihood; give the estimator an "
            "explicit `reference={...}` point."
        )
    fitted = dist.fitted_parameters if parameters is None else tuple(parameters)
    unknown = sorted(set(fitted) - set(family.free_parameters))
    if unknown:
        raise ValueError(
            f"Family '{family.name}' has no free parameters {unknown}; its free parameters "
            f"are {list(family.free_parameters)}."
        )
    if not fitted:
        return dict(dist.params)
    with jax.ensure_compile_time_eval():
        fixed = {k: v for k, v in dist.params.items() if k not in fitted}
        for k, v in fixed.items():
            if isinstance(v, jax.core.Tracer):
                raise ValueError(
                    f"The fixed input '{k}' of family '{family.name}' is traced; give the "
                    "estimator an explicit `reference={...}` point."
                )
        free0 = {k: jnp.zeros(jnp.shape(dist.params[k]), jnp.result_type(float)) for k in fitted}
        flat0, unravel = ravel_pytree(free0)

        def objective(v: Array) -> Array:
            return -family.pseudo_log_likelihood(data, **fixed, **unravel(v))

        value_grad = jax.jit(jax.value_and_grad(objective))
        hessian = jax.jit(jax.hessian(objective))
        v, (f, g) = flat0, value_grad(flat0)
        for _ in range(max_steps):
            h = hessian(v) + 1e-8 * jnp.eye(v.size)
            step = jnp.linalg.solve(h, g)
            t = 1.0
            while True:
                f_new, g_new = value_grad(v - t * step)
                if f_new <= f or t < 1e-6:
                    break
                t *= 0.5
            v, f_old, f, g = v - t * step, f, f_new, g_new
            if abs(float(f_old - f)) < tol * (1 + abs(float(f))):
                break
        if not bool(jnp.all(jnp.isfinite(v))) or float(jnp.max(jnp.abs(v))) > UNBOUNDED:
            raise ValueError(
                f"The pseudo-likelihood of '{family.name}' has no finite maximum for these data "
                f"(the Newton steps ran off to {float(jnp.max(jnp.abs(v))):.3g}): the data may "
                "be separated (e.g. every site agrees with its neighbours) or a parameter is "
                "not identified (e.g. one field per site). Give the estimator an explicit "
                "`reference={...}` point."
            )
        return {**dist.params, **unravel(v)}


class ReferenceCache:
    """Remembers θ̂ per data set so that re-tracing the model does not refit it."""

    def __init__(self, reference: str | Mapping[str, Any] | None) -> None:
        if reference is not None and not isinstance(reference, (str, Mapping)):
            raise TypeError(
                "reference must be 'pseudo_likelihood' or a dict of parameter values; got "
                f"{type(reference).__name__}."
            )
        if isinstance(reference, str) and reference != "pseudo_likelihood":
            raise ValueError(f"reference must be 'pseudo_likelihood' or a dict; got {reference!r}.")
        self.reference = reference
        self._fits: dict[tuple[int, bytes], dict[str, Array]] = {}
        self._checked: set[tuple] = set()

    def __call__(
        self, dist: UnnormalizedDistribution, data: Array, simulator: str | None = None
    ) -> dict[str, Array]:
        """θ̂ for ``dist`` and ``data``. When the estimator draws from ``simulator`` (not a
        perfect sampler), θ̂ is also checked once for degeneracy: a few simulator chains there
        must not collapse (:mod:`zhat.model.degeneracy`)."""
        if isinstance(self.reference, Mapping):
            unknown = sorted(set(self.reference) - set(dist.params))
            if unknown:
                raise ValueError(
                    f"reference has parameters {unknown} that family '{dist.family.name}' does "
                    f"not have; its parameters are {sorted(dist.params)}."
                )
            given = {k: jnp.asarray(v) for k, v in self.reference.items()}
            self._check(dist, data, given, simulator, "the estimator's reference point")
            return {**dist.params, **given}
        if isinstance(data, jax.core.Tracer):
            raise ValueError(
                "The pseudo-likelihood reference needs concrete data, but the data are traced "
                "(e.g. MCMC(jit_model_args=True)). Give the estimator `reference={...}`."
            )
        fitted = dist.fitted_parameters
        held = {k: np.asarray(dist.params[k]).tobytes() for k in dist.held}
        key = (id(dist.family), np.asarray(data).tobytes(), tuple(sorted(held.items())))
        if key not in self._fits:
            fit = maximum_pseudo_likelihood(dist, data)
            self._fits[key] = {k: fit[k] for k in fitted}
        where = "the estimator's reference point (maximum pseudo-likelihood)"
        self._check(dist, data, self._fits[key], simulator, where)
        return {**dist.params, **self._fits[key]}

    def _check(self, dist, data, point: dict[str, Array], simulator: str | None, where: str):
        if simulator is None or dist.family.degeneracy is None:
            return
        if any(isinstance(v, jax.core.Tracer) for v in jax.tree.leaves((data, point))):
            return
        key = (id(dist.family), np.asarray(data).tobytes(), simulator) + tuple(
            (k, np.asarray(v).tobytes()) for k, v in sorted(point.items())
        )
        if key in self._checked:
            return
        with jax.ensure_compile_time_eval():
            simulate_and_check(dist.with_params(**point), data, where, simulator=simulator)
        self._checked.add(key)


def reference_params(
    reference: str | Mapping[str, Any] | None, dist: UnnormalizedDistribution, data: Array
) -> dict[str, Array]:
    """θ̂ for one call (no caching)."""
    return ReferenceCache(reference or "pseudo_likelihood")(dist, data)
