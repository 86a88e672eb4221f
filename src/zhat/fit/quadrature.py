"""Quadrature on a grid of the path parameter t ∈ [0, 1] for path sampling: Simpson's rule on
any spacing (the quadratic through each three points, integrated; common practice), the
trapezoid rule, and a grid concentrated where the integrand changes fast."""

from __future__ import annotations

import numpy as np
from jax.typing import ArrayLike

__all__ = ["coarse_weights", "concentrated_grid", "rule_weights"]


def rule_weights(grid: ArrayLike, rule: str = "simpson") -> np.ndarray:
    """Quadrature weights of Simpson's rule (pairs of intervals, any spacing) or the trapezoid
    rule on ``grid``; Simpson needs an even number of intervals."""
    t = np.asarray(grid, dtype=float)
    h = np.diff(t)
    w = np.zeros_like(t)
    if rule == "trapezoid":
        w[:-1] += h / 2
        w[1:] += h / 2
        return w
    if rule != "simpson":
        raise ValueError(f"rule must be 'simpson' or 'trapezoid', got {rule!r}.")
    if h.size % 2:
        raise ValueError(
            f"Simpson's rule needs an even number of grid intervals; the grid has {h.size}. "
            "Add a point or use rule='trapezoid'."
        )
    h0, h1 = h[0::2], h[1::2]
    s = (h0 + h1) / 6  # the quadratic through three points, integrated (any spacing)
    w[0:-1:2] += s * (2 - h1 / h0)
    w[1::2] += s * (h0 + h1) ** 2 / (h0 * h1)
    w[2::2] += s * (2 - h0 / h1)
    return w


def coarse_weights(t: np.ndarray, rule: str) -> np.ndarray | None:
    """Weights on every other point of ``t`` (the same rule on half the points, for a
    discretisation check), or None when the grid does not halve."""
    intervals = t.size - 1
    if intervals % (4 if rule == "simpson" else 2):
        return None
    w = np.zeros_like(t)
    w[::2] = rule_weights(t[::2], rule)
    return w


def concentrated_grid(
    num_intervals: int, centre: float, width: float, share: float = 0.5
) -> np.ndarray:
    """A grid of [0, 1] with ``num_intervals`` intervals, a fraction ``share`` of its points
    packed in a Gaussian bump of sd ``width`` around ``centre`` (e.g. where t reaches a
    critical coupling) and the rest evenly spread."""
    if not isinstance(num_intervals, (int, np.integer)) or num_intervals < 1:
        raise ValueError(f"num_intervals must be a positive integer, got {num_intervals!r}.")
    n = int(num_intervals)
    if not (0.0 <= share < 1.0) or width <= 0:
        raise ValueError(f"need 0 ≤ share < 1 and width > 0; got share={share}, width={width}.")
    fine = np.linspace(0.0, 1.0, 20001)
    bump = np.exp(-0.5 * ((fine - centre) / width) ** 2)
    bump_mass = np.trapezoid(bump, fine)
    density = (1 - share) + share * bump / bump_mass
    cdf = np.concatenate([[0.0], np.cumsum((density[1:] + density[:-1]) / 2 * np.diff(fine))])
    grid = np.interp(np.linspace(0.0, cdf[-1], n + 1), cdf, fine)
    grid[0], grid[-1] = 0.0, 1.0
    return grid
