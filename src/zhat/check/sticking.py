"""Sticking: chains that keep one value for a long run of iterations.

A pseudo-marginal chain that accepts a lucky overestimate of f̂ can stay put for hundreds of
iterations; the draws still 'look' like a posterior but carry almost no information. The
longest run of identical consecutive values per chain is the plainest symptom (common
practice); a run longer than ``max(50, 2% of the draws)`` is flagged.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, NamedTuple

import numpy as np

__all__ = ["StickingReport", "longest_runs", "sticking"]


class StickingReport(NamedTuple):
    """Longest run of unchanged values per chain for one parameter."""

    site: str
    longest: np.ndarray
    draws: int
    limit: int

    @property
    def stuck(self) -> bool:
        return bool(np.any(self.longest > self.limit))

    def line(self) -> str:
        runs = ", ".join(str(int(r)) for r in self.longest)
        verdict = f"WARNING: a chain stuck for more than {self.limit} draws" if self.stuck else "ok"
        return f"{self.site}: longest unchanged run per chain [{runs}] of {self.draws}; {verdict}"


def longest_runs(chains: np.ndarray) -> np.ndarray:
    """Longest run of identical consecutive draws, per chain, of an array (chains, draws, ...)."""
    x = np.asarray(chains)
    if x.ndim < 2:
        raise ValueError(f"Expected (chains, draws, ...) draws, got shape {x.shape}.")
    x = x.reshape(x.shape[0], x.shape[1], -1)
    same = np.all(x[:, 1:] == x[:, :-1], axis=-1)
    out = np.ones(x.shape[0], dtype=int)
    for c in range(x.shape[0]):
        run = best = 1
        for flag in same[c]:
            run = run + 1 if flag else 1
            best = max(best, run)
        out[c] = best
    return out


def sticking(samples: Mapping[str, Any], *, limit: int | None = None) -> list[StickingReport]:
    """Sticking report for every sampled parameter (arrays shaped (chains, draws, ...))."""
    reports = []
    for name, value in samples.items():
        if name.endswith("_log_estimate") or name.endswith("_noise"):
            continue
        x = np.asarray(value)
        draws = x.shape[1] if x.ndim >= 2 else 0
        cap = limit if limit is not None else max(50, int(0.02 * draws))
        reports.append(StickingReport(name, longest_runs(x), draws, cap))
    return reports
