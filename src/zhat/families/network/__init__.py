"""Random graph models: exponential-family models of an undirected or directed graph, with their
samplers (the statistics and their formulas: :mod:`zhat.families.network.statistics`).

Statistics (undirected / directed form):

- ``edges()`` — number of ties.
- ``mutual()`` — pairs tied both ways (directed only).
- ``stars(k)`` — k-stars; ``stars(k, direction="out" | "in")`` out-/in-k-stars (directed).
- ``triangles()`` — triangles; transitive triples i → j → k with i → k (directed).
- ``covariate(x)`` — Σ over ties of x_i + x_j; ``covariate(x, role="sender" | "receiver")``
  counts x at the sending / receiving end only (directed).
- ``same_group(c)`` — ties within a group; ``difference(x)`` — Σ over ties of |x_i − x_j|.
- ``weighted_degrees(α)`` — geometrically weighted degree; ``direction="out" | "in"`` (directed).
- ``weighted_shared_partners(α)`` / ``weighted_dyad_partners(α)`` — geometrically weighted
  edgewise / dyadwise shared partners; on a directed graph the partners of i and j are the k
  with i → k → j.
"""

from zhat.families.network.graph import adjacency, check_adjacency, is_directed, node_values
from zhat.families.network.models import dyad_design, dyads, model
from zhat.families.network.statistics import (
    Statistic,
    change_statistics,
    covariate,
    difference,
    edges,
    mutual,
    same_group,
    stars,
    statistics,
    triangles,
    weighted_degrees,
    weighted_dyad_partners,
    weighted_shared_partners,
)

__all__ = [
    "Statistic",
    "adjacency",
    "change_statistics",
    "check_adjacency",
    "covariate",
    "difference",
    "dyad_design",
    "dyads",
    "edges",
    "is_directed",
    "model",
    "mutual",
    "node_values",
    "same_group",
    "stars",
    "statistics",
    "triangles",
    "weighted_degrees",
    "weighted_dyad_partners",
    "weighted_shared_partners",
]
