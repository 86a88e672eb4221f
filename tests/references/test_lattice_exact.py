"""The lattice references checked against each other and against published values.

Brute-force enumeration (no structure) checks the transfer matrix on small grids; the transfer
matrix checks Kaufman's torus formula; Kaufman on large tori checks Onsager's infinite-lattice
results; finite differences check every derivative; closed-form conjugate posteriors check the
grid posterior. Sources are named beside each check.
"""

import math

import networkx as nx
import numpy as np
import pytest
from scipy import integrate, special

from tests.references.lattice_exact import (
    CRITICAL_COUPLING,
    check_grid_edges,
    enumerate_log_z,
    enumerate_moments,
    exact_posterior_on_grid,
    grid_edge_mass,
    grid_edges,
    ising_log_potential,
    ising_statistics,
    kaufman_log_z,
    onsager_energy_per_site,
    onsager_free_energy,
    transfer_matrix_log_z,
    transfer_matrix_moments,
    yang_magnetisation,
)

# Catalan's constant G = Σ_k (−1)^k / (2k + 1)², from memory; checked numerically below.
CATALAN = 0.915965594177219015


def site_field(rows, cols, seed):
    return np.random.default_rng(seed).normal(0.0, 0.4, (rows, cols))


def enumerated(rows, cols, coupling, field, boundary, labels=(-1, 1)):
    edges = grid_edges(rows, cols, boundary)
    return enumerate_moments(
        lambda x: ising_statistics(x, edges),
        ising_log_potential(edges, coupling, field),
        rows * cols,
        labels,
    )


# ---------------------------------------------------------------------------------------------
# The convention itself
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("boundary", ["free", "periodic"])
@pytest.mark.parametrize("shape", [(3, 3), (3, 4), (5, 3), (4, 6)])
def test_grid_edges_match_an_independent_graph_construction(shape, boundary):
    # networkx.grid_2d_graph builds the same nearest-neighbour (torus) graph independently
    rows, cols = shape
    graph = nx.grid_2d_graph(rows, cols, periodic=boundary == "periodic")
    expected = {frozenset((r * cols + c, rr * cols + cc)) for (r, c), (rr, cc) in graph.edges}
    edges = grid_edges(rows, cols, boundary)
    assert len({frozenset(e) for e in edges}) == len(edges)  # each edge once
    assert {frozenset(e) for e in edges} == expected
    n_free = rows * (cols - 1) + cols * (rows - 1)
    assert len(edges) == (n_free if boundary == "free" else 2 * rows * cols)


@pytest.mark.parametrize("shape", [(2, 4), (4, 2), (1, 5)])
def test_periodic_grids_with_a_side_below_three_are_refused(shape):
    with pytest.raises(ValueError, match="rows, cols >= 3"):
        grid_edges(*shape, "periodic")
    with pytest.raises(ValueError, match="rows, cols >= 3"):
        transfer_matrix_log_z(*shape, 0.3, boundary="periodic")
    with pytest.raises(ValueError, match="rows, cols >= 3"):
        kaufman_log_z(*shape, 0.3)


def test_unusable_inputs_are_refused_with_the_offending_value():
    with pytest.raises(ValueError, match="shape"):
        transfer_matrix_log_z(3, 4, 0.3, np.zeros((4, 3)))
    with pytest.raises(ValueError, match="exceeds 10"):
        transfer_matrix_log_z(11, 12, 0.3)
    with pytest.raises(ValueError, match="boundary"):
        transfer_matrix_log_z(3, 3, 0.3, boundary="toroidal")
    with pytest.raises(ValueError, match="max_configurations"):
        enumerate_log_z(lambda x: x.sum(axis=1), 21)
    with pytest.raises(ValueError, match="bipartite"):
        kaufman_log_z(3, 4, -0.2)


