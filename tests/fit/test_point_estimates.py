"""Point estimates of lattice models against exact references.

Exact log Z and the exact moments of t = (Σ s_i, Σ_edges s_i s_j) come from the transfer matrix
(Kramers & Wannier 1941, Phys. Rev. 60, 252) in tests/references/lattice_exact.py; the exact
maximum likelihood and MAP estimates maximise J·t_2(y) + h·t_1(y) − log Z(h, J) (+ log prior)
with scipy.optimize, using ∇ log Z = E[t] (exponential family). Maximum pseudo-likelihood is
a logistic regression of each site on its neighbours (Besag 1975, The Statistician 24(3)),
fitted here with scipy.optimize; its standard errors are the logistic regression's
(XᵀWX)⁻¹ (common practice). Monte Carlo checks: |error| < 4 reported Monte Carlo standard
errors, with the reported error itself required to be small (< 0.05) so that the check means
something. Fixed keys throughout.
"""

import jax
import jax.numpy as jnp
import numpy as np
import optax
import pytest
from scipy import optimize, special

from tests.references import lattice_exact as ref
from tests.references.logistic import logistic_fit
from zhat import fit
from zhat.families import lattice
from zhat.model.unnormalized import unnormalized

SIDE = 5
TRUE = {"field": 0.1, "coupling": 0.3}
PRIOR_SD = 0.2
DATA_KEY = jax.random.key(3)


def ising_data(side=SIDE, key=DATA_KEY):
    """One exact draw (coupling from the past) at TRUE, and the model to fit."""
    nb = lattice.grid(side, side)
    d = lattice.ising(nb, **{k: jnp.asarray(v) for k, v in TRUE.items()})
    x, ok = d.family.perfect_sampler.draw(d.params, jax.random.normal(key, (256, side * side)))
    assert bool(ok)
    return nb, d, np.asarray(x).reshape(side, side)


def exact_mode(y, prior_sd=None):
    """argmax of h·t_1 + J·t_2 − log Z(h, J) (+ the Gaussian log prior) by scipy (BFGS on the
    exact gradient t(y) − E[t]; transfer-matrix moments)."""
    side = y.shape[0]
    t = ref.ising_statistics(y.reshape(1, -1), ref.grid_edges(side, side))[0]

    def negative(theta):
        h, coupling = theta
        mom = ref.transfer_matrix_moments(side, side, coupling, h)
        value = -(theta @ t - mom.log_z)
        grad = -(t - mom.mean)
        if prior_sd is not None:
            value += 0.5 * np.sum(theta**2) / prior_sd**2
            grad += theta / prior_sd**2
        return value, grad

    res = optimize.minimize(negative, np.zeros(2), jac=True, method="BFGS", options={"gtol": 1e-8})
    theta = res.x
    for _ in range(3):  # Newton polish with the exact Hessian Cov[t] (+ prior precision)
        h, coupling = theta
        curvature = ref.transfer_matrix_moments(side, side, coupling, h).cov
        curvature = curvature + (0 if prior_sd is None else np.eye(2) / prior_sd**2)
        theta = theta - np.linalg.solve(curvature, negative(theta)[1])
    assert np.linalg.norm(negative(theta)[1]) < 1e-9
    return theta


def assert_within_mc_error(result, exact, what):
    mc = np.array([result.monte_carlo_error[k] for k in result.labels])
    assert np.all(mc < 0.05), f"{what}: Monte Carlo error {mc} too large to check against"
    assert np.all(mc > 0), f"{what}: Monte Carlo error {mc} must be positive"
    z = (result.vector - exact) / mc
    assert np.all(np.abs(z) < 4), f"{what}: {result.vector} vs exact {exact}, z = {z}"


