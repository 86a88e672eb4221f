"""Graph statistics s(A) of an undirected graph and their change statistics.

For adjacency A and a dyad (i, j), the change statistic is δ_ij(A) = s(A⁺_ij) − s(A⁻_ij), the
difference between the graph with the tie i–j present and absent (everything else as in A).
It drives the toggle sampler (Snijders 2002, J. Social Structure 3(2)) and the pseudo-likelihood
(Strauss & Ikeda 1990, JASA 85(409)). With d the degrees and sp_ij = Σ_k A_ik A_kj the shared
partners, all counted on A⁻_ij:

    edges                Σ_{i<j} A_ij                      δ = 1
    stars(k)             Σ_i C(d_i, k)        (k-stars)    δ = C(d_i, k−1) + C(d_j, k−1)
    triangles            Σ_{i<j<k} A_ij A_jk A_ik          δ = sp_ij
    covariate(x)         Σ_{i<j} A_ij (x_i + x_j)  (nodal main effect)   δ = x_i + x_j
    same_group(c)        Σ_{i<j} A_ij 1[c_i = c_j]  (homophily)          δ = 1[c_i = c_j]
    weighted_degrees(α)  Σ_i e^α (1 − r^{d_i}),  r = 1 − e^{−α}          δ = r^{d_i} + r^{d_j}
    weighted_shared_partners(α)  Σ_{i<j} A_ij e^α (1 − r^{sp_ij})
        δ = e^α (1 − r^{sp_ij}) + Σ_k A_ik A_jk (r^{sp_ik} + r^{sp_jk})

The last two are the geometrically weighted degree and edgewise shared partner statistics
(Snijders, Pattison, Robins & Handcock 2006, Sociol. Methodol. 36; Hunter & Handcock 2006,
JCGS 15(3)) with decay α > 0. Each change statistic costs O(n) from the adjacency matrix,
except weighted_shared_partners, which needs the shared partners of the ties at i: O(n²).
"""

from __future__ import annotations

import dataclasses
import math

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike

Array = jax.Array

__all__ = [
    "Statistic",
    "change_statistics",
    "covariate",
    "edges",
    "same_group",
    "stars",
    "statistics",
    "triangles",
    "weighted_degrees",
    "weighted_shared_partners",
]


@dataclasses.dataclass(frozen=True)
class Statistic:
    """One graph statistic; build it with :func:`edges`, :func:`stars`, ... (hashable)."""

    kind: str
    order: int = 0
    decay: float = 0.0
    values: tuple = ()

    @property
    def name(self) -> str:
        if self.kind == "stars":
            return f"stars{self.order}"
        if self.kind.startswith("weighted"):
            return f"{self.kind}({self.decay:g})"
        return self.kind

    def total(self, a: Array, directed: bool = False) -> Array:
        """s(A) for a (n, n) adjacency matrix (row i, column j: the tie i → j when directed)."""
        if directed:
            return self._directed_total(a)
        degree = jnp.sum(a, axis=1)
        if self.kind == "edges":
            return 0.5 * jnp.sum(a)
        if self.kind == "stars":
            return jnp.sum(_choose(degree, self.order))
        if self.kind == "triangles":
            return jnp.sum(a * (a @ a)) / 6.0
        if self.kind == "covariate":
            return jnp.sum(degree * self._values(a.dtype))
        if self.kind == "same_group":
            return 0.5 * jnp.sum(a * self._same(a.dtype))
        r = 1.0 - math.exp(-self.decay)
        scale = math.exp(self.decay)
        if self.kind == "weighted_degrees":
            return scale * jnp.sum(1.0 - r**degree)
        shared = a @ a  # weighted_shared_partners
        return 0.5 * scale * jnp.sum(a * (1.0 - r**shared))

    def change(self, a: Array, i: Array, j: Array, directed: bool = False) -> Array:
        """δ_ij for an adjacency matrix ``a`` whose dyad (i, j) is empty (see module doc); when
        ``directed``, the change of adding the tie i → j to ``a`` with ``a[i, j] = 0``."""
        if directed:
            return self._directed_change(a, i, j)
        if self.kind == "edges":
            return jnp.ones((), a.dtype)
        if self.kind == "stars":
            di, dj = jnp.sum(a[i]), jnp.sum(a[j])
            return _choose(di, self.order - 1) + _choose(dj, self.order - 1)
        if self.kind == "triangles":
            return jnp.dot(a[i], a[j])
        if self.kind == "covariate":
            x = self._values(a.dtype)
            return x[i] + x[j]
        if self.kind == "same_group":
            c = jnp.asarray(np.asarray(self.values))
            return (c[i] == c[j]).astype(a.dtype)
        r = 1.0 - math.exp(-self.decay)
        if self.kind == "weighted_degrees":
            return r ** jnp.sum(a[i]) + r ** jnp.sum(a[j])
        both = a[i] * a[j]  # weighted_shared_partners: the common partners k of i and j
        own = math.exp(self.decay) * (1.0 - r ** jnp.sum(both))
        return own + jnp.sum(both * (r ** (a[i] @ a) + r ** (a[j] @ a)))

    def _directed_total(self, a: Array) -> Array:
        if self.kind == "edges":
            return jnp.sum(a)
        raise _undirected_only(self)

    def _directed_change(self, a: Array, i: Array, j: Array) -> Array:
        if self.kind == "edges":
            return jnp.ones((), a.dtype)
        raise _undirected_only(self)

    def _values(self, dtype) -> Array:
        return jnp.asarray(np.asarray(self.values, dtype=float), dtype)

    def _same(self, dtype) -> Array:
        c = np.asarray(self.values)
        return jnp.asarray(c[:, None] == c[None, :], dtype)