# ---------------------------------------------------------------------------------------------
# Transfer matrix against enumeration
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("labels", [(-1, 1), (0, 1)])
@pytest.mark.parametrize("field", ["none", "scalar", "sites"])
@pytest.mark.parametrize("coupling", [0.37, -0.45])
@pytest.mark.parametrize("boundary", ["free", "periodic"])
@pytest.mark.parametrize("shape", [(3, 3), (3, 4), (5, 3)])
def test_transfer_matrix_equals_enumeration(shape, boundary, coupling, field, labels):
    # enumeration over all 2^N configurations is the definition of Z; (5, 3) exercises the
    # internal transposition (rows > cols) together with a site-dependent field
    rows, cols = shape
    h = {"none": 0.0, "scalar": 0.25, "sites": site_field(rows, cols, seed=7)}[field]
    exact = enumerated(rows, cols, coupling, h, boundary, labels)
    log_z = transfer_matrix_log_z(rows, cols, coupling, h, boundary, labels=labels)
    moments = transfer_matrix_moments(rows, cols, coupling, h, boundary, labels=labels)
    assert abs(log_z - exact.log_z) < 1e-12 * abs(exact.log_z)
    assert abs(moments.log_z - exact.log_z) < 1e-12 * abs(exact.log_z)
    np.testing.assert_allclose(moments.mean, exact.mean, rtol=1e-11, atol=1e-11)
    np.testing.assert_allclose(moments.cov, exact.cov, rtol=1e-10, atol=1e-11)
    n = rows * cols
    assert moments.magnetisation_per_site == pytest.approx(exact.mean[0] / n, rel=1e-11, abs=1e-13)
    assert moments.energy_per_site == pytest.approx(-exact.mean[1] / n, rel=1e-11, abs=1e-13)


@pytest.mark.parametrize("boundary", ["free", "periodic"])
def test_independent_sites_at_zero_coupling(boundary):
    # K = 0: the sites are independent, Z = Π_i Σ_s e^{h_i s} (closed form, common practice)
    h = site_field(4, 5, seed=3)
    ising = transfer_matrix_log_z(4, 5, 0.0, h, boundary)
    auto = transfer_matrix_log_z(4, 5, 0.0, h, boundary, labels=(0, 1))
    assert ising == pytest.approx(np.sum(np.log(2 * np.cosh(h))), rel=1e-14)
    assert auto == pytest.approx(np.sum(np.log1p(np.exp(h))), rel=1e-14)
    assert kaufman_log_z(4, 5, 0.0) == 20 * math.log(2)


@pytest.mark.parametrize("boundary", ["free", "periodic"])
def test_autologistic_is_a_reparametrised_ising_model(boundary):
    # x = (s + 1)/2 turns α Σ x_i + β Σ_edges x_i x_j into the Ising model with K = β/4,
    # h_i = α/2 + β deg_i / 4, plus the constant αN/2 + βE/4 (algebra; Besag 1974 for the model)
    rows, cols, alpha, beta = 5, 7, -0.6, 0.9
    edges = grid_edges(rows, cols, boundary)
    degree = np.bincount(edges.ravel(), minlength=rows * cols).reshape(rows, cols)
    auto = transfer_matrix_log_z(rows, cols, beta, alpha, boundary, labels=(0, 1))
    ising = transfer_matrix_log_z(rows, cols, beta / 4, alpha / 2 + beta * degree / 4, boundary)
    constant = alpha * rows * cols / 2 + beta * len(edges) / 4
    assert auto == pytest.approx(ising + constant, rel=1e-13)


def test_enumeration_of_independent_sites_with_three_labels():
    # log g = θ Σ x_i over x_i ∈ {0, 1, 2}: Z = (1 + e^θ + e^{2θ})^n, and Σ x_i is a sum of n
    # independent copies (closed form, common practice)
    theta, n, labels = 0.3, 7, np.array([0.0, 1.0, 2.0])
    p = np.exp(theta * labels) / np.exp(theta * labels).sum()
    mean, var = p @ labels, p @ labels**2 - (p @ labels) ** 2
    moments = enumerate_moments(
        lambda x: x.sum(axis=1), lambda x: theta * x.sum(axis=1), n, labels=(0, 1, 2)
    )
    assert moments.log_z == pytest.approx(n * math.log(np.exp(theta * labels).sum()), rel=1e-14)
    assert moments.mean[0] == pytest.approx(n * mean, rel=1e-13)
    assert moments.cov[0, 0] == pytest.approx(n * var, rel=1e-12)


