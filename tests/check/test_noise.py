"""Estimator-noise diagnostic: sd(log f̂) against its closed form, and the verdicts it prints."""

import math

import jax
import numpy as np
import pytest

import zhat
from tests.latent_gaussian import SIGMA, TAU, make_data, model
from zhat.estimators import importance_sampling


def exact_sd_single_draw(y, mu):
    """sd of log f̂ for K = 1 with the prior as proposal: log f̂ = Σ log N(y_i; z_i, σ²) with
    z_i ~ N(μ, τ²), so (y_i − z_i) ~ N(y_i − μ, τ²) and Var((y−z)²) = 2τ⁴ + 4(y−μ)²τ² (moments of
    a normal square, closed form), giving Var(log f̂) = Σ (2τ⁴ + 4(y_i−μ)²τ²) / (4σ⁴)."""
    d = np.asarray(y) - mu
    return math.sqrt(np.sum(2 * TAU**4 + 4 * d**2 * TAU**2) / (4 * SIGMA**4))


def test_reported_sd_matches_closed_form(key):
    y = make_data(n=6)
    exposed = zhat.expose(model, importance_sampling(1))
    [report] = zhat.check.estimator_noise(key, exposed, {"mu": 0.4}, y, num_draws=4000)
    exact = exact_sd_single_draw(y, 0.4)
    assert abs(report.sd - exact) < 4 * report.sd_error, (report.sd, exact, report.sd_error)
    assert report.unbiased and report.site == "z"


@pytest.mark.parametrize(
    ("draws", "expected"),
    [(1, "WARNING: too noisy"), (8, "within the recommended"), (400, "would still do")],
)
def test_verdicts(key, draws, expected):
    y = make_data(n=10)
    exposed = zhat.expose(model, importance_sampling(draws))
    [report] = zhat.check.estimator_noise(key, exposed, {"mu": 0.9}, y)
    assert expected in report.verdict, report.line()
    assert "[unbiased]" in report.line()


def test_needs_an_exposed_model(key):
    with pytest.raises(TypeError, match="exposed model"):
        zhat.check.log_estimates(key, model, {"mu": 0.0}, make_data())


def test_log_estimates_vary_with_the_noise(key):
    y = make_data(n=4)
    values = zhat.check.log_estimates(
        key, zhat.expose(model, importance_sampling(2)), {"mu": 0.1}, y, num_draws=16
    )["z"]
    assert values.shape == (16,) and np.unique(np.asarray(values)).size == 16
    assert np.isfinite(np.asarray(values)).all()
    assert jax.numpy.issubdtype(values.dtype, jax.numpy.floating)
