"""Figures of a run: trace plots, a pair plot, the estimator-noise diagnostic, predictive checks.

Every function returns a :class:`matplotlib.figure.Figure` drawn on the Agg canvas; nothing
touches pyplot's global state, so the figures are safe to build on a machine with no display.
:func:`figure_png` turns a figure into base64 PNG text for embedding in a page.
"""

from __future__ import annotations

import base64
import io
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from zhat.check.noise import HIGH, LOW, NoiseReport

if TYPE_CHECKING:
    from zhat.check.predictive import PredictiveCheck

__all__ = [
    "curve_bins",
    "figure_png",
    "noise_figure",
    "pair_figure",
    "predictive_figure",
    "scalar_components",
    "trace_figure",
]

MAX_TRACES = 12
MAX_PAIRS = 6


def _figure(width: float, height: float) -> Figure:
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def figure_png(fig: Figure, dpi: int = 90) -> str:
    """The figure as base64-encoded PNG text (no metadata, so no addresses inside)."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def scalar_components(posterior: Mapping[str, Any]) -> list[tuple[str, np.ndarray]]:
    """(label, (chains, draws)) for every scalar component of every parameter, in order."""
    out = []
    for name, value in posterior.items():
        x = np.asarray(value, dtype=float)
        if x.ndim == 2:
            out.append((name, x))
            continue
        flat = x.reshape(x.shape[0], x.shape[1], -1)
        for k, index in enumerate(np.ndindex(*x.shape[2:])):
            out.append((f"{name}[{','.join(str(i) for i in index)}]", flat[:, :, k]))
    return out


def trace_figure(posterior: Mapping[str, Any], limit: int = MAX_TRACES) -> Figure:
    """Draws against iteration (one line per chain) beside a histogram per chain."""
    parts = scalar_components(posterior)[:limit]
    if not parts:
        raise ValueError("No parameters to plot.")
    fig = _figure(9.0, 1.7 * len(parts) + 0.4)
    axes = fig.subplots(len(parts), 2, squeeze=False, width_ratios=[3, 1])
    for (label, x), (left, right) in zip(parts, axes, strict=True):
        for c, chain in enumerate(x):
            left.plot(chain, lw=0.6, alpha=0.8, label=f"chain {c}")
            right.hist(chain, bins=30, histtype="step", density=True)
        left.set_ylabel(label)
        right.set_yticks([])
    axes[0, 0].set_title("trace")
    axes[0, 1].set_title("marginal")
    axes[-1, 0].set_xlabel("draw")
    return fig


def pair_figure(posterior: Mapping[str, Any], limit: int = MAX_PAIRS) -> Figure | None:
    """Scatter plots of every pair of scalar components (at most ``limit``); None if < 2."""
    parts = scalar_components(posterior)[:limit]
    if len(parts) < 2:
        return None
    k = len(parts)
    fig = _figure(2.2 * k + 0.5, 2.2 * k + 0.5)
    axes = fig.subplots(k, k, squeeze=False)
    for i, (label_i, xi) in enumerate(parts):
        for j, (label_j, xj) in enumerate(parts):
            ax = axes[i, j]
            if i == j:
                ax.hist(xi.ravel(), bins=30, color="0.5")
            elif i > j:
                ax.plot(xj.ravel(), xi.ravel(), ".", ms=1.5, alpha=0.4)
            else:
                ax.axis("off")
            if i == k - 1:
                ax.set_xlabel(label_j)
            if j == 0 and i > 0:
                ax.set_ylabel(label_i)
    return fig


def noise_figure(reports: Iterable[NoiseReport], log_estimates: Mapping[str, Any]) -> Figure:
    """sd(log f̂) of each factor against the recommended band, and log f̂ recorded per draw."""
    reports = list(reports)
    panels = (1 if reports else 0) + len(log_estimates)
    if panels == 0:
        raise ValueError("No noise reports and no recorded log estimates to plot.")
    fig = _figure(8.0, 2.4 * panels + 0.4)
    axes = list(fig.subplots(panels, 1, squeeze=False)[:, 0])
    if reports:
        ax = axes.pop(0)
        ax.axvspan(LOW, HIGH, color="tab:green", alpha=0.2, label=f"recommended {LOW}–{HIGH}")
        y = np.arange(len(reports))
        sd = np.array([r.sd for r in reports], dtype=float)
        err = np.array([2 * r.sd_error for r in reports], dtype=float)
        shown = np.where(np.isfinite(sd), sd, np.nan)
        ax.errorbar(shown, y, xerr=np.where(np.isfinite(err), err, 0.0), fmt="o", capsize=3)
        ax.set_yticks(y, [f"{r.site} ({r.estimator})" for r in reports])
        top = np.nanmax(np.append(shown + err, HIGH)) if np.isfinite(shown).any() else HIGH
        ax.set_xlim(0.0, 1.15 * top)
        ax.set_xlabel("sd(log f̂) at fixed parameters (± 2 standard errors)")
        ax.legend(loc="lower right", fontsize="small")
    for ax, (site, values) in zip(axes, log_estimates.items(), strict=True):
        x = np.asarray(values, dtype=float)
        x = x.reshape(-1, x.shape[-1]) if x.ndim > 1 else x[None]
        for c, chain in enumerate(x):
            ax.plot(chain, lw=0.6, alpha=0.8, label=f"chain {c}")
        finite = x[np.isfinite(x)]
        spread = float(np.std(finite)) if finite.size > 1 else float("nan")
        ax.set_title(
            f"{site}: log f̂ recorded at the posterior draws (sd {spread:.2f}; includes the "
            "spread due to the parameters)",
            fontsize="small",
        )
        ax.set_xlabel("draw")
    return fig


_BIN = re.compile(r"^(?P<label>.*?)\s*(?P<bin>(?:≥ )?\S+)$")
MAX_TICKS = 8


def curve_bins(names: Sequence[str]) -> tuple[str, list[str], np.ndarray]:
    """The x axis of a curve of statistics from their names: (axis label, bin labels, x).

    A bin is the last word of a name, with a "≥ " before it ("y: correlation at distance 3" →
    "3", "g: degree ≥ 9" → "≥ 9", "g: distance inf" → "inf"). A numeric bin sits at its value,
    any other one step after the bin before it. The axis label is the rest of the first name
    after the site ("site: ") and after a final "at " ("distance", "degree", "shared partners").
    """
    labels, positions, axis = [], [], ""
    for k, name in enumerate(names):
        match = _BIN.match(name)
        label, text = (match["label"], match["bin"]) if match else ("", name)
        if k == 0:
            axis = label.split(": ", 1)[-1].rsplit(" at ", 1)[-1]
        try:
            x = float(text.removeprefix("≥ "))
        except ValueError:
            x = np.nan
        after = positions[-1] + 1.0 if positions else 0.0
        if not np.isfinite(x) or (positions and x <= positions[-1]):  # "inf", or out of order
            x = after
        labels.append(text)
        positions.append(x)
    return axis, labels, np.asarray(positions, dtype=float)


def _thinned(labels: Sequence[str]) -> list[int]:
    """About MAX_TICKS evenly spaced tick positions, always keeping the first and last bins and
    the bins that are not plain numbers ("≥ K", "inf"); picked from the end backwards."""
    every = -(-len(labels) // MAX_TICKS)
    kept = {0, len(labels) - 1, *(k for k, t in enumerate(labels) if not t[:1].isdigit())}
    for k in range(len(labels) - 1, -1, -1):
        if all(abs(k - j) >= every for j in kept):
            kept.add(k)
    return sorted(kept)


def _curve_axes(ax, check: PredictiveCheck, title: str, first: int, last: int) -> None:
    axis, labels, x = curve_bins(check.names[first:last])
    reps = check.replicates[:, first:last]
    low, mid, high = np.nanquantile(reps, [0.05, 0.5, 0.95], axis=0)
    ax.fill_between(x, low, high, color="tab:blue", alpha=0.25, label="replicates 5%–95%")
    ax.plot(x, mid, color="tab:blue", lw=1, label="replicate median")
    ax.plot(x, check.observed[first:last], "o-", color="black", ms=3, label="observed")
    ticks = _thinned(labels)
    ax.set_xticks(x[ticks], [labels[k] for k in ticks], fontsize="small")
    ax.set_xlabel(axis)
    ax.set_title(title, fontsize="small")
    ax.legend(fontsize="x-small")


def predictive_figure(check: PredictiveCheck, columns: int = 3) -> Figure:
    """Histogram of each statistic's replicates with the observed value as a line; each curve
    (correlation by distance, degree, shared-partner and distance distributions) as a band of
    replicates over its own bins (:func:`curve_bins`) against the observed curve."""
    in_curve = {k for _, a, b in check.curves for k in range(a, b)}
    singles: Sequence[int] = [k for k in range(len(check.names)) if k not in in_curve]
    panels = len(singles) + len(check.curves)
    rows = -(-panels // columns)
    fig = _figure(3.2 * columns, 2.5 * rows + 0.5)
    axes = fig.subplots(rows, columns, squeeze=False).ravel()
    for ax, k in zip(axes, singles, strict=False):
        values = check.replicates[:, k]
        values = values[np.isfinite(values)]
        ax.hist(values, bins=min(30, max(5, np.unique(values).size)), color="0.6")
        ax.axvline(check.observed[k], color="tab:red", lw=2)
        ax.set_title(f"{check.names[k]}\np = {check.p_values[k]:.3f}", fontsize="small")
    for ax, (title, first, last) in zip(axes[len(singles) :], check.curves, strict=False):
        _curve_axes(ax, check, title, first, last)
    for ax in axes[panels:]:
        ax.axis("off")
    if check.approximate:
        fig.suptitle("APPROXIMATE replicates (simulator runs)", color="tab:red")
    return fig