# ---------------------------------------------------------------------------------------------
# Moments against finite differences of log Z
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "shape, boundary, labels",
    [((3, 4), "free", (-1, 1)), ((4, 4), "periodic", (-1, 1)), ((4, 5), "free", (0, 1))],
)
def test_moments_are_the_derivatives_of_log_z(shape, boundary, labels):
    # exponential family: ∇ log Z = E[t] and ∂E[t]/∂θ = Cov[t] in θ = (h, K) (common practice).
    # Central differences with step 1e-5: truncation ≈ step² |f'''| / 6 ~ 1e-9 for derivatives of
    # size ~N here, rounding ≈ ε |f| / step ~ 1e-10; hence the tolerance 1e-7 (relative).
    rows, cols = shape
    theta, step = np.array([0.2, 0.3]), 1e-5

    def log_z(t):
        return transfer_matrix_log_z(rows, cols, t[1], t[0], boundary, labels=labels)

    def mean(t):
        return transfer_matrix_moments(rows, cols, t[1], t[0], boundary, labels=labels).mean

    exact = transfer_matrix_moments(rows, cols, theta[1], theta[0], boundary, labels=labels)
    basis = np.eye(2) * step
    grad = [(log_z(theta + e) - log_z(theta - e)) / (2 * step) for e in basis]
    jac = np.stack([(mean(theta + e) - mean(theta - e)) / (2 * step) for e in basis], axis=1)
    np.testing.assert_allclose(grad, exact.mean, rtol=1e-7)
    np.testing.assert_allclose(jac, exact.cov, rtol=1e-7)
    np.testing.assert_allclose(exact.cov, exact.cov.T, rtol=1e-14)


# ---------------------------------------------------------------------------------------------
# Kaufman's torus formula
# ---------------------------------------------------------------------------------------------

COUPLINGS = [0.05, 0.2, 0.4, CRITICAL_COUPLING, 0.5, 1.0, 2.0]


@pytest.mark.parametrize("shape", [(3, 3), (4, 4), (4, 6), (6, 4), (5, 5), (3, 7)])
@pytest.mark.parametrize("coupling", COUPLINGS)
def test_kaufman_equals_the_transfer_matrix_on_small_tori(shape, coupling):
    # Kaufman (1949), Phys. Rev. 76, 1232; the transfer matrix is the independent reference,
    # including at K_c, where Kaufman's fourth term vanishes, and below it, where it is negative
    exact = transfer_matrix_log_z(*shape, coupling, boundary="periodic")
    assert abs(kaufman_log_z(*shape, coupling) - exact) < 1e-10


@pytest.mark.parametrize("shape", [(4, 4), (4, 6), (6, 8)])
@pytest.mark.parametrize("coupling", [-0.1, -0.44, -0.9])
def test_kaufman_antiferromagnet_on_bipartite_tori(shape, coupling):
    # the formula holds for K > 0; on an even×even torus flipping one sublattice maps K to −K
    # (common practice), which the transfer matrix confirms independently
    exact = transfer_matrix_log_z(*shape, coupling, boundary="periodic")
    assert abs(kaufman_log_z(*shape, coupling) - exact) < 1e-10


@pytest.mark.parametrize("coupling", [0.1, 0.4, CRITICAL_COUPLING, 0.47, 1.3])
def test_kaufman_is_symmetric_under_transposition(coupling):
    # in Kaufman's formula the two sides play different roles (number of factors vs the
    # multiplier of γ_k), so equality for 20×50 and 50×20 tests the formula, not a relabelling
    assert kaufman_log_z(20, 50, coupling) == pytest.approx(
        kaufman_log_z(50, 20, coupling), rel=1e-13
    )


# ---------------------------------------------------------------------------------------------
# Onsager's infinite lattice
# ---------------------------------------------------------------------------------------------


def onsager_double_integral(coupling):
    # Onsager (1944), Phys. Rev. 65, 117: the double-integral form, evaluated directly
    c, s = math.cosh(2 * coupling) ** 2, math.sinh(2 * coupling)
    value, _ = integrate.dblquad(
        lambda t1, t2: math.log(c - s * (math.cos(t1) + math.cos(t2))),
        0,
        math.pi,
        0,
        math.pi,
        epsabs=1e-12,
        epsrel=1e-12,
    )
    return math.log(2) + value / (2 * math.pi**2)


@pytest.mark.parametrize("coupling", [0.0, 0.2, 0.6, -0.35, 1.5])
def test_onsager_single_integral_equals_the_double_integral(coupling):
    assert onsager_free_energy(coupling) == pytest.approx(
        onsager_double_integral(coupling), abs=1e-10
    )


