"""Exact reference values for Ising and autologistic lattice models (numpy/scipy test oracles).

Nothing here imports zhat: these are the independent answers the library is tested against.

Model and conventions
---------------------
Two-valued site variables s_i ∈ labels, by default {−1, +1} (Ising spins); {0, 1} gives the
autologistic model (Besag 1974, J. R. Stat. Soc. B 36, 192). On a rows×cols grid the sites are
indexed i = r*cols + c (row-major) and

    log g(s) = Σ_i h_i s_i + K Σ_{edges {i,j}} s_i s_j,        Z = Σ_s g(s),

with every undirected edge counted once, h the field (a scalar or one value per site) and K the
coupling. Boundaries:

* "free": horizontal and vertical nearest-neighbour edges inside the grid,
  rows(cols − 1) + cols(rows − 1) edges;
* "periodic": also the wrap-around edges (r, cols−1)–(r, 0) and (rows−1, c)–(0, c), a torus with
  2·rows·cols edges. Periodic grids must have rows, cols ≥ 3: for a side of 2 the wrap edge would
  repeat the inner edge (a multigraph) and for a side of 1 it would be a self-loop, so those sizes
  are refused rather than given a silent meaning.

The sufficient statistics are t(s) = (Σ_i s_i, Σ_edges s_i s_j); with a scalar field,
log g = (h, K)·t(s) is an exponential family, so ∂log Z/∂(h, K) = E[t] and the Hessian is Cov[t].

Contents
--------
* `grid_edges`, `ising_statistics`, `ising_log_potential` — the convention above in code.
* `enumerate_log_z`, `enumerate_moments` — brute force over all configurations.
* `transfer_matrix_log_z`, `transfer_matrix_moments` — column-to-column transfer matrix
  (Kramers & Wannier 1941, Phys. Rev. 60, 252), moments through the expectation semiring.
* `kaufman_log_z` — closed form on the torus, zero field (Kaufman 1949, Phys. Rev. 76, 1232).
* `onsager_free_energy`, `onsager_energy_per_site` — infinite square lattice, zero field
  (Onsager 1944, Phys. Rev. 65, 117); `yang_magnetisation` (Yang 1952, Phys. Rev. 85, 808).
* `exact_posterior_on_grid`, `grid_edge_mass`, `check_grid_edges` — a posterior by quadrature
  on a grid of parameter values, given an exact log Z.

Everything is float64 numpy. The only approximations are numerical quadrature (Onsager's
integral; the posterior grid) and floating-point rounding.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Literal, NamedTuple

import numpy as np
from numpy.typing import ArrayLike
from scipy import integrate, special

Boundary = Literal["free", "periodic"]
LogPotential = Callable[[np.ndarray], np.ndarray]  # configs (M, num_sites) -> log g, shape (M,)
Statistics = Callable[[np.ndarray], np.ndarray]  # configs (M, num_sites) -> t, shape (M, d)
LogZFn = Callable[[np.ndarray], float]  # theta (d,) -> log Z(theta)
LogPrior = Callable[[np.ndarray], float]  # theta (d,) -> log prior density (up to a constant)

#: Critical coupling of the square lattice, sinh(2 K_c) = 1 (Kramers & Wannier 1941; Onsager 1944).
CRITICAL_COUPLING = 0.5 * math.log(1.0 + math.sqrt(2.0))

#: Largest number of configurations `enumerate_*` will visit by default (2^20).
MAX_CONFIGURATIONS = 2**20

#: Largest transfer-matrix side: the matrix is 2^side × 2^side.
MAX_TRANSFER_SIDE = 10

_CHUNK = 2**16


class ExactMoments(NamedTuple):
    """log Z, and the exact mean (d,) and covariance (d, d) of a statistic under g/Z."""

    log_z: float
    mean: np.ndarray
    cov: np.ndarray


class LatticeMoments(NamedTuple):
    """Exact moments of t = (Σ_i s_i, Σ_edges s_i s_j) on a grid.

    `magnetisation_per_site` is E[Σ_i s_i]/N and `energy_per_site` is −E[Σ_edges s_i s_j]/N
    (the coupling part only, in units of the coupling constant; the same convention as
    `onsager_energy_per_site`), with N = rows·cols.
    """

    log_z: float
    mean: np.ndarray
    cov: np.ndarray
    magnetisation_per_site: float
    energy_per_site: float


class GridPosterior(NamedTuple):
    """A posterior on a grid of parameter values (see `exact_posterior_on_grid`)."""

    theta: np.ndarray  # (G, d) grid points
    weights: np.ndarray  # (G,) normalised posterior mass of each grid cell
    mean: np.ndarray  # (d,) posterior mean of each coordinate
    sd: np.ndarray  # (d,) posterior standard deviation of each coordinate
    log_evidence: float  # log ∫ p(data | θ) π(θ) dθ by the same quadrature


# --------------------------------------------------------------------------------------------
# The convention in code: edges, statistics, log-potential
# --------------------------------------------------------------------------------------------


def _check_grid(rows: int, cols: int, boundary: str) -> None:
    if boundary not in ("free", "periodic"):
        raise ValueError(f"boundary must be 'free' or 'periodic', got {boundary!r}.")
    if int(rows) != rows or int(cols) != cols or rows < 1 or cols < 1:
        raise ValueError(f"rows and cols must be positive integers, got rows={rows}, cols={cols}.")
    if boundary == "periodic" and min(rows, cols) < 3:
        raise ValueError(
            f"A periodic grid needs rows, cols >= 3, got {rows}x{cols}: with a side of 2 the "
            "wrap-around edge would duplicate the inner edge and with a side of 1 it would be a "
            "self-loop. Use boundary='free' or a larger grid."
        )


def grid_edges(rows: int, cols: int, boundary: Boundary = "free") -> np.ndarray:
    """Undirected edges of a rows×cols grid as an (E, 2) int array of row-major site indices.

    Each edge appears once. Free: E = rows(cols−1) + cols(rows−1); periodic (rows, cols ≥ 3):
    E = 2·rows·cols.
    """
    _check_grid(rows, cols, boundary)
    periodic = boundary == "periodic"
    edges = []
    for r in range(rows):
        for c in range(cols):
            i = r * cols + c
            if c + 1 < cols:
                edges.append((i, i + 1))
            elif periodic:
                edges.append((i, r * cols))
            if r + 1 < rows:
                edges.append((i, i + cols))
            elif periodic:
                edges.append((i, c))
    return np.asarray(edges, dtype=np.int64).reshape(-1, 2)


def ising_statistics(configs: ArrayLike, edges: ArrayLike) -> np.ndarray:
    """t(s) = (Σ_i s_i, Σ_edges s_i s_j) for each row of `configs` (M, N); returns (M, 2)."""
    s = np.asarray(configs, dtype=np.float64)
    e = np.asarray(edges, dtype=np.int64)
    return np.stack([s.sum(axis=1), (s[:, e[:, 0]] * s[:, e[:, 1]]).sum(axis=1)], axis=1)


def ising_log_potential(edges: ArrayLike, coupling: float, field: ArrayLike = 0.0) -> LogPotential:
    """The vectorised log g(s) = Σ_i h_i s_i + K Σ_edges s_i s_j for `enumerate_*`.

    `field` is a scalar or an array whose row-major flattening has one value per site (e.g. a
    (rows, cols) array).
    """
    e = np.asarray(edges, dtype=np.int64)
    h = np.asarray(field, dtype=np.float64)

    def log_potential(configs: np.ndarray) -> np.ndarray:
        s = np.asarray(configs, dtype=np.float64)
        hs = s.sum(axis=1) * h if h.ndim == 0 else s @ h.reshape(-1)
        return hs + coupling * (s[:, e[:, 0]] * s[:, e[:, 1]]).sum(axis=1)

    return log_potential


# --------------------------------------------------------------------------------------------
# Brute-force enumeration
# --------------------------------------------------------------------------------------------


def _enumerate(
    log_potential: LogPotential,
    num_sites: int,
    labels: Sequence[float],
    statistics: Statistics | None,
    max_configurations: int,
) -> tuple[np.ndarray, np.ndarray | None]:
    labels_arr = np.asarray(labels, dtype=np.float64)
    q = labels_arr.shape[0]
    if labels_arr.ndim != 1 or q < 2 or np.unique(labels_arr).shape[0] != q:
        raise ValueError(f"labels must be at least two distinct numbers, got {labels!r}.")
    if int(num_sites) != num_sites or num_sites < 1:
        raise ValueError(f"num_sites must be a positive integer, got {num_sites!r}.")
    total = q**num_sites
    if total > max_configurations:
        raise ValueError(
            f"{q}^{num_sites} = {total} configurations exceeds max_configurations="
            f"{max_configurations}. Use the transfer matrix for grids, or raise the limit."
        )
    powers = q ** np.arange(num_sites, dtype=np.int64)
    log_w, stats = [], []
    for start in range(0, total, _CHUNK):
        index = np.arange(start, min(start + _CHUNK, total), dtype=np.int64)
        # configuration `index`: site i takes labels[digit i of index in base q]
        configs = labels_arr[(index[:, None] // powers) % q]
        lw = np.asarray(log_potential(configs), dtype=np.float64)
        if lw.shape != index.shape:
            raise ValueError(
                f"log_potential must map configs of shape {configs.shape} to shape "
                f"{index.shape}, got {lw.shape}."
            )
        log_w.append(lw)
        if statistics is not None:
            t = np.asarray(statistics(configs), dtype=np.float64)
            if t.ndim == 1:
                t = t[:, None]
            if t.ndim != 2 or t.shape[0] != index.shape[0]:
                raise ValueError(
                    f"statistics must map configs of shape {configs.shape} to shape "
                    f"({index.shape[0]},) or ({index.shape[0]}, d), got {t.shape}."
                )
            stats.append(t)
    return np.concatenate(log_w), (np.concatenate(stats) if statistics is not None else None)


def enumerate_log_z(
    log_potential: LogPotential,
    num_sites: int,
    labels: Sequence[float] = (-1, 1),
    *,
    max_configurations: int = MAX_CONFIGURATIONS,
) -> float:
    """Exact log Z = log Σ_x exp(log_potential(x)) over all x ∈ labels^num_sites.

    `log_potential` is vectorised: an (M, num_sites) float64 array of configurations to (M,).
    Configuration j assigns site i the label labels[(j // q^i) mod q], q = len(labels); they are
    visited in chunks of 2^16, and the sum is a log-sum-exp, so it cannot overflow. Intended for
    up to 16 binary sites (65 536 configurations); `max_configurations` guards the cost.
    """
    log_w, _ = _enumerate(log_potential, num_sites, labels, None, max_configurations)
    return float(special.logsumexp(log_w))


def enumerate_moments(
    statistics: Statistics,
    log_potential: LogPotential,
    num_sites: int,
    labels: Sequence[float] = (-1, 1),
    *,
    max_configurations: int = MAX_CONFIGURATIONS,
) -> ExactMoments:
    """Exact E[t] and Cov[t] of a vectorised statistic t under p(x) = g(x)/Z, by enumeration.

    p(x) = exp(log_potential(x) − log Z); E[t] = Σ_x p(x) t(x);
    Cov[t] = Σ_x p(x) (t(x) − E[t])(t(x) − E[t])ᵀ (two passes, so no cancellation).
    `statistics` maps (M, num_sites) to (M, d) or (M,). Same enumeration as `enumerate_log_z`.
    """
    log_w, t = _enumerate(log_potential, num_sites, labels, statistics, max_configurations)
    log_z = float(special.logsumexp(log_w))
    p = np.exp(log_w - log_z)
    mean = p @ t
    centred = t - mean
    cov = (centred * p[:, None]).T @ centred
    return ExactMoments(log_z, mean, cov)


# --------------------------------------------------------------------------------------------
# Transfer matrix
# --------------------------------------------------------------------------------------------


def _field_array(field: ArrayLike, rows: int, cols: int) -> np.ndarray:
    h = np.asarray(field, dtype=np.float64)
    if h.ndim == 0:
        return np.full((rows, cols), float(h))
    if h.shape != (rows, cols):
        raise ValueError(
            f"field must be a scalar or an array of shape (rows, cols) = ({rows}, {cols}), "
            f"got shape {h.shape}."
        )
    return h


def _column_problem(
    rows: int,
    cols: int,
    coupling: float,
    field: ArrayLike,
    boundary: str,
    labels: Sequence[float],
):
    """The chain of column-to-column factors whose product (periodic: trace) is Z.

    Returns (start, steps, periodic): start = (log weight, statistics) of column 0, of shapes
    (S,) and (2, S); steps = list of (log M, δ) with log M of shape (S, S) and δ of shape
    (2, S, S), the factor and the statistic increment for moving from one column to the next
    (periodic: the last step closes the ring from column cols−1 back to column 0).
    """
    _check_grid(rows, cols, boundary)
    h = _field_array(field, rows, cols)
    if rows > cols:  # the grid transposed is the same graph; transfer along the longer side
        rows, cols, h = cols, rows, h.T
    if rows > MAX_TRANSFER_SIDE:
        raise ValueError(
            f"The transfer matrix has size 2^min(rows, cols); min(rows, cols) = {rows} exceeds "
            f"{MAX_TRANSFER_SIDE}. Use a smaller grid."
        )
    labels_arr = np.asarray(labels, dtype=np.float64)
    if labels_arr.shape != (2,) or labels_arr[0] == labels_arr[1]:
        raise ValueError(f"labels must be two distinct numbers, got {labels!r}.")
    coupling = float(coupling)
    periodic = boundary == "periodic"
    # column state a ∈ [0, 2^rows): row r carries labels[bit r of a]
    bits = (np.arange(2**rows)[:, None] >> np.arange(rows)) & 1
    sigma = labels_arr[bits]  # (S, rows)
    vertical = (sigma[:, :-1] * sigma[:, 1:]).sum(axis=1)  # edges inside one column
    if periodic:
        vertical = vertical + sigma[:, -1] * sigma[:, 0]
    horizontal = sigma @ sigma.T  # (S, S): Σ_r σ_r(a) σ_r(b), edges between adjacent columns
    site_sum = sigma.sum(axis=1)

    def node(c):
        return coupling * vertical + sigma @ h[:, c]

    zeros = np.zeros_like(horizontal)
    start = (node(0), np.stack([site_sum, vertical]))
    steps = []
    for c in range(1, cols):
        log_m = coupling * horizontal + node(c)[None, :]
        delta = np.stack([zeros + site_sum[None, :], horizontal + vertical[None, :]])
        steps.append((log_m, delta))
    if periodic:
        steps.append((coupling * horizontal, np.stack([zeros, horizontal])))
    return start, steps, periodic


def _propagate(start, steps, periodic: bool, order: int, shift: np.ndarray):
    """Run the chain in the expectation semiring up to `order` (0, 1 or 2).

    Each entry of the running array X (1×S for free boundaries, S×S for periodic) holds the
    total weight W of the partial configurations ending in a column state (and, periodic,
    starting in another); F_i = Σ w·u_i and Q_ij = Σ w·u_i·u_j with u = t − shift, accumulated
    increment by increment. Multiplying by a factor M with increment δ:

        W ← W M,   F_i ← F_i M + W (M∘δ_i),
        Q_ij ← Q_ij M + F_i (M∘δ_j) + F_j (M∘δ_i) + W (M∘δ_i∘δ_j)

    (the first- and second-order expectation semirings; Li & Eisner 2009, EMNLP). All arrays
    are rescaled by the same factor after each step, and the log scale is accumulated.
    `shift` (d,) is subtracted from the total statistic, spread evenly over the increments.
    """
    d = shift.shape[0]
    per_step = shift / (len(steps) + 1)
    pairs = [(i, j) for i in range(d) for j in range(i, d)]
    log_w0, t0 = start
    log_scale = float(log_w0.max())
    w0 = np.exp(log_w0 - log_scale)
    u0 = t0 - per_step[:, None]
    if periodic:
        weight = np.diag(w0)
        first = np.stack([np.diag(w0 * u0[i]) for i in range(d)])
        second = {(i, j): np.diag(w0 * u0[i] * u0[j]) for i, j in pairs}
    else:
        weight = w0[None, :]
        first = (w0 * u0)[:, None, :]
        second = {(i, j): (w0 * u0[i] * u0[j])[None, :] for i, j in pairs}
    for log_m, delta in steps:
        top = float(log_m.max())
        m = np.exp(log_m - top)
        u = delta - per_step[:, None, None]
        mu = m[None] * u  # (d, S, S)
        new_weight = weight @ m
        if order >= 1:
            new_first = np.stack([first[i] @ m + weight @ mu[i] for i in range(d)])
        if order >= 2:
            second = {
                (i, j): second[i, j] @ m
                + first[i] @ mu[j]
                + first[j] @ mu[i]
                + weight @ (mu[i] * u[j])
                for i, j in pairs
            }
        scale = float(new_weight.max())
        weight = new_weight / scale
        if order >= 1:
            first = new_first / scale
        if order >= 2:
            second = {key: value / scale for key, value in second.items()}
        log_scale += top + math.log(scale)

    total = np.trace if periodic else np.sum
    w = float(total(weight))
    log_z = log_scale + math.log(w)
    if order == 0:
        return log_z, None, None
    mean_u = np.array([total(first[i]) for i in range(d)]) / w
    if order == 1:
        return log_z, mean_u + shift, None
    raw = np.empty((d, d))
    for i, j in pairs:
        raw[i, j] = raw[j, i] = total(second[i, j]) / w
    return log_z, mean_u + shift, raw - np.outer(mean_u, mean_u)


def transfer_matrix_log_z(
    rows: int,
    cols: int,
    coupling: float,
    field: ArrayLike = 0.0,
    boundary: Boundary = "free",
    *,
    labels: Sequence[float] = (-1, 1),
) -> float:
    """Exact log Z of the grid model by a column-to-column transfer matrix.

    With a column state a ∈ labels^rows (row r of the column), the within-column log weight
    φ_c(a) = K Σ_r a_r a_{r+1} (+ K a_{rows−1} a_0 if periodic) + Σ_r h_{r,c} a_r and the
    between-column factor T(a, b) = exp(K Σ_r a_r b_r),

        free:      Z = 1ᵀ D_0 T D_1 T ⋯ T D_{cols−1} 1,
        periodic:  Z = tr(D_0 T D_1 T ⋯ T D_{cols−1} T),        D_c = diag(exp φ_c)

    (Kramers & Wannier 1941, Phys. Rev. 60, 252). Each product is rescaled to a maximum of 1 and
    the log of the scale accumulated, so nothing overflows. The transfer runs along the longer
    side (transposing the grid, and the field, does not change Z); the matrix is
    2^min(rows, cols) square, so min(rows, cols) ≤ 10. Cost O(cols·4^rows) free and
    O(cols·8^rows) periodic.

    `field` is a scalar or a (rows, cols) array (h_{r,c} at site r*cols + c). `labels` are the
    two values a site can take: (−1, 1) Ising, (0, 1) autologistic.
    """
    start, steps, periodic = _column_problem(rows, cols, coupling, field, boundary, labels)
    log_z, _, _ = _propagate(start, steps, periodic, 0, np.zeros(2))
    return log_z


def transfer_matrix_moments(
    rows: int,
    cols: int,
    coupling: float,
    field: ArrayLike = 0.0,
    boundary: Boundary = "free",
    *,
    labels: Sequence[float] = (-1, 1),
) -> LatticeMoments:
    """Exact E and Cov of t = (Σ_i s_i, Σ_edges s_i s_j), with log Z, by the transfer matrix.

    The same product as `transfer_matrix_log_z`, carried in the second-order expectation
    semiring (Li & Eisner 2009, EMNLP): alongside the weights W, the arrays Σ w·t and Σ w·t tᵀ
    over partial configurations, with t split into per-column increments (see `_propagate`).
    This gives E[t] and E[t tᵀ] exactly, with no finite differences. Two passes: the first finds
    E[t]; the second accumulates the moments of t − E[t], so Cov[t] is not a difference of two
    large numbers. With a scalar field, E[t] = ∇ log Z and Cov[t] = ∇² log Z in (h, K);
    with a site-dependent field they are still the moments of t under that model.

    Cost: about 5 (first pass) + 17 (second pass) matrix products per column, each
    (1 or 2^rows)×2^rows by 2^rows×2^rows; keep min(rows, cols) ≤ 8 for periodic grids.
    """
    start, steps, periodic = _column_problem(rows, cols, coupling, field, boundary, labels)
    _, mean, _ = _propagate(start, steps, periodic, 1, np.zeros(2))
    log_z, mean, cov = _propagate(start, steps, periodic, 2, mean)
    n = rows * cols
    return LatticeMoments(log_z, mean, cov, float(mean[0] / n), float(-mean[1] / n))


# --------------------------------------------------------------------------------------------
# Closed forms: Kaufman (finite torus), Onsager and Yang (infinite lattice)
# --------------------------------------------------------------------------------------------


def _log_2cosh(x: np.ndarray) -> np.ndarray:
    ax = np.abs(x)
    return ax + np.log1p(np.exp(-2.0 * ax))


def _log_tanh_abs(x: np.ndarray) -> np.ndarray:
    e = np.exp(-2.0 * np.abs(x))
    return np.log(-np.expm1(-2.0 * np.abs(x))) - np.log1p(e)


def kaufman_log_z(rows: int, cols: int, coupling: float) -> float:
    """Exact log Z of the zero-field Ising model on a rows×cols torus (Kaufman 1949).

    Kaufman (1949), Phys. Rev. 76, 1232, for coupling K > 0 on an m×n torus (here m = cols,
    n = rows; the value is symmetric in the two):

        Z = ½ (2 sinh 2K)^{mn/2} (Z_1 + Z_2 + Z_3 + Z_4),
        Z_1 = Π_{r=0}^{n−1} 2 cosh(m γ_{2r+1}/2),   Z_2 = Π_{r=0}^{n−1} 2 sinh(m γ_{2r+1}/2),
        Z_3 = Π_{r=0}^{n−1} 2 cosh(m γ_{2r}/2),     Z_4 = Π_{r=0}^{n−1} 2 sinh(m γ_{2r}/2),

    with cosh γ_k = cosh 2K* cosh 2K − sinh 2K* sinh 2K cos(πk/n) = cosh 2K coth 2K − cos(πk/n),
    K* the dual coupling (tanh K* = e^{−2K}, so sinh 2K sinh 2K* = 1), γ_k > 0 for k ≥ 1 and
    γ_0 = 2(K − K*), which is negative below the critical coupling K_c = ½ ln(1 + √2), so that
    Z_4 < 0 there, and zero at K_c (the form is as restated by Ferdinand & Fisher 1969, Phys.
    Rev. 185, 832, from memory).

    Numerics: with s = sinh 2K, cosh γ_k − 1 = (s − 1)²/s + 2 sin²(πk/2n) and
    γ = log1p(y + √(y(y + 2))) for y = cosh γ − 1 (no cancellation near K_c), and
    sign γ_0 = sign(s − 1).
    Then log(Z_1 + Z_2) = log Z_1 + log1p(Π tanh) and log(Z_3 + Z_4) = log Z_3 + log(1 ± Π tanh),
    the minus case via −expm1 of the summed log tanh, so the possibly negative Z_4 costs no
    precision; the two are combined with logaddexp.

    The derivation assumes K > 0. K = 0 returns rows·cols·ln 2. For K < 0 the torus must be
    bipartite (rows and cols even); flipping one sublattice maps K to −K, so Z(K) = Z(−K). An
    odd side with K < 0 (a frustrated torus) is refused: use `transfer_matrix_log_z`.
    Periodic sides must be ≥ 3, as in `grid_edges`; |K| below ~350 (sinh 2K overflows beyond).
    Cost O(rows), so large tori (e.g. 200×200) are cheap.
    """
    _check_grid(rows, cols, "periodic")
    k_coupling = float(coupling)
    if k_coupling == 0.0:
        return rows * cols * math.log(2.0)
    if k_coupling < 0.0:
        if rows % 2 or cols % 2:
            raise ValueError(
                f"kaufman_log_z holds for coupling > 0; coupling={coupling} < 0 is reduced to "
                f"-coupling only on a bipartite torus (rows, cols even), got {rows}x{cols}. "
                "Use transfer_matrix_log_z(..., boundary='periodic')."
            )
        k_coupling = -k_coupling
    m, n = cols, rows
    s = math.sinh(2.0 * k_coupling)
    k = np.arange(2 * n)
    y = (s - 1.0) * ((s - 1.0) / s) + 2.0 * np.sin(np.pi * k / (2 * n)) ** 2
    gamma = np.log1p(y + np.sqrt(y * (y + 2.0)))
    gamma[0] *= np.sign(s - 1.0)
    half = 0.5 * m * gamma
    odd, even = half[1::2], half[0::2]
    log_z12 = float(_log_2cosh(odd).sum() + np.log1p(np.exp(_log_tanh_abs(odd).sum())))
    log_z34 = float(_log_2cosh(even).sum())
    if gamma[0] != 0.0:
        log_prod_tanh = float(_log_tanh_abs(even).sum())
        if gamma[0] > 0.0:
            log_z34 += math.log1p(math.exp(log_prod_tanh))
        else:
            log_z34 += math.log(-math.expm1(log_prod_tanh))
    log_prefactor = -math.log(2.0) + 0.5 * m * n * (math.log(2.0) + math.log(s))
    return log_prefactor + float(np.logaddexp(log_z12, log_z34))


def onsager_free_energy(coupling: ArrayLike) -> np.ndarray | float:
    """lim_{N→∞} (log Z)/N for the zero-field square-lattice Ising model (Onsager 1944).

    This is the dimensionless −βf (log Z per site, positive), not f. Onsager (1944), Phys. Rev.
    65, 117:

        −βf = ln 2 + (1/2π²) ∫_0^π ∫_0^π ln[cosh² 2K − sinh 2K (cos θ_1 + cos θ_2)] dθ_1 dθ_2,

    evaluated in the equivalent single-integral form (the common textbook form, from memory;
    the tests check it against the double integral above)

        −βf = ln(2 cosh 2K) + (1/π) ∫_0^{π/2} ln[½ (1 + √(1 − κ² sin² θ))] dθ,
        κ = 2 sinh 2K / cosh² 2K ≤ 1,

    by adaptive quadrature (scipy.integrate.quad, absolute error ≲ 1e-13). Even in K (the
    lattice is bipartite), so K < 0 is the antiferromagnet. Scalar in, float out; arrays
    elementwise. |K| must stay below ~170 (cosh² 2K overflows beyond).
    """

    def one(k: float) -> float:
        c = math.cosh(2.0 * k)
        kappa2 = (2.0 * math.sinh(2.0 * k) / (c * c)) ** 2

        def integrand(theta: float) -> float:
            return math.log(0.5 * (1.0 + math.sqrt(max(0.0, 1.0 - kappa2 * math.sin(theta) ** 2))))

        value, _ = integrate.quad(integrand, 0.0, 0.5 * math.pi, epsabs=1e-14, epsrel=1e-13)
        return math.log(2.0 * c) + value / math.pi

    k_arr = np.asarray(coupling, dtype=np.float64)
    if k_arr.ndim == 0:
        return one(float(k_arr))
    return np.vectorize(one, otypes=[np.float64])(k_arr)


def onsager_energy_per_site(coupling: ArrayLike) -> np.ndarray | float:
    """u(K) = −E[Σ_edges s_i s_j]/N = −d(−βf)/dK on the infinite lattice, zero field.

    Onsager (1944), Phys. Rev. 65, 117 (internal energy per site, coupling constant 1):

        u(K) = −coth 2K [1 + (2/π)(2 tanh² 2K − 1) K_1(κ)],   κ = 2 sinh 2K / cosh² 2K,

    with K_1(κ) = ∫_0^{π/2} (1 − κ² sin² θ)^{−1/2} dθ the complete elliptic integral of the first
    kind of modulus κ. scipy's ellipk takes the parameter m = κ², so we call
    scipy.special.ellipkm1(1 − κ²) with 1 − κ² = ((1 − s²)/(1 + s²))², s = sinh 2K, computed
    without cancellation near K_c. At K_c, 2 tanh² 2K_c − 1 = 0 while K_1 diverges only
    logarithmically, so u(K_c) = −coth 2K_c = −√2; we return the limit there. u(0) = 0, u → −2
    as K → ∞, and u is odd in K.
    """
    k = np.asarray(coupling, dtype=np.float64)
    s = np.sinh(2.0 * k)
    one_minus_m = ((1.0 - s * s) / (1.0 + s * s)) ** 2
    tanh2 = np.tanh(2.0 * k)
    with np.errstate(divide="ignore", invalid="ignore"):
        elliptic = special.ellipkm1(one_minus_m)
        prefactor = 2.0 * tanh2 * tanh2 - 1.0
        bracket = 1.0 + (2.0 / np.pi) * np.where(prefactor == 0.0, 0.0, prefactor * elliptic)
        u = np.where(k == 0.0, 0.0, -bracket / tanh2)
    return float(u) if u.ndim == 0 else u


def yang_magnetisation(coupling: ArrayLike) -> np.ndarray | float:
    """Spontaneous magnetisation per site of the infinite square lattice (Yang 1952).

    Yang (1952), Phys. Rev. 85, 808:  M(K) = (1 − sinh(2K)^{−4})^{1/8} for K > K_c =
    ½ ln(1 + √2), and M = 0 for K ≤ K_c (including K < 0, where the order is staggered
    instead). M is the limit h → 0⁺ of E[s_i] after N → ∞.
    """
    k = np.asarray(coupling, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        inner = 1.0 - np.sinh(2.0 * k) ** -4.0
        m = np.where(k > CRITICAL_COUPLING, np.clip(inner, 0.0, None) ** 0.125, 0.0)
    return float(m) if m.ndim == 0 else m


# --------------------------------------------------------------------------------------------
# Posterior by quadrature on a grid
# --------------------------------------------------------------------------------------------


def _as_grid(grid: ArrayLike) -> np.ndarray:
    g = np.asarray(grid, dtype=np.float64)
    if g.ndim == 1:
        g = g[:, None]
    if g.ndim != 2 or g.shape[0] < 2:
        raise ValueError(f"grid must have shape (G,) or (G, d) with G >= 2, got {g.shape}.")
    return g


def _regular_cell_volume(g: np.ndarray) -> float:
    """Cell volume of a full, equally spaced tensor-product grid; ValueError otherwise."""
    volume = 1.0
    count = 1
    for j in range(g.shape[1]):
        values = np.unique(g[:, j])
        steps = np.diff(values)
        if values.shape[0] < 2 or not np.allclose(steps, steps[0], rtol=1e-8, atol=0.0):
            raise ValueError(
                f"grid coordinate {j} is not equally spaced with >= 2 values; pass cell_volume "
                "(one value per grid point) for an irregular grid."
            )
        volume *= float(steps.mean())
        count *= values.shape[0]
    if count != g.shape[0] or np.unique(g, axis=0).shape[0] != g.shape[0]:
        raise ValueError(
            f"grid has {g.shape[0]} points but its coordinate values span {count}: it is not a "
            "full tensor-product grid. Pass cell_volume for an irregular grid."
        )
    return volume


def exact_posterior_on_grid(
    observed_stats: ArrayLike,
    log_z_fn: LogZFn,
    grid: ArrayLike,
    log_prior: LogPrior,
    *,
    num_observations: int = 1,
    cell_volume: ArrayLike | None = None,
) -> GridPosterior:
    """Posterior of θ for an exponential family g(x; θ) = exp(θ·t(x)), by quadrature on a grid.

    With n = `num_observations` independent draws whose summed statistics are
    `observed_stats` = Σ_k t(x_k), the log posterior density is, up to a constant,

        ℓ(θ) = θ·t_obs − n log Z(θ) + log π(θ),

    evaluated at each grid point θ_g (exact log Z from `log_z_fn`). Quadrature with cell volumes
    v_g (midpoint rule): weights w_g = v_g e^{ℓ(θ_g)} / Σ_h v_h e^{ℓ(θ_h)}, mean Σ_g w_g θ_g,
    sd √(Σ_g w_g (θ_g − mean)²), and log evidence log Σ_g v_g e^{ℓ(θ_g)} (meaningful when
    `log_prior` is a normalised density). "Exact" refers to the likelihood: the posterior
    summaries are as good as the quadrature, so the grid must be fine compared with the posterior
    sd and wide enough that the mass in its edge cells is negligible — check with
    `check_grid_edges`. `grid` is (G,) or (G, d); for a full equally spaced tensor-product grid the
    cell volume is inferred, otherwise pass `cell_volume` (a scalar or (G,)).
    """
    g = _as_grid(grid)
    t_obs = np.asarray(observed_stats, dtype=np.float64).reshape(-1)
    if t_obs.shape[0] != g.shape[1]:
        raise ValueError(
            f"observed_stats has {t_obs.shape[0]} entries but grid points have {g.shape[1]} "
            "coordinates; they must match (one statistic per parameter)."
        )
    if cell_volume is None:
        log_volume = np.full(g.shape[0], math.log(_regular_cell_volume(g)))
    else:
        v = np.broadcast_to(np.asarray(cell_volume, dtype=np.float64), (g.shape[0],))
        if np.any(v <= 0):
            raise ValueError("cell_volume must be positive.")
        log_volume = np.log(v)
    log_post = np.array(
        [
            float(theta @ t_obs)
            - num_observations * float(log_z_fn(theta))
            + float(log_prior(theta))
            for theta in g
        ]
    )
    if not np.all(np.isfinite(log_post) | (log_post == -np.inf)) or np.all(log_post == -np.inf):
        raise ValueError("the log posterior is NaN, +inf or -inf everywhere on the grid.")
    log_mass = log_post + log_volume
    log_evidence = float(special.logsumexp(log_mass))
    weights = np.exp(log_mass - log_evidence)
    mean = weights @ g
    sd = np.sqrt(weights @ (g - mean) ** 2)
    return GridPosterior(g, weights, mean, sd, log_evidence)


def grid_edge_mass(posterior: GridPosterior) -> np.ndarray:
    """Posterior mass on the lowest and highest grid value of each coordinate, shape (d, 2)."""
    g, w = posterior.theta, posterior.weights
    return np.array(
        [
            [w[g[:, j] == g[:, j].min()].sum(), w[g[:, j] == g[:, j].max()].sum()]
            for j in range(g.shape[1])
        ]
    )


def check_grid_edges(posterior: GridPosterior, tol: float = 1e-8) -> None:
    """Raise ValueError if the posterior mass on any edge of the grid exceeds `tol`."""
    mass = grid_edge_mass(posterior)
    for j, (low, high) in enumerate(mass):
        for side, value in (("lowest", low), ("highest", high)):
            if value > tol:
                raise ValueError(
                    f"posterior mass {value:.3g} at the {side} value of grid coordinate {j} "
                    f"exceeds tol={tol:g}: widen the grid in that direction."
                )
