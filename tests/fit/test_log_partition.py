"""log Z by annealed importance sampling and by path sampling, against exact values.

References: Kaufman (1949), Phys. Rev. 76, 1232 (closed-form log Z of the zero-field Ising model
on a finite torus) and the transfer matrix (Kramers & Wannier 1941, Phys. Rev. 60, 252) for a
small grid with a field, both in ``tests/references/lattice_exact.py``. The start of every path
is coupling 0, where the sites are independent: log Z = Σ_i log(2 cosh h_i) (closed form).
Tolerance: 4 reported Monte Carlo standard errors; each test also checks that the reported
error is small enough (< 0.5 nats) for the comparison to mean something.
"""

import math

import jax
import numpy as np
import pytest

from tests.references import lattice_exact as ref
from zhat.families import lattice
from zhat.fit import (
    annealed_log_z,
    concentrated_grid,
    log_likelihood,
    path_sampling_log_z,
    rule_weights,
)

SIDE = 32
TORUS = lattice.grid(SIDE, SIDE, "periodic")
START_LOG_Z = SIDE * SIDE * math.log(2.0)  # coupling 0, zero field: 2^N configurations
CRITICAL = 0.4407  # near log(1 + √2)/2 ≈ 0.44069, the critical coupling (Onsager 1944)

# Settings chosen by measurement (2 shared cores): at the critical coupling heat-bath chains mix
# slowly, so the annealing schedule and the path-sampling grid put half their points in a bump
# around t = 0.9–0.95 and the runs are longer.
ANNEALING = {
    0.3: {"schedule": 1000, "num_runs": 16},
    CRITICAL: {"schedule": concentrated_grid(2000, 0.9, 0.15, 0.5), "num_runs": 32},
}
PATH = {
    0.3: {"grid": 16, "burn_in": 50, "num_draws": 200},
    CRITICAL: {"grid": concentrated_grid(32, 0.95, 0.12, 0.5), "burn_in": 50, "num_draws": 400},
}


def exact_slope(coupling: float, t: np.ndarray) -> np.ndarray:
    """E_{t·J}[∂_t log g] = J · d log Z/dJ at t·J, by central differences of Kaufman's closed
    form (step 1e-5: truncation ~1e-10, rounding ~1e-8 nats)."""
    h = 1e-5
    return np.array(
        [
            coupling
            * (
                ref.kaufman_log_z(SIDE, SIDE, s * coupling + h)
                - ref.kaufman_log_z(SIDE, SIDE, s * coupling - h)
            )
            / (2 * h)
            for s in t
        ]
    )


@pytest.mark.parametrize("coupling", [0.3, CRITICAL])
def test_annealed_log_z_on_the_torus_matches_kaufman(key, coupling):
    exact = ref.kaufman_log_z(SIDE, SIDE, coupling)  # Kaufman (1949), Phys. Rev. 76, 1232
    dist = lattice.ising(TORUS, coupling=coupling)
    result = annealed_log_z(
        jax.random.fold_in(key, 1),
        dist,
        start={"coupling": 0.0},
        start_log_z=START_LOG_Z,
        **ANNEALING[coupling],
    )
    assert result.error < 0.5, result
    assert result.ess > 2, result
    assert abs(result.log_z - exact) <= 4 * result.error, (result.log_z, result.error, exact)


@pytest.mark.parametrize("coupling", [0.3, CRITICAL])
def test_path_sampling_on_the_torus_matches_kaufman(key, coupling):
    exact = ref.kaufman_log_z(SIDE, SIDE, coupling)  # Kaufman (1949), Phys. Rev. 76, 1232
    dist = lattice.ising(TORUS, coupling=coupling)
    result = path_sampling_log_z(
        jax.random.fold_in(key, 2),
        dist,
        start={"coupling": 0.0},
        start_log_z=START_LOG_Z,
        num_chains=16,
        **PATH[coupling],
    )
    assert result.error < 0.5, result.error
    # discretisation error of this rule on this grid, measured on the exact integrand (Kaufman's
    # log Z differentiated): far below the Monte Carlo error, so no allowance is added
    quadrature = START_LOG_Z + rule_weights(result.grid) @ exact_slope(coupling, result.grid)
    assert abs(quadrature - exact) < 0.1 * result.error, (quadrature - exact, result.error)
    assert abs(result.log_z - exact) <= 4 * result.error, (result.log_z, result.error, exact)
    # the averages along the path agree with the exact slope point by point
    slope = exact_slope(coupling, result.grid)
    assert np.all(np.abs(result.means - slope) <= 5 * result.mean_errors), result.means - slope