def test_catalan_constant_from_memory():
    # G = ∫_0^1 arctan(x)/x dx (standard integral representation, from memory), and the
    # alternating series Σ (−1)^k/(2k+1)², whose error is below the first omitted term
    by_integral, _ = integrate.quad(lambda x: math.atan(x) / x, 0, 1, epsabs=1e-14)
    k = np.arange(200_000)
    partial = np.sum((-1.0) ** k / (2 * k + 1.0) ** 2)
    assert by_integral == pytest.approx(CATALAN, abs=1e-14)
    assert abs(partial - CATALAN) < 1 / (2 * 200_000 + 1.0) ** 2


def test_onsager_values_at_the_critical_coupling():
    # sinh 2K_c = 1 (Kramers & Wannier 1941, Phys. Rev. 60, 252)
    assert math.sinh(2 * CRITICAL_COUPLING) == pytest.approx(1.0, rel=1e-15)
    # log Z per site at K_c = ln(2)/2 + 2G/π (Onsager 1944; G Catalan's constant, from memory)
    assert onsager_free_energy(CRITICAL_COUPLING) == pytest.approx(
        math.log(2) / 2 + 2 * CATALAN / math.pi, abs=1e-12
    )
    # energy per site at K_c is −√2 (Onsager 1944), also approached continuously from both sides
    assert onsager_energy_per_site(CRITICAL_COUPLING) == pytest.approx(-math.sqrt(2), abs=1e-14)
    for delta in (1e-6, -1e-6):
        assert onsager_energy_per_site(CRITICAL_COUPLING + delta) == pytest.approx(
            -math.sqrt(2), abs=1e-4
        )


@pytest.mark.parametrize("coupling", [0.1, 0.3, 0.6, 1.2])
def test_onsager_free_energy_is_self_dual(coupling):
    # Kramers & Wannier (1941), Phys. Rev. 60, 252, from memory: log Z/N − ½ ln sinh 2K is the
    # same at K and at its dual K*, tanh K* = e^{−2K}
    dual = math.atanh(math.exp(-2 * coupling))
    lhs = onsager_free_energy(coupling) - 0.5 * math.log(math.sinh(2 * coupling))
    rhs = onsager_free_energy(dual) - 0.5 * math.log(math.sinh(2 * dual))
    assert lhs == pytest.approx(rhs, abs=1e-12)


@pytest.mark.parametrize("coupling", [0.2, 0.35, 0.55, 0.9, -0.3])
def test_onsager_energy_is_minus_the_derivative_of_the_free_energy(coupling):
    # checks the elliptic-integral closed form and scipy's parameter convention m = κ²;
    # central difference, step 1e-4: truncation ~1e-8 |f'''| (couplings away from K_c, where
    # f''' diverges), rounding ~ quadrature error 1e-13 / step = 1e-9
    step = 1e-4
    slope = (onsager_free_energy(coupling + step) - onsager_free_energy(coupling - step)) / (
        2 * step
    )
    assert onsager_energy_per_site(coupling) == pytest.approx(-slope, abs=1e-7)


def test_onsager_energy_limits():
    # high-temperature expansion on the square lattice: log Z/N = ln 2 + 2 ln cosh K + t⁴ + 2t⁶
    # + O(t⁸), t = tanh K (one 4-edge loop and two 6-edge loops per site; counted by hand, the
    # series from memory), so u = −2t − (4t³ + 12t⁵)(1 − t²) + O(t⁷) (common practice);
    # ground state: u → −2 as K → ∞; u(0) = 0; u is odd in K
    for k in (1e-2, 3e-2):
        t = math.tanh(k)
        series = -2 * t - (4 * t**3 + 12 * t**5) * (1 - t**2)
        assert abs(onsager_energy_per_site(k) - series) < 50 * k**7
    assert onsager_energy_per_site(8.0) == pytest.approx(-2.0, abs=1e-12)
    assert onsager_energy_per_site(0.0) == 0.0
    both = onsager_energy_per_site(np.array([0.3, -0.3]))
    assert both[0] == -both[1] and both.shape == (2,)


