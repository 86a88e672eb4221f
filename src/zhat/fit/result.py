"""The result of a likelihood fit: estimate, covariance, standard errors, Monte Carlo error.

At the estimate θ̂ the covariance is the inverse of the observed information

    J(θ̂) = Cov_θ̂[∇ log g(x; θ̂)] + E_θ̂[∇² log g(x; θ̂)] − ∇² log g(y; θ̂) − ∇² log π(θ̂)

(the negative Hessian of the log-likelihood, plus the prior's for MAP; for an exponential
family only Cov_θ̂[s(x)], the Fisher information). The estimate solves the simulated score
equation ∇ log g(y; θ̂) + ∇ log π(θ̂) = Ê_θ̂[∇ log g(x; θ̂)], so its Monte Carlo error is, by the
delta method, J⁻¹ Cov_MC(Ê) J⁻¹ (Cov_MC from batch means over independent chains).
"""

from __future__ import annotations

import dataclasses

import jax
import numpy as np

from zhat.fit._problem import Problem

Array = jax.Array

__all__ = ["LikelihoodFit"]


@dataclasses.dataclass(frozen=True)
class LikelihoodFit:
    """Maximum likelihood (or MAP) estimate from simulations.

    - **estimate** - fitted parameters (name -> array); **params** - all of the family's.
    - **vector**, **labels** - the estimate flat, one label per coordinate.
    - **covariance**, **standard_errors** - from the inverse observed information
      **information** (plus the prior's curvature for MAP).
    - **monte_carlo_covariance**, **monte_carlo_error** - of the estimate itself: how far it may
      be from the exact maximiser because of simulation noise.
    - **num_simulations** - simulator transitions used, summed over chains.
    - **ess_fraction** - effective sample size / draws of the final importance weights (1 when
      the final draws were made at the estimate).
    - **rounds** - simulation rounds (Monte Carlo maximum likelihood).
    - **path** - iterates of the stochastic approximation (steps, d), if it ran.
    """

    method: str
    estimate: dict[str, Array]
    params: dict[str, Array]
    vector: np.ndarray
    labels: tuple[str, ...]
    covariance: np.ndarray
    standard_errors: dict[str, float]
    monte_carlo_covariance: np.ndarray
    monte_carlo_error: dict[str, float]
    information: np.ndarray
    num_simulations: int
    ess_fraction: float
    rounds: int
    is_map: bool
    path: np.ndarray | None = None
    notes: tuple[str, ...] = ()

    def summary(self) -> str:
        kind = "MAP" if self.is_map else "Maximum likelihood"
        lines = [
            f"{kind} by {self.method}",
            f"  {self.num_simulations:,} simulator transitions, {self.rounds} round(s), "
            f"final ESS/draws = {self.ess_fraction:.2f}",
            f"  {'parameter':<20}{'estimate':>12}{'std. error':>13}{'MC error':>12}",
        ]
        for i, label in enumerate(self.labels):
            lines.append(
                f"  {label:<20}{self.vector[i]:>12.5g}{self.standard_errors[label]:>13.3g}"
                f"{self.monte_carlo_error[label]:>12.2g}"
            )
        lines.append(
            "  std. error: from the inverse observed information"
            + (" (with the prior's curvature)" if self.is_map else "")
            + "; MC error: simulation error of the estimate."
        )
        lines.extend(f"  note: {n}" for n in self.notes)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def build(
    problem: Problem,
    method: str,
    v: Array,
    information: Array,
    score_mean_cov: Array,
    num_simulations: int,
    ess_fraction: float,
    rounds: int,
    path: Array | None = None,
    notes: tuple[str, ...] = (),
) -> LikelihoodFit:
    """Assemble a :class:`LikelihoodFit` (J⁻¹ and the delta-method Monte Carlo error)."""
    info = np.asarray(information, np.float64)
    cov = invert_information(info, problem.labels)
    mc_cov = cov @ np.asarray(score_mean_cov, np.float64) @ cov
    return LikelihoodFit(
        method=method,
        estimate=problem.unravel(v),
        params=problem.params(v),
        vector=np.asarray(v, np.float64),
        labels=problem.labels,
        covariance=cov,
        standard_errors=problem.label(np.sqrt(np.diag(cov))),
        monte_carlo_covariance=mc_cov,
        monte_carlo_error=problem.label(np.sqrt(np.clip(np.diag(mc_cov), 0, None))),
        information=info,
        num_simulations=int(num_simulations),
        ess_fraction=float(ess_fraction),
        rounds=int(rounds),
        is_map=problem.log_prior is not None,
        path=None if path is None else np.asarray(path),
        notes=notes,
    )


def invert_information(matrix: np.ndarray, labels: tuple[str, ...]) -> np.ndarray:
    """Inverse of a positive-definite information matrix, or an error naming the direction."""
    sym = 0.5 * (matrix + matrix.T)
    eig, vec = np.linalg.eigh(sym)
    if not np.all(np.isfinite(eig)) or eig.min() <= 1e-10 * max(1.0, abs(eig.max())):
        worst = vec[:, np.argmin(eig)] if np.all(np.isfinite(eig)) else np.ones(len(labels))
        parts = ", ".join(f"{c:+.2f}·{lab}" for c, lab in zip(worst, labels, strict=True))
        raise ValueError(
            f"The information matrix is singular along {parts}: the data do not identify "
            "that combination of parameters (or the simulated chains did not move). Fit "
            "fewer parameters, add a prior, or run more draws."
        )
    return (vec / eig) @ vec.T
