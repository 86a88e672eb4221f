"""Graph statistics s(A) of an undirected or directed graph and their change statistics.

For adjacency A and a dyad (i, j), the change statistic is δ_ij(A) = s(A⁺_ij) − s(A⁻_ij), the
difference between the graph with the tie present and absent (everything else as in A); in a
directed graph (A_ij = 1: a tie i → j) the dyad is the ordered pair and only the tie i → j is
toggled. It drives the toggle sampler (Snijders 2002, J. Social Structure 3(2)) and the
pseudo-likelihood (Strauss & Ikeda 1990, JASA 85(409)). Everything is counted on A⁻_ij; d is
the degree, d⁺ / d⁻ the out- / in-degree, S = A² the two-paths (S_ij = Σ_k A_ik A_kj: the
shared partners of i and j when undirected, the k with i → k → j when directed), and
r = 1 − e^{−α} for a decay α > 0.

Undirected (sums over unordered pairs i < j)::

    edges                  Σ A_ij                             δ = 1
    stars(k)               Σ_i C(d_i, k)    (k-stars)          δ = C(d_i, k−1) + C(d_j, k−1)
    triangles              Σ_{i<j<k} A_ij A_jk A_ik            δ = S_ij
    covariate(x)           Σ A_ij (x_i + x_j)                  δ = x_i + x_j
    same_group(c)          Σ A_ij 1[c_i = c_j]                 δ = 1[c_i = c_j]
    difference(x)          Σ A_ij |x_i − x_j|                  δ = |x_i − x_j|
    weighted_degrees(α)    Σ_i e^α (1 − r^{d_i})               δ = r^{d_i} + r^{d_j}
    weighted_shared_partners(α)   Σ A_ij e^α (1 − r^{S_ij})
                           δ = e^α (1 − r^{S_ij}) + Σ_k A_ik A_jk (r^{S_ik} + r^{S_jk})
    weighted_dyad_partners(α)     Σ e^α (1 − r^{S_ij})  over all pairs, tied or not
                           δ = Σ_k A_jk r^{S_ik} + Σ_k A_ik r^{S_jk}

Directed (sums over ordered pairs i ≠ j)::

    edges                  Σ A_ij                             δ = 1
    mutual                 Σ_{i<j} A_ij A_ji                   δ = A_ji
    stars(k, "out")        Σ_i C(d⁺_i, k)   (out-k-stars)      δ = C(d⁺_i, k−1)
    stars(k, "in")         Σ_i C(d⁻_i, k)   (in-k-stars)       δ = C(d⁻_j, k−1)
    triangles              Σ A_ij A_jk A_ik (transitive triples, i, j, k distinct)
                           δ = (AAᵀ)_ij + (AᵀA)_ij + S_ij
    covariate(x, role)     Σ A_ij x_i ("sender"), Σ A_ij x_j ("receiver"), Σ A_ij (x_i + x_j)
                           ("both")                            δ = x_i, x_j or x_i + x_j
    same_group(c)          Σ A_ij 1[c_i = c_j]                 δ = 1[c_i = c_j]
    difference(x)          Σ A_ij |x_i − x_j|                  δ = |x_i − x_j|
    weighted_degrees(α, "out" | "in")  Σ_i e^α (1 − r^{d⁺_i})  δ = r^{d⁺_i}  (in: r^{d⁻_j})
    weighted_shared_partners(α)   Σ A_ij e^α (1 − r^{S_ij})
                           δ = e^α (1 − r^{S_ij}) + Σ_p A_pi A_pj r^{S_pj} + Σ_q A_iq A_jq r^{S_iq}
    weighted_dyad_partners(α)     Σ e^α (1 − r^{S_ij})  over all ordered pairs
                           δ = Σ_{p≠j} A_pi r^{S_pj} + Σ_{q≠i} A_jq r^{S_iq}

Sources: k-stars and triangles, Frank & Strauss 1986 (JASA 81(395)); mutuality, Holland &
Leinhardt 1981 (JASA 76(373)); transitive triples and out-/in-stars, Wasserman & Pattison 1996
(Psychometrika 61(3)); the covariate, same-group and absolute-difference terms are the usual
nodal main effect, homophily and absolute-difference homophily (common practice; see e.g.
Robins, Pattison, Kalish & Lusher 2007, Social Networks 29(2), reference from memory); the
weighted forms are the geometrically weighted degree, edgewise and dyadwise shared partner
statistics (Snijders, Pattison, Robins & Handcock 2006, Sociol.
Methodol. 36; Hunter & Handcock 2006, JCGS 15(3)), with the outgoing two-path (i → k → j)
partners of Hunter 2007 (Social Networks 29(2)) for directed graphs. The weighted changes use
e^α (r^s − r^{s+1}) = r^s: one more partner adds r^s.

Each change statistic costs O(n) from the adjacency matrix, except the two shared-partner
statistics, which need the two-paths of the pairs at i and j: O(n²).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike

Array = jax.Array

__all__ = [
    "Statistic",
    "change_statistics",
    "covariate",
    "difference",
    "edges",
    "mutual",
    "same_group",
    "stars",
    "statistics",
    "triangles",
    "weighted_degrees",
    "weighted_dyad_partners",
    "weighted_shared_partners",
]

_DEGREE_SIDES = ("out", "in")
_ROLES = ("sender", "receiver")


@dataclasses.dataclass(frozen=True)
class Statistic:
    """One graph statistic; build it with :func:`edges`, :func:`stars`, ... (hashable).

    ``side`` is "out" or "in" for the stars and weighted degrees of a directed graph, "sender"
    or "receiver" for a covariate counted at one end of a directed tie, "" otherwise.
    """

    kind: str
    order: int = 0
    decay: float = 0.0
    values: tuple = ()
    side: str = ""

    @property
    def name(self) -> str:
        if self.kind == "stars":
            return f"{self.side}_stars{self.order}" if self.side else f"stars{self.order}"
        if self.kind == "weighted_degrees" and self.side:
            return f"weighted_{self.side}_degrees({self.decay:g})"
        if self.kind.startswith("weighted"):
            return f"{self.kind}({self.decay:g})"
        return f"{self.kind}_{self.side}" if self.side else self.kind

    def check(self, directed: bool) -> None:
        """Raise ``ValueError`` if the statistic has no form for this kind of graph."""
        if self.kind not in _TOTALS:
            raise ValueError(
                f"unknown statistic kind {self.kind!r}; build statistics with the functions of "
                f"zhat.families.network, e.g. network.edges() (kinds: {sorted(_TOTALS)})."
            )
        if not directed and self.kind == "mutual":
            raise ValueError(
                "the statistic 'mutual' counts ties in both directions, which exist only in "
                "directed graphs; pass a networkx DiGraph or directed=True, or drop it."
            )
        if not directed and self.side:
            word = "role" if self.side in _ROLES else "direction"
            raise ValueError(
                f"the statistic '{self.name}' has {word}={self.side!r}, which needs a directed "
                f"graph; drop {word}=... for an undirected model, or pass directed=True."
            )
        if directed and self.kind in ("stars", "weighted_degrees") and not self.side:
            raise ValueError(
                f"on a directed graph '{self.name}' needs a direction: e.g. "
                f"{self.kind}(..., direction='out') for ties sent or direction='in' for ties "
                "received."
            )

    def total(self, a: Array, directed: bool = False) -> Array:
        """s(A) for a (n, n) adjacency matrix (row i, column j: the tie i → j when directed)."""
        self.check(directed)
        return _TOTALS[self.kind](self, a, directed)

    def change(self, a: Array, i: Array, j: Array, directed: bool = False) -> Array:
        """δ_ij for an adjacency matrix ``a`` whose dyad (i, j) is empty (see module doc); when
        ``directed``, the change of adding the tie i → j to ``a`` with ``a[i, j] = 0``."""
        self.check(directed)
        return _CHANGES[self.kind](self, a, i, j, directed)

    def _values(self, dtype) -> Array:
        return jnp.asarray(np.asarray(self.values, dtype=float), dtype)

    def _pairs(self, dtype) -> Array:
        """The (n, n) matrix of the pair term: 1[c_i = c_j] or |x_i − x_j|."""
        v = np.asarray(self.values)
        if self.kind == "same_group":
            return jnp.asarray(v[:, None] == v[None, :], dtype)
        return jnp.asarray(np.abs(v[:, None] - v[None, :]), dtype)

    def _ratio(self) -> float:
        return 1.0 - math.exp(-self.decay)


def _choose(d: Array, k: int) -> Array:
    """C(d, k) for whole numbers d ≥ 0 held as floats (zero when d < k)."""
    out = jnp.ones_like(d)
    for m in range(k):
        out = out * (d - m) / (m + 1)
    return jnp.maximum(out, 0.0) if k else out


def _half(directed: bool) -> float:
    """Sums over all (i, j) count each undirected pair twice."""
    return 1.0 if directed else 0.5


def _degrees(stat: Statistic, a: Array) -> Array:
    """Degrees (undirected), out-degrees (side "out") or in-degrees (side "in")."""
    return jnp.sum(a, axis=0) if stat.side == "in" else jnp.sum(a, axis=1)


def _off_diagonal(a: Array) -> Array:
    return 1.0 - jnp.eye(a.shape[0], dtype=a.dtype)


# --- totals s(A) --------------------------------------------------------------------------
def _edges_total(stat, a, directed):
    return _half(directed) * jnp.sum(a)


def _mutual_total(stat, a, directed):
    return 0.5 * jnp.sum(a * a.T)


def _stars_total(stat, a, directed):
    return jnp.sum(_choose(_degrees(stat, a), stat.order))


def _triangles_total(stat, a, directed):
    return jnp.sum(a * (a @ a)) / (1.0 if directed else 6.0)


def _covariate_total(stat, a, directed):
    x = stat._values(a.dtype)
    sent, received = jnp.sum(a, axis=1) @ x, jnp.sum(a, axis=0) @ x
    if stat.side == "sender":
        return sent
    if stat.side == "receiver":
        return received
    return _half(directed) * (sent + received)


def _pair_total(stat, a, directed):
    return _half(directed) * jnp.sum(a * stat._pairs(a.dtype))


def _weighted_degrees_total(stat, a, directed):
    return math.exp(stat.decay) * jnp.sum(1.0 - stat._ratio() ** _degrees(stat, a))


def _weighted_shared_partners_total(stat, a, directed):
    scale = _half(directed) * math.exp(stat.decay)
    return scale * jnp.sum(a * (1.0 - stat._ratio() ** (a @ a)))


def _weighted_dyad_partners_total(stat, a, directed):
    scale = _half(directed) * math.exp(stat.decay)
    return scale * jnp.sum(_off_diagonal(a) * (1.0 - stat._ratio() ** (a @ a)))


# --- change statistics δ_ij(A) ------------------------------------------------------------
def _edges_change(stat, a, i, j, directed):
    return jnp.ones((), a.dtype)


def _mutual_change(stat, a, i, j, directed):
    return a[j, i]


def _stars_change(stat, a, i, j, directed):
    k = stat.order - 1
    if stat.side == "out":
        return _choose(jnp.sum(a[i]), k)
    if stat.side == "in":
        return _choose(jnp.sum(a[:, j]), k)
    return _choose(jnp.sum(a[i]), k) + _choose(jnp.sum(a[j]), k)


def _triangles_change(stat, a, i, j, directed):
    if not directed:
        return jnp.dot(a[i], a[j])
    # the new tie i → j as each of the three ties p → q, q → r, p → r of a transitive triple
    return jnp.dot(a[i], a[j]) + jnp.dot(a[:, i], a[:, j]) + jnp.dot(a[i], a[:, j])


def _covariate_change(stat, a, i, j, directed):
    x = stat._values(a.dtype)
    if stat.side == "sender":
        return x[i]
    if stat.side == "receiver":
        return x[j]
    return x[i] + x[j]


def _pair_change(stat, a, i, j, directed):
    return stat._pairs(a.dtype)[i, j]


def _weighted_degrees_change(stat, a, i, j, directed):
    r = stat._ratio()
    if stat.side == "out":
        return r ** jnp.sum(a[i])
    if stat.side == "in":
        return r ** jnp.sum(a[:, j])
    return r ** jnp.sum(a[i]) + r ** jnp.sum(a[j])


def _weighted_shared_partners_change(stat, a, i, j, directed):
    # The tie i → j adds the two-paths p → i → j (S_pj + 1 for p with A_pi = 1) and
    # i → j → q (S_iq + 1 for q with A_jq = 1); a tied pair gains r^S per new partner. On a
    # symmetric matrix the same sums are the undirected change (S symmetric, A_pi = A_ip).
    r = stat._ratio()
    into_j, from_i = a @ a[:, j], a[i] @ a  # S_pj over p and S_iq over q
    own = math.exp(stat.decay) * (1.0 - r ** jnp.dot(a[i], a[:, j]))
    return own + jnp.sum(a[:, i] * a[:, j] * r**into_j) + jnp.sum(a[i] * a[j] * r**from_i)


def _weighted_dyad_partners_change(stat, a, i, j, directed):
    # As above, but every pair counts, tied or not (the diagonal S_jj, S_ii excluded).
    r = stat._ratio()
    nodes = jnp.arange(a.shape[0])
    into_j, from_i = a @ a[:, j], a[i] @ a
    return jnp.sum(jnp.where(nodes != j, a[:, i] * r**into_j, 0.0)) + jnp.sum(
        jnp.where(nodes != i, a[j] * r**from_i, 0.0)
    )


_TOTALS: dict[str, Callable] = {
    "edges": _edges_total,
    "mutual": _mutual_total,
    "stars": _stars_total,
    "triangles": _triangles_total,
    "covariate": _covariate_total,
    "same_group": _pair_total,
    "difference": _pair_total,
    "weighted_degrees": _weighted_degrees_total,
    "weighted_shared_partners": _weighted_shared_partners_total,
    "weighted_dyad_partners": _weighted_dyad_partners_total,
}
_CHANGES: dict[str, Callable] = {
    "edges": _edges_change,
    "mutual": _mutual_change,
    "stars": _stars_change,
    "triangles": _triangles_change,
    "covariate": _covariate_change,
    "same_group": _pair_change,
    "difference": _pair_change,
    "weighted_degrees": _weighted_degrees_change,
    "weighted_shared_partners": _weighted_shared_partners_change,
    "weighted_dyad_partners": _weighted_dyad_partners_change,
}


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


def mutual() -> Statistic:
    """Number of pairs tied in both directions, i → j and j → i (directed graphs only;
    mutuality, Holland & Leinhardt 1981, JASA 76(373))."""
    return Statistic("mutual")


def _side(value, allowed: tuple[str, ...], what: str, word: str) -> str:
    if value is None:
        return ""
    if value not in allowed:
        options = " or ".join(repr(s) for s in allowed)
        raise ValueError(f"{what}({word}=...) must be {options}; got {value!r}.")
    return value


def stars(k: int = 2, direction: str | None = None) -> Statistic:
    """Number of k-stars: a node with k of its ties, Σ_i C(d_i, k) (k = 1 counts each tie twice).

    :param direction: for a directed graph, "out" (k ties sent by one node: out-k-stars) or
        "in" (k ties received: in-k-stars); leave unset for an undirected graph.
    """
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise ValueError(f"stars(k) needs a whole number k ≥ 1 (2 for two-stars); got {k!r}.")
    return Statistic(
        "stars", order=int(k), side=_side(direction, _DEGREE_SIDES, "stars", "direction")
    )


def triangles() -> Statistic:
    """Number of triangles (three nodes all tied to each other); on a directed graph, the
    number of transitive triples i → j → k with i → k."""
    return Statistic("triangles")


def _numbers(values: ArrayLike, what: str) -> tuple[float, ...]:
    x = np.asarray(values)
    if x.ndim == 1 and np.issubdtype(x.dtype, np.bool_):
        x = x.astype(float)
    if x.ndim != 1 or not np.issubdtype(x.dtype, np.number):
        raise ValueError(
            f"{what}(values) needs one number per node (a 1-D numeric array); got "
            f"shape {x.shape}, dtype {x.dtype}. For group labels use same_group(labels)."
        )
    if not np.isfinite(x).all():
        raise ValueError(
            f"{what} values must be finite; found {x[~np.isfinite(x)][:3].tolist()} at nodes "
            f"{np.flatnonzero(~np.isfinite(x))[:3].tolist()}. Impute or drop those nodes."
        )
    return tuple(float(v) for v in x)


def covariate(values: ArrayLike, role: str = "both") -> Statistic:
    """Σ over ties of x_i + x_j for a numeric node covariate x (one value per node).

    :param role: for a directed graph, "sender" counts x at the node sending each tie,
        "receiver" at the node receiving it, "both" (the default, and the only choice for an
        undirected graph) at both ends.
    """
    side = "" if role == "both" else _side(role, _ROLES + ("both",), "covariate", "role")
    return Statistic("covariate", values=_numbers(values, "covariate"), side=side)


def difference(values: ArrayLike) -> Statistic:
    """Σ over ties of |x_i − x_j| for a numeric node covariate x (absolute-difference
    homophily: a negative coefficient favours ties between similar nodes)."""
    return Statistic("difference", values=_numbers(values, "difference"))


def same_group(labels: ArrayLike) -> Statistic:
    """Number of ties between nodes with the same label (one label per node, any values)."""
    c = np.asarray(labels)
    if c.ndim != 1:
        raise ValueError(f"same_group(labels) needs one label per node (1-D); got shape {c.shape}.")
    _, codes = np.unique(c, return_inverse=True)
    return Statistic("same_group", values=tuple(int(v) for v in codes.reshape(-1)))


def _decay(decay: float, what: str) -> float:
    if isinstance(decay, bool) or not (
        isinstance(decay, (int, float, np.floating, np.integer)) and float(decay) > 0
    ):
        raise ValueError(f"{what}(decay) needs a decay > 0 (e.g. 0.5); got {decay!r}.")
    return float(decay)


def weighted_degrees(decay: float = 0.5, direction: str | None = None) -> Statistic:
    """Geometrically weighted degree with decay α > 0 (see module docstring).

    :param direction: for a directed graph, "out" (out-degrees) or "in" (in-degrees); leave
        unset for an undirected graph.
    """
    side = _side(direction, _DEGREE_SIDES, "weighted_degrees", "direction")
    return Statistic("weighted_degrees", decay=_decay(decay, "weighted_degrees"), side=side)


def weighted_shared_partners(decay: float = 0.5) -> Statistic:
    """Geometrically weighted edgewise shared partners with decay α > 0 (see module docstring);
    on a directed graph the partners of a tie i → j are the k with i → k → j."""
    return Statistic("weighted_shared_partners", decay=_decay(decay, "weighted_shared_partners"))


def weighted_dyad_partners(decay: float = 0.5) -> Statistic:
    """Geometrically weighted dyadwise shared partners with decay α > 0: like
    :func:`weighted_shared_partners` but over every pair, tied or not (see module docstring)."""
    return Statistic("weighted_dyad_partners", decay=_decay(decay, "weighted_dyad_partners"))