# --- maximum pseudo-likelihood ------------------------------------------------------------
def test_ising_pseudo_likelihood_is_a_logistic_regression():
    """p(s_i = 1 | rest) = σ(2h + 2J n_i): the logistic regression of (s_i + 1)/2 on
    (2, 2 n_i); the same design gives the standard errors (XᵀWX)⁻¹."""
    nb, d, y = ising_data(side=8)
    result = fit.pseudo_likelihood(d, y)
    s = y.reshape(-1)
    n = nb.dense_adjacency().astype(float) @ s
    beta, cov = logistic_fit(np.stack([2.0 * np.ones(64), 2.0 * n], 1), (s + 1) / 2)
    np.testing.assert_allclose(result.vector, beta, atol=1e-6)
    np.testing.assert_allclose(result.covariance, cov, rtol=1e-6)
    assert result.converged
    assert "too small" in result.caveat and "too small" in str(result)
    assert "dependence" in result.summary()


def test_autologistic_pseudo_likelihood_matches_newton_and_logistic_regression():
    """Besag (1974): p(x_i = 1 | rest) = σ(X_i·β + J n_i), a logistic regression on (X_i, n_i);
    the Optax fit (L-BFGS, and Adam) equals the library's Newton fit and scipy's."""
    from zhat.estimators import maximum_pseudo_likelihood

    nb = lattice.grid(8, 8)
    rng = np.random.default_rng(12)
    covariates = np.stack([np.ones(64), rng.normal(size=64)], axis=1)
    d = lattice.autologistic(nb, jnp.asarray(0.5), covariates, jnp.asarray([-0.5, 0.8]))
    x, ok = d.family.perfect_sampler.draw(d.params, jax.random.normal(DATA_KEY, (256, 64)))
    assert bool(ok)
    x = np.asarray(x)
    newton = maximum_pseudo_likelihood(d, jnp.asarray(x))
    beta, _ = logistic_fit(np.concatenate([covariates, (nb.dense_adjacency() @ x)[:, None]], 1), x)
    for optimizer, steps, atol in [(None, 500, 1e-6), (optax.adam(0.05), 4000, 1e-4)]:
        result = fit.pseudo_likelihood(d, x, optimizer=optimizer, steps=steps, tol=1e-7)
        assert result.labels == ("coupling", "coefficients[0]", "coefficients[1]")
        np.testing.assert_allclose(float(result.estimate["coupling"]), beta[2], atol=atol)
        np.testing.assert_allclose(np.asarray(result.estimate["coefficients"]), beta[:2], atol=atol)
        np.testing.assert_allclose(
            np.asarray(result.params["coefficients"]), np.asarray(newton["coefficients"]), atol=atol
        )
        np.testing.assert_array_equal(np.asarray(result.params["covariates"]), covariates)


# --- likelihood: stochastic approximation and Monte Carlo maximum likelihood ---------------
def test_stochastic_approximation_equals_exact_mle():
    _, d, y = ising_data()
    exact = exact_mode(y)
    result = fit.stochastic_approximation(jax.random.key(1), d, y)
    assert result.labels == ("field", "coupling")
    assert_within_mc_error(result, exact, "stochastic approximation")
    assert result.path.shape == (1000, 2) and not result.notes
    assert result.num_simulations > 16 * 1000
    assert "MC error" in result.summary()


def test_monte_carlo_likelihood_equals_exact_mle_from_a_poor_start():
    """From a start far from the MLE the importance weights degenerate: the effective-sample-
    size guard must move the simulation point (more than one round) and still end at the MLE."""
    _, d, y = ising_data()
    exact = exact_mode(y)
    result = fit.monte_carlo_likelihood(
        jax.random.key(2), d, y, start={"field": 0.6, "coupling": -0.2}
    )
    assert result.rounds > 1
    assert result.ess_fraction >= 0.5
    assert_within_mc_error(result, exact, "Monte Carlo maximum likelihood")