def test_small_grid_with_a_field_matches_the_transfer_matrix(key):
    rows, cols, coupling, field = 4, 4, 0.35, 0.2
    grid = lattice.grid(rows, cols)
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: transfer-matrix log Z with a field
    exact = ref.transfer_matrix_log_z(rows, cols, coupling, field, "free")
    dist = lattice.ising(grid, field=field, coupling=coupling)
    start = {"coupling": 0.0, "field": 0.0}  # both parameters move along the path
    log_z0 = rows * cols * math.log(2.0)
    ais = annealed_log_z(
        jax.random.fold_in(key, 3),
        dist,
        start=start,
        start_log_z=log_z0,
        schedule=200,
        num_runs=256,
    )
    path = path_sampling_log_z(
        jax.random.fold_in(key, 4),
        dist,
        start=start,
        start_log_z=log_z0,
        grid=16,
        num_chains=32,
        burn_in=20,
        num_draws=500,
    )
    for result in (ais, path):
        assert result.error < 0.05, result
        assert abs(result.log_z - exact) <= 4 * result.error, (result.log_z, result.error, exact)
    # with the field kept at the start, log Z(0) = N log(2 cosh h) (independent sites)
    kept = annealed_log_z(
        jax.random.fold_in(key, 5),
        dist,
        start={"coupling": 0.0},
        start_log_z=rows * cols * math.log(2 * math.cosh(field)),
        schedule=200,
        num_runs=256,
    )
    assert abs(kept.log_z - exact) <= 4 * kept.error, (kept.log_z, kept.error, exact)


def test_log_likelihood_is_log_potential_minus_log_z(key):
    grid = lattice.grid(4, 4)
    dist = lattice.ising(grid, field=0.1, coupling=0.3)
    y = np.where(np.arange(16).reshape(4, 4) % 3 == 0, 1, -1)
    est = annealed_log_z(
        key,
        dist,
        start={"coupling": 0.0},
        start_log_z=16 * math.log(2 * math.cosh(0.1)),
        schedule=100,
        num_runs=128,
    )
    value, error = log_likelihood(dist, y, est)
    edges = ref.grid_edges(4, 4)
    # Kramers & Wannier (1941): exact log p(y) = log g(y) − log Z
    exact = ref.ising_log_potential(edges, 0.3, 0.1)(y.reshape(1, -1).astype(float))[0]
    exact -= ref.transfer_matrix_log_z(4, 4, 0.3, 0.1, "free")
    assert error == est.error
    assert abs(value - exact) <= 4 * error, (value, error, exact)


def test_rule_weights_integrate_polynomials_exactly():
    t = concentrated_grid(8, 0.7, 0.1, 0.6)  # uneven spacing
    # Simpson's rule integrates the quadratic through each pair of intervals, so it is exact for
    # quadratics on any spacing and for cubics on even spacing (common practice)
    np.testing.assert_allclose(rule_weights(t) @ (3 * t**2 - t), 1.0 - 0.5, rtol=1e-12)
    even = np.linspace(0.0, 1.0, 9)
    np.testing.assert_allclose(rule_weights(even) @ (even**3 - even), 0.25 - 0.5, rtol=1e-12)
    np.testing.assert_allclose(rule_weights(t, "trapezoid") @ (2 * t + 1), 2.0, rtol=1e-12)
    assert t[0] == 0.0 and t[-1] == 1.0 and np.all(np.diff(t) > 0)
    assert np.sum(np.abs(t - 0.7) < 0.1) > np.sum(np.abs(t - 0.2) < 0.1)


def test_bad_inputs_are_refused(key):
    dist = lattice.ising(lattice.grid(4, 4), coupling=0.3)
    with pytest.raises(ValueError, match="does not have"):
        annealed_log_z(key, dist, start={"beta": 0.0}, start_log_z=1.0)
    with pytest.raises(ValueError, match="start_log_z"):
        path_sampling_log_z(key, dist, start={"coupling": 0.0}, start_log_z=None)
    with pytest.raises(ValueError, match="even number"):
        path_sampling_log_z(key, dist, start={"coupling": 0.0}, start_log_z=1.0, grid=5)
    with pytest.raises(ValueError, match="increasing"):
        annealed_log_z(key, dist, start={"coupling": 0.0}, start_log_z=1.0, schedule=[0.0, 0.5])
    with pytest.raises(TypeError, match="unnormalized family"):
        annealed_log_z(key, object(), start={"coupling": 0.0}, start_log_z=1.0)
    with pytest.raises(ValueError, match="no simulator"):
        annealed_log_z(key, dist, start={"coupling": 0.0}, start_log_z=1.0, simulator="metropolis")


def test_annealing_from_perfect_start_draws(key):
    """A start that is not independent sites: exact start draws by coupling from the past
    (Propp & Wilson 1996), start log Z from the transfer matrix (Kramers & Wannier 1941)."""
    rows, cols, field = 4, 4, 0.2
    dist = lattice.ising(lattice.grid(rows, cols), field=field, coupling=0.35)
    result = annealed_log_z(
        key,
        dist,
        start={"coupling": 0.2},
        start_log_z=ref.transfer_matrix_log_z(rows, cols, 0.2, field, "free"),
        schedule=50,
        num_runs=256,
        start_draws="perfect",
        budget=256,
    )
    exact = ref.transfer_matrix_log_z(rows, cols, 0.35, field, "free")
    assert result.error < 0.05, result
    assert abs(result.log_z - exact) <= 4 * result.error, (result.log_z, result.error, exact)
