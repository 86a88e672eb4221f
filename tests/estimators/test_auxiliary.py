"""Single and annealed multiple auxiliary-variable estimators on Ising lattices.

The estimator of g(y; θ)/Z(θ) divided by g(y; θ) is, for the single auxiliary variable method
(Møller, Pettitt, Reeves & Berthelsen 2006, Biometrika 93(2)), the average of
g(x; θ̂)/g(x; θ) over draws x ~ p(· | θ), whose mean is Z(θ̂)/Z(θ); the annealed multiple
auxiliary variable method (Murray, Ghahramani & MacKay 2006, UAI; annealed importance sampling,
Neal 2001, Statist. Comput. 11(2)) has the same mean. With perfect draws this is exact; with a
simulator run from the data it is approximate, and its exact mean is computed here from the
512 × 512 heat-bath transition matrix of the 3×3 grid. Exact Z from the transfer matrix
(Kramers & Wannier 1941, Phys. Rev. 60, 252) and Kaufman (1949), Phys. Rev. 76, 1232.
Tolerance: 4 standard errors of the mean over iid noise draws (sd/√n).
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from numpyro.handlers import seed, trace
from scipy import special

import zhat
from tests.families.lattice_helpers import configurations, potts_log_potential
from tests.references import lattice_exact as ref
from tests.references.logistic import logistic_fit
from zhat.estimators import (
    importance_sampling,
    maximum_pseudo_likelihood,
    multiple_auxiliary,
    single_auxiliary,
)
from zhat.families import lattice
from zhat.families.lattice import coupling_from_the_past
from zhat.families.lattice.spin_sweep import noise_order

NUM_NOISE = 4000
THETA = {"field": 0.1, "coupling": 0.3}
REFERENCE = {"field": 0.0, "coupling": 0.4}
Y3 = np.array([[1.0, -1.0, 1.0], [1.0, 1.0, -1.0], [-1.0, 1.0, 1.0]])


def ratio_draws(key, estimator, dist_, y, num=NUM_NOISE):
    """exp(log f̂ − log g(y; θ)) at ``num`` independent noise draws (jit + batched vmap)."""
    y = jnp.asarray(y)
    shape = tuple(estimator.noise_shape(dist_, y))
    log_g = dist_.log_potential(y)

    def one(k):
        return estimator.log_estimate(dist_, y, jax.random.normal(k, shape)) - log_g

    run = jax.jit(lambda keys: jax.lax.map(one, keys, batch_size=500))
    return np.exp(np.asarray(run(jax.random.split(key, num))))


def assert_mean_ratio(ratios, target, what):
    ratios = np.asarray(ratios) / target
    assert np.all(np.isfinite(ratios)), f"{what}: some estimates failed (perfect draw budget?)"
    se = ratios.std(ddof=1) / math.sqrt(ratios.shape[0])
    assert se < 0.05, (what, se)  # the check has power: the mean is pinned to a few per cent
    assert abs(ratios.mean() - 1.0) < 4 * se, (what, ratios.mean(), se)


def log_z_3x3(params):
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: exact transfer-matrix log Z
    return ref.transfer_matrix_log_z(3, 3, float(params["coupling"]), float(params["field"]))


EXACT_ESTIMATORS = {
    "single K=4": lambda: single_auxiliary(4, budget=128, reference=REFERENCE),
    "multiple T=5 K=2 gibbs": lambda: multiple_auxiliary(
        5, num_draws=2, budget=128, reference=REFERENCE
    ),
    "multiple T=3 swendsen-wang, 2 per temperature": lambda: multiple_auxiliary(
        3, sweeps_per_temperature=2, transition="swendsen_wang", budget=128, reference=REFERENCE
    ),
}


@pytest.mark.parametrize("name", list(EXACT_ESTIMATORS))
def test_perfect_variants_are_unbiased_on_3x3(key, name):
    estimator = EXACT_ESTIMATORS[name]()
    assert estimator.unbiased and not estimator.smooth
    assert "APPROXIMATE" not in estimator.name and "perfect draws" in estimator.name
    nb = lattice.grid(3, 3)
    d = lattice.ising(nb, **THETA)
    ratios = ratio_draws(jax.random.fold_in(key, 1), estimator, d, Y3)
    # exact Z(θ̂)/Z(θ) by the transfer matrix (Kramers & Wannier 1941)
    target = math.exp(log_z_3x3(REFERENCE) - log_z_3x3(THETA))
    assert_mean_ratio(ratios, target, name)


# --- approximate variants: exact mean from the heat-bath transition matrix -----------------------
def heat_bath_matrix(nb, field, coupling):
    """512 × 512 transition matrix of one zhat heat-bath sweep (colour classes in order)."""
    configs = configurations(nb.num_sites)
    adjacency = nb.dense_adjacency().astype(np.float64)
    colours = np.asarray(nb.colours)
    total = np.eye(configs.shape[0])
    for c in range(nb.num_colours):
        local = field + coupling * configs @ adjacency  # (M, N), from the current state
        p_plus = special.expit(2.0 * local)  # Geman & Geman (1984): heat-bath conditional
        moving = colours == c
        # P_c(x, x') = Π_{i in c} p(x'_i | x_{-i}) · 1[x'_j = x_j for j not in c]
        probs = np.where(configs[None, :, :] > 0, p_plus[:, None, :], 1.0 - p_plus[:, None, :])
        same = configs[None, :, :] == configs[:, None, :]
        factors = np.where(moving[None, None, :], probs, same.astype(np.float64))
        total = total @ factors.prod(axis=2)
    return total


def config_index(y):
    """Index of configuration y in the reference enumeration (site i is digit i, base 2)."""
    bits = (np.asarray(y).reshape(-1) > 0).astype(np.int64)
    return int(bits @ (2 ** np.arange(bits.size)))


def interpolated(t, theta, reference):
    return {k: theta[k] + t * (reference[k] - theta[k]) for k in theta}


def exact_annealed_mean(nb, start, theta, reference, temperatures, per_temperature):
    """E[w] = μ₀ᵀ Π_t (D_t K_t^m) 1 for annealed importance weights (Neal 2001), μ₀ any start."""
    configs = configurations(nb.num_sites)
    stats = ref.ising_statistics(configs, nb.edges)
    vector = start.copy()
    for t in range(1, temperatures + 1):
        prev = interpolated((t - 1) / temperatures, theta, reference)
        here = interpolated(t / temperatures, theta, reference)
        log_d = stats @ np.array(
            [here["field"] - prev["field"], here["coupling"] - prev["coupling"]]
        )
        kernel = heat_bath_matrix(nb, here["field"], here["coupling"])
        vector = (vector * np.exp(log_d)) @ np.linalg.matrix_power(kernel, per_temperature)
    return float(vector.sum())


@pytest.mark.parametrize("sweeps", [2, 30])
def test_simulator_single_auxiliary_has_the_exact_finite_run_mean(key, sweeps):
    """sampler='gibbs': x is the end of ``sweeps`` heat-bath sweeps from y, so
    E[g(x; θ̂)/g(x; θ)] = Σ_x P^T(y, x) g(x; θ̂)/g(x; θ) exactly; after 30 sweeps it equals
    Z(θ̂)/Z(θ) to far below the Monte Carlo error, after 2 it does not (the bias is visible)."""
    estimator = single_auxiliary(2, sampler="gibbs", sweeps=sweeps, reference=REFERENCE)
    assert not estimator.unbiased and "APPROXIMATE" in estimator.name
    nb = lattice.grid(3, 3)
    d = lattice.ising(nb, **THETA)
    ratios = ratio_draws(jax.random.fold_in(key, 2), estimator, d, Y3)
    configs = configurations(9)
    stats = ref.ising_statistics(configs, nb.edges)
    r = np.exp(stats @ np.array([REFERENCE["field"] - 0.1, REFERENCE["coupling"] - 0.3]))
    kernel = np.linalg.matrix_power(heat_bath_matrix(nb, 0.1, 0.3), sweeps)
    exact_finite = float(kernel[config_index(Y3)] @ r)
    target = math.exp(log_z_3x3(REFERENCE) - log_z_3x3(THETA))
    # exact mean of the finite run: the heat-bath (Geman & Geman 1984) transition matrix power
    assert_mean_ratio(ratios, exact_finite, f"gibbs, {sweeps} sweeps")
    se = ratios.std(ddof=1) / math.sqrt(ratios.shape[0])
    if sweeps == 30:
        assert abs(exact_finite - target) < 1e-3 * se
    else:
        assert abs(exact_finite - target) > 4 * se  # the short run's bias is detectable


def test_simulator_multiple_auxiliary_has_the_exact_finite_run_mean(key):
    estimator = multiple_auxiliary(
        4, sampler="gibbs", sweeps=3, sweeps_per_temperature=2, reference=REFERENCE
    )
    assert not estimator.unbiased and "APPROXIMATE" in estimator.name
    nb = lattice.grid(3, 3)
    d = lattice.ising(nb, **THETA)
    ratios = ratio_draws(jax.random.fold_in(key, 3), estimator, d, Y3)
    start = np.linalg.matrix_power(heat_bath_matrix(nb, 0.1, 0.3), 3)[config_index(Y3)]
    exact = exact_annealed_mean(nb, start, THETA, REFERENCE, 4, 2)
    # annealed importance sampling from a non-stationary start (Neal 2001): exact mean
    assert_mean_ratio(ratios, exact, "annealed, gibbs start")


def test_swendsen_wang_simulator_estimator(key):
    """sampler='swendsen_wang' with 30 updates from y, against Z(θ̂)/Z(θ): the run's bias on 9
    sites is below the Monte Carlo error (common practice; the heat-bath run of the same length
    is shown exact to < 1e-3 SE above)."""
    estimator = single_auxiliary(2, sampler="swendsen_wang", sweeps=30, reference=REFERENCE)
    assert not estimator.unbiased and "APPROXIMATE" in estimator.name
    assert "swendsen_wang" in estimator.name
    d = lattice.ising(lattice.grid(3, 3), **THETA)
    ratios = ratio_draws(jax.random.fold_in(key, 4), estimator, d, Y3)
    target = math.exp(log_z_3x3(REFERENCE) - log_z_3x3(THETA))
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: exact Z(θ̂)/Z(θ) by the transfer matrix
    assert_mean_ratio(ratios, target, "swendsen-wang simulator")


# --- 4×4 torus: transfer matrix and Kaufman -------------------------------------------------
@pytest.mark.parametrize("kind", ["single", "multiple"])
def test_perfect_variants_on_4x4_torus_zero_field(key, kind):
    nb = lattice.grid(4, 4, "periodic")
    theta, reference = {"field": 0.0, "coupling": 0.25}, {"field": 0.0, "coupling": 0.35}
    if kind == "single":
        estimator = single_auxiliary(2, budget=256, reference=reference)
    else:
        estimator = multiple_auxiliary(4, budget=256, reference=reference)
    d = lattice.ising(nb, **theta)
    y = np.where(np.arange(16).reshape(4, 4) % 3 == 0, 1.0, -1.0)
    ratios = ratio_draws(jax.random.fold_in(key, 5), estimator, d, y)
    # Kaufman (1949), Phys. Rev. 76, 1232: exact torus log Z at zero field
    kaufman = ref.kaufman_log_z(4, 4, 0.35) - ref.kaufman_log_z(4, 4, 0.25)
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: the transfer matrix agrees
    transfer = ref.transfer_matrix_log_z(4, 4, 0.35, 0.0, "periodic") - ref.transfer_matrix_log_z(
        4, 4, 0.25, 0.0, "periodic"
    )
    assert abs(kaufman - transfer) < 1e-10
    assert_mean_ratio(ratios, math.exp(kaufman), f"{kind} on a 4x4 torus")


def test_pseudo_likelihood_reference_on_4x4_torus_with_field(key):
    nb = lattice.grid(4, 4, "periodic")
    theta = {"field": 0.1, "coupling": 0.3}
    d = lattice.ising(nb, **{k: jnp.asarray(v) for k, v in theta.items()})  # JAX: both fitted
    # columns in noise_order, so that column i drives site i (the data this test was set on)
    noise = jax.random.normal(key, (256, 16))[:, noise_order(nb)]
    s, ok, _ = coupling_from_the_past(nb, 0.1, 0.3, noise)
    assert bool(ok)
    y = np.asarray(s).reshape(4, 4)
    fit = maximum_pseudo_likelihood(d, jnp.asarray(y))
    assert d.fitted_parameters == ("field", "coupling")
    assert abs(float(fit["coupling"])) < 1.0 and abs(float(fit["field"])) < 1.0
    estimator = single_auxiliary(2, budget=256)  # reference="pseudo_likelihood"
    ratios = ratio_draws(jax.random.fold_in(key, 6), estimator, d, y)

    def log_z(p):
        # Kramers & Wannier (1941), Phys. Rev. 60, 252: exact transfer-matrix log Z
        return ref.transfer_matrix_log_z(4, 4, float(p["coupling"]), float(p["field"]), "periodic")

    # exact Z(θ̂)/Z(θ) at the fitted reference (transfer matrix, Kramers & Wannier 1941)
    assert_mean_ratio(ratios, math.exp(log_z(fit) - log_z(theta)), "pseudo-likelihood reference")


# --- maximum pseudo-likelihood vs a scipy logistic regression ---------------------------------
def direct_neighbour_sum(nb, values):
    return nb.dense_adjacency().astype(np.float64) @ values


def test_ising_pseudo_likelihood_is_a_logistic_regression(key):
    """Besag (1975), The Statistician 24(3): p(s_i = 1 | rest) = σ(2h + 2J n_i), so maximum
    pseudo-likelihood is the logistic regression of (s_i + 1)/2 on (2, 2 n_i)."""
    nb = lattice.grid(8, 8)
    s, ok, _ = coupling_from_the_past(nb, 0.1, 0.3, jax.random.normal(key, (256, 64)))
    assert bool(ok)
    s = np.asarray(s)
    d = lattice.ising(nb, field=0.0, coupling=0.0)
    fit = maximum_pseudo_likelihood(d, jnp.asarray(s), parameters=("field", "coupling"))
    design = np.stack([2.0 * np.ones(64), 2.0 * direct_neighbour_sum(nb, s)], axis=1)
    h, coupling = logistic_fit(design, (s + 1.0) / 2.0)[0]
    np.testing.assert_allclose(float(fit["field"]), h, atol=1e-6)
    np.testing.assert_allclose(float(fit["coupling"]), coupling, atol=1e-6)


def test_a_field_the_model_fixes_is_held_by_the_reference(key):
    """A model that passes the field as a plain number fixes it: the reference keeps that field
    and fits the coupling alone, the logistic regression of (s_i + 1)/2 on 2 n_i with offset 2h
    and no intercept (Besag 1975, The Statistician 24(3)); here h = 0, so no offset."""
    nb = lattice.grid(8, 8)
    s, ok, _ = coupling_from_the_past(nb, 0.0, 0.3, jax.random.normal(key, (256, 64)))
    assert bool(ok)
    s = np.asarray(s)
    d = lattice.ising(nb, field=0.0, coupling=jnp.asarray(0.2))
    assert d.held == ("field",) and d.fitted_parameters == ("coupling",)
    fit = maximum_pseudo_likelihood(d, jnp.asarray(s))
    (coupling,) = logistic_fit(2.0 * direct_neighbour_sum(nb, s)[:, None], (s + 1.0) / 2.0)[0]
    assert float(fit["field"]) == 0.0
    np.testing.assert_allclose(float(fit["coupling"]), coupling, atol=1e-6)
    # the estimator's reference is that point: mean ratio = exact Z(θ̂)/Z(θ) with θ̂ at field 0
    theta = {"field": 0.0, "coupling": 0.3}
    estimator = single_auxiliary(2, budget=256)
    y = s.reshape(8, 8)[:4, :4]
    nb4 = lattice.grid(4, 4, "periodic")
    d4 = lattice.ising(nb4, field=0.0, coupling=jnp.asarray(theta["coupling"]))
    fit4 = maximum_pseudo_likelihood(d4, jnp.asarray(y))
    assert float(fit4["field"]) == 0.0
    ratios = ratio_draws(jax.random.fold_in(key, 7), estimator, d4, y)

    def log_z(p):
        # Kaufman (1949), Phys. Rev. 76, 1232: exact zero-field torus log Z
        return ref.kaufman_log_z(4, 4, float(p["coupling"]))

    assert_mean_ratio(ratios, math.exp(log_z(fit4) - log_z(theta)), "held-field reference")


def test_autologistic_pseudo_likelihood_is_a_logistic_regression(key):
    """Besag (1974): p(x_i = 1 | rest) = σ(X_i·β + J Σ_{j~i} x_j): a logistic regression of x_i
    on (X_i, n_i); the covariates stay fixed, (β, J) are fitted."""
    nb = lattice.grid(8, 8)
    rng = np.random.default_rng(12)
    covariates = np.stack([np.ones(64), rng.normal(size=64)], axis=1)
    d = lattice.autologistic(nb, 0.5, covariates, np.array([-0.5, 0.8]))
    x, ok = d.family.perfect_sampler.draw(d.params, jax.random.normal(key, (256, 64)))
    assert bool(ok)
    x = np.asarray(x)
    fit = maximum_pseudo_likelihood(d, jnp.asarray(x), parameters=("coupling", "coefficients"))
    np.testing.assert_array_equal(np.asarray(fit["covariates"]), covariates)
    design = np.concatenate([covariates, direct_neighbour_sum(nb, x)[:, None]], axis=1)
    beta = logistic_fit(design, x)[0]
    np.testing.assert_allclose(np.asarray(fit["coefficients"]), beta[:2], atol=1e-6)
    np.testing.assert_allclose(float(fit["coupling"]), beta[2], atol=1e-6)


@pytest.mark.parametrize("case", ["separated 3x3 data", "per-site field"])
def test_pseudo_likelihood_without_maximiser_is_an_error(key, case):
    """If s_i is perfectly predicted by its neighbour sum (here s_i = +1 exactly when n_i ≥ 0),
    the logistic-regression likelihood increases towards infinity (complete separation; Albert
    & Anderson 1984, Biometrika 71(1)) and no estimate exists; likewise a free field per site
    with one observation fits every site exactly. The docstring promises a ValueError asking
    for an explicit reference when the fit does not converge."""
    if case == "separated 3x3 data":
        nb = lattice.grid(3, 3)
        y = np.array([[1.0, 1.0, 1.0], [-1.0, -1.0, -1.0], [-1.0, -1.0, -1.0]])
        d = lattice.ising(nb, field=0.0, coupling=0.3)
    else:
        nb = lattice.grid(8, 8)
        s, _, _ = coupling_from_the_past(nb, 0.1, 0.3, jax.random.normal(key, (256, 64)))
        y = np.asarray(s).reshape(8, 8)
        d = lattice.ising(nb, field=np.full((8, 8), 0.1), coupling=0.3)
    with pytest.raises(ValueError, match="reference"):
        maximum_pseudo_likelihood(d, jnp.asarray(y), parameters=("field", "coupling"))


# --- flags, wrong factors, and argument errors -----------------------------------------------
def test_flags_and_names():
    exact = [single_auxiliary(3), multiple_auxiliary(4, num_draws=2)]
    approximate = [
        single_auxiliary(3, sampler="gibbs", sweeps=7),
        single_auxiliary(sampler="swendsen_wang"),
        multiple_auxiliary(4, sampler="gibbs"),
    ]
    for e in exact:
        assert e.unbiased is True and e.smooth is False
        assert "APPROXIMATE" not in e.name and "perfect" in e.name
    for e in approximate:
        assert e.unbiased is False and e.smooth is False
        assert "APPROXIMATE" in e.name and "approximate" in e.note
    assert exact[0].num_draws == 3 and "K=3" in exact[0].name
    assert "T=4" in exact[1].name
    assert "7 gibbs sweeps" in approximate[0].name


def potts_model(y):
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
    numpyro.sample("colours", lattice.potts(lattice.grid(3, 3), coupling, q=3), obs=y)


@pytest.mark.parametrize("make", [single_auxiliary, multiple_auxiliary])
def test_potts_has_no_perfect_sampler(make):
    y = jnp.asarray(np.arange(9).reshape(3, 3) % 3)
    exposed = zhat.expose(potts_model, make(sampler="perfect"))
    pattern = r"sampler='perfect'\): family 'potts \(q=3\)' has no perfect sampler.*simulator"
    with pytest.raises(ValueError, match=pattern):
        trace(seed(exposed, jax.random.key(0))).get_trace(y)


def test_potts_without_an_estimator_asks_for_one():
    y = jnp.asarray(np.arange(9).reshape(3, 3) % 3)
    with pytest.raises(ValueError, match="No estimator for the unnormalized family 'potts"):
        trace(seed(zhat.expose(potts_model), jax.random.key(0))).get_trace(y)


def test_potts_simulator_estimator_matches_enumeration(key):
    """The only estimator Potts can use (a simulator) must run; its mean after 30 heat-bath
    sweeps on 3×3 against Z(J̃)/Z(J) by enumeration of all 3^9 states."""
    nb = lattice.grid(3, 3)
    field = np.array([0.2, 0.0, -0.1])
    d = lattice.potts(nb, 0.4, q=3, field=field)
    estimator = single_auxiliary(
        2, sampler="gibbs", sweeps=30, reference={"coupling": 0.5, "field": field}
    )
    y = np.arange(9).reshape(3, 3) % 3
    ratios = ratio_draws(key, estimator, d, y)
    log_z = lambda j: ref.enumerate_log_z(  # noqa: E731
        potts_log_potential(nb.edges, j, field), 9, labels=(0, 1, 2)
    )
    # brute-force enumeration of all 3^9 states (exact)
    assert_mean_ratio(ratios, math.exp(log_z(0.5) - log_z(0.4)), "Potts gibbs simulator")


def test_importance_sampling_refuses_a_family():
    d = lattice.ising(lattice.grid(3, 3), coupling=0.2)
    with pytest.raises(TypeError, match="integrate_out.*cannot serve a unnormalized family"):
        importance_sampling(4).noise_shape(d, jnp.asarray(Y3))


@pytest.mark.parametrize("make", [single_auxiliary, multiple_auxiliary])
def test_auxiliary_refuses_an_integrated_block(make):
    def model():
        mu = numpyro.sample("mu", dist.Normal(0.0, 1.0))
        log_joint = lambda z: dist.Normal(mu, 1.0).log_prob(z).sum()  # noqa: E731
        zhat.integrate_out("z", log_joint, (2,), proposal=(mu, 1.0))

    with pytest.raises(TypeError, match="likelihoods of unnormalized families.*importance_sam"):
        trace(seed(zhat.expose(model, make()), jax.random.key(0))).get_trace()


def test_argument_errors():
    with pytest.raises(ValueError, match="num_draws must be a positive integer"):
        single_auxiliary(0)
    with pytest.raises(ValueError, match="sweeps must be a positive integer"):
        single_auxiliary(sampler="gibbs", sweeps=0)
    with pytest.raises(ValueError, match="budget must be a positive integer"):
        single_auxiliary(budget=0)
    with pytest.raises(ValueError, match="num_temperatures must be a positive integer"):
        multiple_auxiliary(0)
    with pytest.raises(ValueError, match="sweeps_per_temperature must be a positive integer"):
        multiple_auxiliary(3, sweeps_per_temperature=0)
    with pytest.raises(ValueError, match="reference must be 'pseudo_likelihood' or a dict"):
        single_auxiliary(reference="mle")
    with pytest.raises(TypeError, match="reference must be 'pseudo_likelihood' or a dict"):
        single_auxiliary(reference=0.3)
    d = lattice.ising(lattice.grid(3, 3), coupling=0.2)
    y = jnp.asarray(Y3)
    with pytest.raises(ValueError, match="no simulator 'metropolis'"):
        single_auxiliary(sampler="metropolis").noise_shape(d, y)
    with pytest.raises(ValueError, match="no simulator 'metropolis' for the moves"):
        multiple_auxiliary(3, transition="metropolis").noise_shape(d, y)
    est = single_auxiliary(reference={"beta": 1.0})
    noise = jnp.zeros(est.noise_shape(d, y))
    with pytest.raises(ValueError, match=r"reference has parameters \['beta'\]"):
        est.log_estimate(d, y, noise)


@pytest.mark.parametrize("covariates", ["default intercept", "numpy intercept"])
def test_autologistic_pseudo_likelihood_reference_under_jit(covariates):
    """MCMC traces the model under jit; the fixed covariates are constants of the model and
    the default reference must work there as it does eagerly."""
    nb = lattice.grid(3, 3)
    # a map with a finite pseudo-likelihood maximum (a chequerboard has none)
    x = jnp.asarray(np.array([1, 1, 0, 0, 1, 0, 1, 1, 0], dtype=float))
    given = None if covariates == "default intercept" else np.ones((9, 1))

    def model(x):
        coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
        beta = numpyro.sample("beta", dist.Normal(0.0, 1.0))
        numpyro.sample("x", lattice.autologistic(nb, coupling, given, beta), obs=x)

    exposed = zhat.expose(model, single_auxiliary(1, budget=32))
    noise = jax.random.normal(jax.random.key(0), (1, 32 * 9))
    params = {"coupling": 0.3, "beta": 0.1, "x_noise": noise}
    # traced first (as zhat.MCMC does, through jax.eval_shape and jit), then eagerly: the
    # reference is cached per data set, so an eager call first would hide the failure
    jitted = jax.jit(lambda p: numpyro.infer.util.log_density(exposed, (x,), {}, p)[0])(params)
    eager = numpyro.infer.util.log_density(exposed, (x,), {}, params)[0]
    np.testing.assert_allclose(float(jitted), float(eager), rtol=1e-10)