@pytest.mark.parametrize("coupling", [0.3, 0.6])
def test_kaufman_per_site_converges_to_onsager_away_from_criticality(coupling):
    # On a torus away from K_c the correlation length ξ is finite, so the finite-size part of
    # log Z decays like e^{−L/ξ} (common practice): towards 0 above K_c (one disordered phase),
    # towards ln 2 below (two ordered phases, Z ≈ 2 Z_one-phase). At K = 0.3, 64×64 is exact to
    # rounding, far below 1e-3.
    limit = 0.0 if coupling < CRITICAL_COUPLING else math.log(2)
    errors = [
        abs(kaufman_log_z(size, size, coupling) - size**2 * onsager_free_energy(coupling) - limit)
        for size in (8, 16, 32)
    ]
    assert errors[0] > errors[1] > errors[2]
    assert errors[2] < 1e-5
    big = kaufman_log_z(64, 64, coupling) / 64**2 - onsager_free_energy(coupling)
    assert abs(big - limit / 64**2) < 1e-12


def test_kaufman_per_site_converges_to_onsager_at_criticality():
    # At K_c, log Z − N f_∞ tends to a constant with O(1/L²) corrections on a square torus
    # (finite-size scaling; Ferdinand & Fisher 1969, Phys. Rev. 185, 832, from memory), so the
    # per-site difference is O(1/L²) and successive differences of the constant shrink ~4×.
    f = onsager_free_energy(CRITICAL_COUPLING)
    excess = [kaufman_log_z(size, size, CRITICAL_COUPLING) - size**2 * f for size in (16, 32, 64)]
    steps = np.abs(np.diff(excess))
    assert 3.5 < steps[0] / steps[1] < 4.5
    assert 0 < excess[-1] < 1  # so the per-site difference at 64×64 is below 1/64² ≈ 2.4e-4


@pytest.mark.parametrize("coupling", [0.2, 0.3, 0.6, 0.8])
def test_onsager_energy_equals_a_derivative_of_kaufman_on_a_large_torus(coupling):
    # u = −d(log Z/N)/dK; on a 128×128 torus away from K_c the finite-size part is exponentially
    # small (previous test). Central difference, step 1e-5: truncation ~1e-10, rounding
    # ~ ε log Z / (N step) ~ 1e-11.
    size, step = 128, 1e-5
    slope = (
        kaufman_log_z(size, size, coupling + step) - kaufman_log_z(size, size, coupling - step)
    ) / (2 * step * size**2)
    assert onsager_energy_per_site(coupling) == pytest.approx(-slope, abs=1e-8)


def test_torus_energy_from_moments_matches_kaufman():
    # transfer-matrix moments E[Σ_edges s_i s_j] = d log Z/dK, Kaufman differentiated numerically
    step = 1e-5
    for coupling in (0.25, 0.6):
        moments = transfer_matrix_moments(5, 6, coupling, 0.0, "periodic")
        slope = (kaufman_log_z(5, 6, coupling + step) - kaufman_log_z(5, 6, coupling - step)) / (
            2 * step
        )
        assert moments.mean[1] == pytest.approx(slope, rel=1e-8)
        assert abs(moments.mean[0]) < 1e-10  # zero field: spin-flip symmetry


# ---------------------------------------------------------------------------------------------
# Yang's spontaneous magnetisation
# ---------------------------------------------------------------------------------------------


def test_yang_magnetisation_shape():
    # Yang (1952), Phys. Rev. 85, 808: zero up to and at K_c, increasing above, → 1 as K → ∞
    ks = CRITICAL_COUPLING + np.array([1e-6, 1e-3, 0.05, 0.2, 0.5, 1.0, 3.0])
    m = yang_magnetisation(ks)
    assert yang_magnetisation(CRITICAL_COUPLING) == 0.0
    assert yang_magnetisation(0.3) == 0.0 and yang_magnetisation(-0.8) == 0.0
    assert np.all(np.diff(m) > 0) and np.all((m > 0) & (m < 1))
    assert m[-1] == pytest.approx(1.0, abs=1e-10)
    # critical exponent 1/8 (Yang 1952): M ≈ (8√2 (K − K_c))^{1/8} just above K_c
    assert m[0] == pytest.approx((8 * math.sqrt(2) * 1e-6) ** 0.125, rel=1e-5)


@pytest.mark.parametrize("coupling", [1.0, 1.5])
def test_yang_magnetisation_matches_the_low_temperature_expansion(coupling):
    # one flipped spin breaks 4 bonds (weight e^{−8K} per site) and lowers M by 2/N, so
    # M = 1 − 2 e^{−8K} + O(e^{−12K}) (low-temperature expansion, common practice)
    correction = 1 - 2 * math.exp(-8 * coupling)
    assert abs(yang_magnetisation(coupling) - correction) < 20 * math.exp(-12 * coupling)