def test_map_with_gaussian_prior_equals_exact_map():
    _, d, y = ising_data()
    exact = exact_mode(y, prior_sd=PRIOR_SD)
    assert np.max(np.abs(exact - exact_mode(y))) > 0.05  # the prior matters here

    def log_prior(p):
        return -0.5 * (p["field"] ** 2 + p["coupling"] ** 2) / PRIOR_SD**2

    start = {"field": 0.0, "coupling": 0.2}
    result = fit.maximum_likelihood(
        jax.random.key(5), d, y, log_prior=log_prior, steps=500, start=start
    )
    assert result.is_map and "MAP" in result.summary()
    assert_within_mc_error(result, exact, "MAP")
    # the covariance is the inverse of (exact information at the MAP + prior precision)
    mom = ref.transfer_matrix_moments(SIDE, SIDE, exact[1], exact[0])
    posterior = np.linalg.inv(mom.cov + np.eye(2) / PRIOR_SD**2)
    # MC error of an information entry is ~2% here (see the Fisher test); 10% is 5 of those
    np.testing.assert_allclose(result.covariance, posterior, rtol=0.1)


def test_held_field_stays_fixed():
    """A field given as a plain number is held: only the coupling is fitted, and the estimate
    is the exact one-parameter MLE with the field at that value (here with Adam and a decaying
    step instead of the default SGD)."""
    nb, _, y = ising_data()
    d = lattice.ising(nb, field=0.1, coupling=jnp.asarray(0.2))
    t = ref.ising_statistics(y.reshape(1, -1), ref.grid_edges(SIDE, SIDE))[0]
    exact = optimize.brentq(
        lambda c: t[1] - ref.transfer_matrix_moments(SIDE, SIDE, c, 0.1).mean[1], -1.0, 1.0
    )
    adam = optax.adam(optax.exponential_decay(0.05, transition_steps=100, decay_rate=0.5))
    result = fit.stochastic_approximation(
        jax.random.key(6), d, y, steps=400, start={"coupling": 0.2}, optimizer=adam
    )
    assert result.labels == ("coupling",) and not result.notes
    assert float(result.params["field"]) == 0.1
    assert_within_mc_error(result, np.array([exact]), "held field")


def test_fisher_information_equals_exact_covariance():
    """I(θ) = Cov_θ[t] = ∇² log Z (exponential family), exact by the transfer matrix."""
    _, d, y = ising_data()
    info = fit.fisher_information(jax.random.key(4), d, y, draws=1000)
    mom = ref.transfer_matrix_moments(SIDE, SIDE, TRUE["coupling"], TRUE["field"])
    assert np.all(info.standard_error < 0.05 * np.abs(mom.cov))  # informative check
    z = (info.matrix - mom.cov) / info.standard_error
    assert np.all(np.abs(z) < 4), f"information {info.matrix} vs exact {mom.cov}"
    z_mean = (info.mean - mom.mean) / info.mean_standard_error
    assert np.all(np.abs(z_mean) < 4), f"mean {info.mean} vs exact {mom.mean}"
    assert info.labels == ("field", "coupling")


AUTO_SIDE = 6


def autologistic_case(centred):
    """6×6 free grid, an intercept and one invented covariate, one exact draw."""
    nb = lattice.grid(AUTO_SIDE, AUTO_SIDE)
    rng = np.random.default_rng(7)
    n = AUTO_SIDE * AUTO_SIDE
    covariates = np.stack([np.ones(n), rng.normal(size=n)], axis=1)
    d = lattice.autologistic(
        nb, jnp.asarray(0.6), covariates, jnp.asarray([-0.3, 0.8]), centred=centred
    )
    x, ok = d.family.perfect_sampler.draw(d.params, jax.random.normal(DATA_KEY, (256, n)))
    assert bool(ok)
    return nb, covariates, d, np.asarray(x)


def autologistic_site_terms(nb, covariates, theta, centred):
    """a_i of log g = Σ a_i x_i + J Σ_edges x_i x_j: X_i·β, minus J Σ_{j~i} σ(X_j·β) if centred
    (Caragea & Kaiser 2009, JABES 14(3))."""
    coupling, beta = theta[0], theta[1:]
    eta = covariates @ beta
    if centred:
        return eta - coupling * (nb.dense_adjacency() @ special.expit(eta))
    return eta