def _undirected_only(stat: Statistic) -> ValueError:
    return ValueError(
        f"the statistic '{stat.name}' is defined here for undirected graphs only; drop it from "
        "a directed model or convert the graph with graph.to_undirected()."
    )


def _choose(d: Array, k: int) -> Array:
    """C(d, k) for whole numbers d ≥ 0 held as floats (zero when d < k)."""
    out = jnp.ones_like(d)
    for m in range(k):
        out = out * (d - m) / (m + 1)
    return jnp.maximum(out, 0.0) if k else out


def statistics(stats: tuple[Statistic, ...], a: ArrayLike, *, directed: bool = False) -> Array:
    """The vector s(A) of several statistics."""
    a = jnp.asarray(a, jnp.result_type(float))
    return jnp.stack([s.total(a, directed) for s in stats])


def change_statistics(
    stats: tuple[Statistic, ...], a: ArrayLike, i: Array, j: Array, *, directed: bool = False
) -> Array:
    """The vector δ_ij(A) of several statistics (dyad (i, j) of ``a`` may hold a tie; when
    ``directed``, the change of the tie i → j alone)."""
    a = jnp.asarray(a, jnp.result_type(float))
    a = a.at[i, j].set(0.0) if directed else a.at[i, j].set(0.0).at[j, i].set(0.0)
    return jnp.stack([s.change(a, i, j, directed) for s in stats])


# --- constructors -----------------------------------------------------------------------
def edges() -> Statistic:
    """Number of ties."""
    return Statistic("edges")


def stars(k: int = 2) -> Statistic:
    """Number of k-stars: a node with k of its ties, Σ_i C(d_i, k) (k = 1 counts each tie twice)."""
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise ValueError(f"stars(k) needs a whole number k ≥ 1 (2 for two-stars); got {k!r}.")
    return Statistic("stars", order=int(k))


def triangles() -> Statistic:
    """Number of triangles (three nodes all tied to each other)."""
    return Statistic("triangles")


def covariate(values: ArrayLike) -> Statistic:
    """Σ over ties of x_i + x_j for a numeric node covariate x (one value per node)."""
    x = np.asarray(values)
    if x.ndim == 1 and np.issubdtype(x.dtype, np.bool_):
        x = x.astype(float)
    if x.ndim != 1 or not np.issubdtype(x.dtype, np.number):
        raise ValueError(
            "covariate(values) needs one number per node (a 1-D numeric array); got "
            f"shape {x.shape}, dtype {x.dtype}. For group labels use same_group(labels)."
        )
    if not np.isfinite(x).all():
        raise ValueError(
            f"covariate values must be finite; found {x[~np.isfinite(x)][:3].tolist()} at nodes "
            f"{np.flatnonzero(~np.isfinite(x))[:3].tolist()}. Impute or drop those nodes."
        )
    return Statistic("covariate", values=tuple(float(v) for v in x))


def same_group(labels: ArrayLike) -> Statistic:
    """Number of ties between nodes with the same label (one label per node, any values)."""
    c = np.asarray(labels)
    if c.ndim != 1:
        raise ValueError(f"same_group(labels) needs one label per node (1-D); got shape {c.shape}.")
    _, codes = np.unique(c, return_inverse=True)
    return Statistic("same_group", values=tuple(int(v) for v in codes.reshape(-1)))


def _decay(decay: float, what: str) -> float:
    if not (isinstance(decay, (int, float, np.floating, np.integer)) and float(decay) > 0):
        raise ValueError(f"{what}(decay) needs a decay > 0 (e.g. 0.5); got {decay!r}.")
    return float(decay)


def weighted_degrees(decay: float = 0.5) -> Statistic:
    """Geometrically weighted degree with decay α > 0 (see module docstring)."""
    return Statistic("weighted_degrees", decay=_decay(decay, "weighted_degrees"))


def weighted_shared_partners(decay: float = 0.5) -> Statistic:
    """Geometrically weighted edgewise shared partners with decay α > 0 (see module docstring)."""
    return Statistic("weighted_shared_partners", decay=_decay(decay, "weighted_shared_partners"))