@pytest.mark.parametrize("coupling", [0.7, 0.8])
def test_yang_magnetisation_from_finite_tori(coupling):
    # In the ordered phase √E[m²] on an L×L torus (m = Σ s_i / N, zero field) tends to M with a
    # leading 1/N correction (the susceptibility over N); Richardson extrapolation in 1/N from two
    # sizes, with the change between extrapolations as its error estimate (common practice).
    rms = {}
    for size in (4, 5, 6):
        t = transfer_matrix_moments(size, size, coupling, 0.0, "periodic")
        rms[size] = math.sqrt(t.cov[0, 0] + t.mean[0] ** 2) / size**2

    def extrapolate(a, b):
        return (b**2 * rms[b] - a**2 * rms[a]) / (b**2 - a**2)

    assert rms[4] > rms[5] > rms[6] > yang_magnetisation(coupling)
    estimate, previous = extrapolate(5, 6), extrapolate(4, 5)
    assert abs(estimate - yang_magnetisation(coupling)) < abs(estimate - previous)


# ---------------------------------------------------------------------------------------------
# Posterior on a grid
# ---------------------------------------------------------------------------------------------


def beta_prior_on_half_logit(a, b):
    # θ = ½ logit p with p ~ Beta(a, b): density Beta(σ(2θ); a, b) · 2σ(2θ)(1 − σ(2θ))
    def log_prior(theta):
        p = special.expit(2 * theta)
        return np.sum(
            (a - 1) * np.log(p)
            + (b - 1) * np.log1p(-p)
            - special.betaln(a, b)
            + np.log(2 * p * (1 - p))
        )

    return log_prior


def half_logit_beta_moments(alpha, beta):
    # logit p for p ~ Beta(α, β): mean ψ(α) − ψ(β), variance ψ'(α) + ψ'(β) (closed form of the
    # log-Beta moments, common practice); θ = ½ logit p
    mean = (special.digamma(alpha) - special.digamma(beta)) / 2
    sd = math.sqrt(special.polygamma(1, alpha) + special.polygamma(1, beta)) / 2
    return mean, sd


def test_grid_posterior_equals_the_conjugate_beta_posterior():
    # one ±1 site with field θ: p(s = +1) = σ(2θ), so n draws with k ones have likelihood
    # p^k (1 − p)^{n−k}; a Beta(a, b) prior on p gives the Beta(a + k, b + n − k) posterior and
    # evidence B(a + k, b + n − k)/B(a, b) (conjugacy; e.g. Gelman et al., BDA 3rd ed., §2.4)
    a, b, n, k = 2.0, 3.0, 10, 7
    post = exact_posterior_on_grid(
        [2 * k - n],
        lambda theta: math.log(2 * math.cosh(theta[0])),
        np.linspace(-5, 5, 401),
        beta_prior_on_half_logit(a, b),
        num_observations=n,
    )
    mean, sd = half_logit_beta_moments(a + k, b + n - k)
    # the integrand is analytic in a strip |Im θ| < π/2, so the equally spaced rule converges
    # geometrically; the error here is at rounding level
    assert post.mean[0] == pytest.approx(mean, abs=1e-11)
    assert post.sd[0] == pytest.approx(sd, abs=1e-11)
    evidence = special.betaln(a + k, b + n - k) - special.betaln(a, b)
    assert post.log_evidence == pytest.approx(evidence, abs=1e-11)
    assert post.weights.sum() == pytest.approx(1.0, abs=1e-14)
    check_grid_edges(post)