def exact_autologistic_mle(nb, covariates, x, centred):
    """argmax of log g(x; θ) − log Z(θ), log Z by the transfer matrix with labels {0, 1};
    scipy BFGS with finite-difference gradients (their error, ~1e-7, is far below the Monte
    Carlo errors compared with)."""
    edges = ref.grid_edges(AUTO_SIDE, AUTO_SIDE)
    pairs = float(np.sum(x[edges[:, 0]] * x[edges[:, 1]]))

    def negative(theta):
        a = autologistic_site_terms(nb, covariates, theta, centred)
        log_z = ref.transfer_matrix_log_z(
            AUTO_SIDE, AUTO_SIDE, theta[0], a.reshape(AUTO_SIDE, AUTO_SIDE), labels=(0, 1)
        )
        return -(a @ x + theta[0] * pairs - log_z)

    res = optimize.minimize(negative, np.zeros(3), method="BFGS", options={"gtol": 1e-7})
    assert np.linalg.norm(res.jac) < 1e-5
    return res.x


@pytest.mark.parametrize("centred", [False, True], ids=["natural", "centred"])
def test_autologistic_likelihood_equals_exact_mle(centred):
    """The score is ∇_θ log g by autodiff: s(x) = (Σ_edges x_i x_j, Σ x_i X_i) for the natural
    form, a non-linear function of θ for the centred one (whose observed information then has
    the E[∇² log g] − ∇² log g(y) terms). Stochastic approximation, and for the centred form
    Monte Carlo maximum likelihood with stored draws, against the exact MLE."""
    nb, covariates, d, x = autologistic_case(centred)
    exact = exact_autologistic_mle(nb, covariates, x, centred)
    sa = fit.stochastic_approximation(jax.random.key(8), d, x, steps=600)
    assert sa.labels == ("coupling", "coefficients[0]", "coefficients[1]")
    assert_within_mc_error(sa, exact, f"stochastic approximation ({d.family.name})")
    np.testing.assert_array_equal(np.asarray(sa.params["covariates"]), covariates)
    if centred:
        mc = fit.monte_carlo_likelihood(jax.random.key(9), d, x, start=sa.estimate)
        assert_within_mc_error(mc, exact, "Monte Carlo maximum likelihood (centred)")


# --- bad input ------------------------------------------------------------------------------
@unnormalized(free_parameters=("rate",))
def bare(x, rate):
    return -rate * jnp.sum(x)


def test_bad_input_gives_clear_errors():
    nb, d, y = ising_data()
    key = jax.random.key(0)
    with pytest.raises(ValueError, match="no simulator.*simulators="):
        fit.stochastic_approximation(key, bare(rate=jnp.asarray(1.0)), np.ones(3))
    with pytest.raises(ValueError, match="no pseudo-likelihood"):
        fit.pseudo_likelihood(bare(rate=jnp.asarray(1.0)), np.ones(3))
    with pytest.raises(ValueError, match=r"no free parameters \['temperature'\].*'coupling'"):
        fit.pseudo_likelihood(d, y, parameters=("temperature",))
    bad = y.astype(float)
    bad[1, 2] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        fit.monte_carlo_likelihood(key, d, bad)
    with pytest.raises(ValueError, match="Nothing to fit.*parameters="):
        fit.pseudo_likelihood(lattice.ising(nb, field=0.0, coupling=0.2), y)
    with pytest.raises(ValueError, match="labels must be in"):
        fit.fisher_information(key, d, (y + 1) / 2)
    with pytest.raises(TypeError, match="family called with its parameters"):
        fit.pseudo_likelihood(d.family, y)
    with pytest.raises(ValueError, match="chains must be an integer"):
        fit.fisher_information(key, d, y, chains=1)
