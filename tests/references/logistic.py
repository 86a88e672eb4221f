"""Maximum likelihood logistic regression by scipy, the reference for pseudo-likelihood fits
(Besag 1975: maximum pseudo-likelihood of an autologistic or Ising model is a logistic
regression of each label on its neighbours)."""

from __future__ import annotations

import numpy as np
from scipy import optimize, special


def logistic_fit(design: np.ndarray, response: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients of the logistic regression of ``response`` on ``design`` and (XᵀWX)⁻¹."""

    def negative(beta):
        eta = design @ beta
        return np.sum(np.logaddexp(0.0, eta) - response * eta)

    def gradient(beta):
        return design.T @ (special.expit(design @ beta) - response)

    def information(beta):
        p = special.expit(design @ beta)
        return (design * (p * (1.0 - p))[:, None]).T @ design

    res = optimize.minimize(
        negative, np.zeros(design.shape[1]), jac=gradient, method="BFGS", options={"gtol": 1e-8}
    )
    beta = res.x
    for _ in range(5):  # Newton polish (the likelihood is strictly concave, full-rank design)
        beta = beta - np.linalg.solve(information(beta), gradient(beta))
    assert np.linalg.norm(gradient(beta)) < 1e-9  # converged: score ≈ 0
    return beta, np.linalg.inv(information(beta))