def test_two_dimensional_grid_posterior_factorises():
    # two independent sites with their own fields, n joint draws and independent Beta priors:
    # the 2-D posterior is the product of two conjugate posteriors (as above), and the evidence
    # the product of the two evidences
    n, ks, priors = 10, (7, 2), [(2.0, 3.0), (1.0, 1.0)]
    # the Beta(3, 9) posterior of the second site has a lower tail ∝ e^{6θ}: [−8, 8] leaves
    # ~e^{−48} outside, where [−5, 5] would cost ~1e-10 in its sd
    axis = np.linspace(-8, 8, 161)
    grid = np.stack(np.meshgrid(axis, axis, indexing="ij"), axis=-1).reshape(-1, 2)
    log_priors = [beta_prior_on_half_logit(a, b) for a, b in priors]
    post = exact_posterior_on_grid(
        [2 * k - n for k in ks],
        lambda theta: float(np.sum(np.log(2 * np.cosh(theta)))),
        grid,
        lambda theta: log_priors[0](theta[0]) + log_priors[1](theta[1]),
        num_observations=n,
    )
    check_grid_edges(post)
    evidence = 0.0
    for j, ((a, b), k) in enumerate(zip(priors, ks, strict=True)):
        mean, sd = half_logit_beta_moments(a + k, b + n - k)
        assert post.mean[j] == pytest.approx(mean, abs=1e-10)
        assert post.sd[j] == pytest.approx(sd, abs=1e-10)
        evidence += special.betaln(a + k, b + n - k) - special.betaln(a, b)
    assert post.log_evidence == pytest.approx(evidence, abs=1e-10)


def test_grid_posterior_of_a_lattice_coupling():
    # posterior of (h, K) on a 3×3 free grid with one observed configuration: the same on the grid
    # with log Z from enumeration or from the transfer matrix, and the 1-D coupling posterior
    # (h = 0 known) equals an adaptive quadrature of the continuous posterior (scipy.integrate.quad)
    rng = np.random.default_rng(11)
    config = rng.choice([-1.0, 1.0], size=(1, 9))
    edges = grid_edges(3, 3)
    stats = ising_statistics(config, edges)[0]

    def log_prior(theta):
        return -0.5 * float(theta @ theta)  # N(0, I), unnormalised

    axis_h, axis_k = np.linspace(-3, 3, 31), np.linspace(-3, 3, 33)
    grid = np.stack(np.meshgrid(axis_h, axis_k, indexing="ij"), axis=-1).reshape(-1, 2)
    by_tm = exact_posterior_on_grid(
        stats, lambda t: transfer_matrix_log_z(3, 3, t[1], t[0]), grid, log_prior
    )
    by_enum = exact_posterior_on_grid(
        stats, lambda t: enumerate_log_z(ising_log_potential(edges, t[1], t[0]), 9), grid, log_prior
    )
    np.testing.assert_allclose(by_tm.weights, by_enum.weights, rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(by_tm.mean, by_enum.mean, rtol=1e-12)

    def log_post(k):
        return k * stats[1] - transfer_matrix_log_z(3, 3, k) - 0.5 * k * k

    ks = np.linspace(-6, 6, 241)
    grid_post = exact_posterior_on_grid(
        [stats[1]],
        lambda t: transfer_matrix_log_z(3, 3, t[0]),
        ks,
        lambda t: -0.5 * float(t[0] ** 2),
    )
    check_grid_edges(grid_post)
    shift = max(log_post(k) for k in ks)
    moments = [
        integrate.quad(
            lambda k, j=j: k**j * math.exp(log_post(k) - shift), -6, 6, epsabs=0, epsrel=1e-12
        )[0]
        for j in range(3)
    ]
    mean = moments[1] / moments[0]
    sd = math.sqrt(moments[2] / moments[0] - mean**2)
    assert grid_post.mean[0] == pytest.approx(mean, abs=1e-9)
    assert grid_post.sd[0] == pytest.approx(sd, abs=1e-9)


def test_grid_edges_are_checked_and_irregular_grids_need_cell_volumes():
    a, b, n, k = 2.0, 3.0, 10, 7
    narrow = exact_posterior_on_grid(
        [2 * k - n],
        lambda theta: math.log(2 * math.cosh(theta[0])),
        np.linspace(0.0, 1.0, 51),
        beta_prior_on_half_logit(a, b),
        num_observations=n,
    )
    mass = grid_edge_mass(narrow)
    assert mass.shape == (1, 2) and mass[0, 0] > 1e-3
    with pytest.raises(ValueError, match="lowest value of grid coordinate 0"):
        check_grid_edges(narrow)
    with pytest.raises(ValueError, match="not equally spaced"):
        exact_posterior_on_grid([0.0], lambda t: 0.0, np.array([0.0, 0.1, 0.3]), lambda t: 0.0)
    with pytest.raises(ValueError, match="tensor-product"):
        exact_posterior_on_grid(
            [0.0, 0.0], lambda t: 0.0, np.array([[0.0, 0.0], [1.0, 1.0]]), lambda t: 0.0
        )
