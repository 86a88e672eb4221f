"""Maximum pseudo-likelihood with Optax (Besag 1975, The Statistician 24(3), 179–195).

    θ̂ = argmax_θ  PL(θ),     PL(θ) = Σ_i log p(y_i | y_{−i}; θ),

the family's ``pseudo_log_likelihood``. For the lattice families each term is a logistic (or
multinomial logistic) regression of a site on its neighbours, so PL is concave in the natural
parameters. The maximiser runs an Optax optimiser (L-BFGS with a line search by default) in
one ``lax.while_loop`` from zero, stopping when the gradient is small.

Standard errors are the square roots of the diagonal of the inverse of −∇²PL(θ̂). These treat
the sites as independent, which they are not: the pseudo-likelihood ignores the dependence
between sites, so these standard errors are usually too small (the sandwich form
H⁻¹ Var[∇PL] H⁻¹ is the consistent one; Besag 1975; Guyon 1995, Random Fields on a Network,
§5.4). Use :func:`zhat.fit.stochastic_approximation` for likelihood-based standard errors.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np
import optax
from jax import lax

from zhat.fit._problem import setup
from zhat.fit.result import invert_information

Array = jax.Array

__all__ = ["PseudoLikelihoodFit", "pseudo_likelihood"]

UNBOUNDED = 15.0
"""An estimate beyond this size means the maximum is at infinity (e^15 odds are certainty on
the natural scale of these families; common practice)."""

CAVEAT = (
    "Pseudo-likelihood standard errors are too small: they treat the sites as independent "
    "and ignore the dependence between them. Use a likelihood fit "
    "(zhat.fit.stochastic_approximation) for honest standard errors."
)


@dataclasses.dataclass(frozen=True)
class PseudoLikelihoodFit:
    """The maximum pseudo-likelihood estimate.

    - **estimate** - the fitted parameters (name -> array).
    - **params** - every parameter of the family (fixed and held ones unchanged).
    - **vector**, **labels** - the estimate as a flat vector and one label per coordinate.
    - **covariance**, **standard_errors** - from the inverse Hessian of −PL (too small; see
      **caveat**).
    - **pseudo_log_likelihood**, **gradient_norm**, **steps**, **converged**.
    """

    estimate: dict[str, Array]
    params: dict[str, Array]
    vector: np.ndarray
    labels: tuple[str, ...]
    covariance: np.ndarray
    standard_errors: dict[str, float]
    pseudo_log_likelihood: float
    gradient_norm: float
    steps: int
    converged: bool
    caveat: str = CAVEAT

    def summary(self) -> str:
        lines = [
            "Maximum pseudo-likelihood (Besag 1975)",
            f"  log PL = {self.pseudo_log_likelihood:.6g}, {self.steps} steps, "
            f"|gradient| = {self.gradient_norm:.2g}"
            + ("" if self.converged else "  (NOT CONVERGED: raise `steps`)"),
            f"  {'parameter':<20}{'estimate':>12}{'std. error*':>14}",
        ]
        for label, value in zip(self.labels, self.vector, strict=True):
            lines.append(f"  {label:<20}{value:>12.5g}{self.standard_errors[label]:>14.3g}")
        lines.append(f"  * {self.caveat}")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def pseudo_likelihood(
    dist: Any,
    data: Any,
    *,
    parameters: tuple[str, ...] | None = None,
    optimizer: optax.GradientTransformation | None = None,
    steps: int = 500,
    tol: float = 1e-8,
) -> PseudoLikelihoodFit:
    """Maximum pseudo-likelihood estimate of ``dist``'s free parameters from ``data``.

    :param dist: the family at parameter values, e.g. ``lattice.ising(graph, field=...,
        coupling=...)``; parameters given as plain numbers are held (see ``parameters``).
    :param parameters: the names to fit; default those the model does not hold.
    :param optimizer: any Optax optimiser (it minimises −PL); default ``optax.lbfgs()``.
        Optimisers that use the value (line searches) receive ``value``, ``grad`` and
        ``value_fn``.
    :param steps: the most optimiser steps.
    :param tol: stop when |∇PL| ≤ tol · (1 + |PL|).
    """
    problem = setup(dist, data, parameters, needs="pseudo_likelihood")
    family, y = problem.dist.family, problem.data

    def objective(v: Array) -> Array:
        return -family.pseudo_log_likelihood(y, **problem.params(v))

    opt = optax.with_extra_args_support(optimizer if optimizer is not None else optax.lbfgs())
    v0 = jnp.zeros_like(problem.start)

    @jax.jit
    def run(v0: Array):
        def cond(carry):
            i, _, _, f, g = carry
            return (i < steps) & (jnp.linalg.norm(g) > tol * (1 + jnp.abs(f)))

        def body(carry):
            i, v, state, f, g = carry
            updates, state = opt.update(g, state, v, value=f, grad=g, value_fn=objective)
            v = optax.apply_updates(v, updates)
            f, g = jax.value_and_grad(objective)(v)
            return i + 1, v, state, f, g

        f0, g0 = jax.value_and_grad(objective)(v0)
        return lax.while_loop(cond, body, (jnp.int32(0), v0, opt.init(v0), f0, g0))

    n, v, _, f, g = run(v0)
    if not bool(jnp.all(jnp.isfinite(v))) or float(jnp.max(jnp.abs(v))) > UNBOUNDED:
        raise ValueError(
            f"The pseudo-likelihood of '{family.name}' has no finite maximum for these data "
            f"(the optimiser ran off to {float(jnp.max(jnp.abs(v))):.3g}): the data may be "
            "separated (e.g. every site agrees with its neighbours) or a parameter is not "
            "identified (e.g. one field per site). Fit fewer parameters."
        )
    hess = np.asarray(jax.hessian(objective)(v), np.float64)
    cov = invert_information(hess, problem.labels)
    se = np.sqrt(np.diag(cov))
    gnorm = float(jnp.linalg.norm(g))
    return PseudoLikelihoodFit(
        estimate=problem.unravel(v),
        params=problem.params(v),
        vector=np.asarray(v, np.float64),
        labels=problem.labels,
        covariance=cov,
        standard_errors=problem.label(se),
        pseudo_log_likelihood=-float(f),
        gradient_norm=gnorm,
        steps=int(n),
        converged=gnorm <= tol * (1 + abs(float(f))),
    )
