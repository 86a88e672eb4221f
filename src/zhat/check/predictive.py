"""Posterior-predictive checks of models with an unnormalized likelihood.

For a thinned set of posterior draws θ_m, a replicate data set x_m ~ p(· | θ_m) is drawn for
every observed site whose distribution is a zhat unnormalized family, and test statistics T are
compared between the replicates and the observed data (Rubin 1984, Ann. Statist. 12(4); Gelman,
Meng & Stern 1996, Statistica Sinica 6(4)). The posterior-predictive p-value of T is

    p = Pr(T(x_rep) > T(x_obs)) + ½ Pr(T(x_rep) = T(x_obs)),

the mid-p form (Lancaster 1961, JASA 56), so statistics with many ties (join counts) are not
pushed to one side. p near 0 or near 1 both mean the model does not reproduce T; here a
statistic fails when p < 0.05 or p > 0.95.

Replicates come from the family's perfect sampler when it has one: exact draws, except those
that did not coalesce within the budget (counted, and warned about). Otherwise they come from a
fixed number of the family's simulator steps started at the observed data: such replicates are
APPROXIMATE (a slowly mixing simulator leaves them too close to the data, which pulls p-values
towards ½), and the result says so.

Statistics: the family's sufficient statistics when it declares them; on a lattice or map, join
counts and correlation by distance (:mod:`zhat.check.lattice_statistics`); on a network, the
degree, edgewise shared-partner and geodesic-distance distributions with bins fixed from the
observed graph (:mod:`zhat.check.network_statistics`); and any statistics the caller adds.
"""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Callable, Mapping
from typing import Any

import arviz as az
import jax
import jax.numpy as jnp
import numpy as np
from jax import lax, random
from numpyro.handlers import seed, substitute, trace

from zhat.check.lattice_statistics import StatisticSet, lattice_statistics
from zhat.check.network_statistics import network_statistics
from zhat.families.lattice.graph import Neighbours
from zhat.families.network.graph import NetworkStructure
from zhat.model.expose import ESTIMATE_SUFFIX, NOISE_SUFFIX, expose
from zhat.model.unnormalized import UnnormalizedDistribution

Array = jax.Array

__all__ = ["PredictiveCheck", "posterior_predictive", "predictive_p_values"]

LOW_P, HIGH_P = 0.05, 0.95


def predictive_p_values(observed: Any, replicates: Any) -> np.ndarray:
    """Mid-p posterior-predictive p-values, Pr(T_rep > T_obs) + ½ Pr(T_rep = T_obs).

    ``observed`` (K,), ``replicates`` (M, K). Replicates whose statistic is NaN are left out;
    a NaN observed statistic (or no finite replicate) gives NaN.
    """
    obs = np.asarray(observed, dtype=float)
    rep = np.asarray(replicates, dtype=float)
    if rep.ndim != 2 or rep.shape[1:] != obs.shape:
        raise ValueError(f"replicates must be (M, {obs.shape[0]}); got shape {rep.shape}.")
    finite = np.isfinite(rep)
    count = finite.sum(axis=0)
    above = np.where(finite, rep > obs, False).sum(axis=0)
    ties = np.where(finite, rep == obs, False).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = (above + 0.5 * ties) / count
    return np.where(np.isfinite(obs) & (count > 0), p, np.nan)


@dataclasses.dataclass(frozen=True, eq=False)
class PredictiveCheck:
    """Observed statistics, their replicates and posterior-predictive p-values.

    - **names** - statistic names, (K,).
    - **observed** - (K,) values at the observed data.
    - **replicates** - (M, K) values at the replicate data sets.
    - **p_values** - (K,) mid-p values (see :func:`predictive_p_values`).
    - **exact** - (M,) whether each replicate is an exact draw from the model.
    - **method** - how the replicates were drawn, one line per site.
    - **approximate** - True when replicates come from simulator runs, not exact draws.
    - **curves** - ``(title, first, last)``: statistics ``first..last−1`` form a curve
      (correlation by distance; degree, shared-partner and distance distributions), its bins
      the last word of each name ("… distance 3", "… degree ≥ 9", "… distance inf").
    - **num_draws** - number of posterior draws the replicates were thinned from.
    """

    names: tuple[str, ...]
    observed: np.ndarray
    replicates: np.ndarray
    p_values: np.ndarray
    exact: np.ndarray
    method: str
    approximate: bool
    curves: tuple[tuple[str, int, int], ...] = ()
    num_draws: int = 0

    @property
    def num_inexact(self) -> int:
        """Replicates that are not exact draws (perfect sampler out of budget, or simulator)."""
        return int(np.sum(~np.asarray(self.exact, dtype=bool)))

    @property
    def failures(self) -> tuple[str, ...]:
        """Statistics the model does not reproduce: p < 0.05 or p > 0.95."""
        p = np.asarray(self.p_values, dtype=float)
        return tuple(n for n, v in zip(self.names, p, strict=True) if v < LOW_P or v > HIGH_P)

    def warnings(self) -> list[str]:
        """What makes the check less than exact, and the statistics that fail, as sentences."""
        out = []
        if self.approximate:
            out.append(
                "posterior-predictive replicates are APPROXIMATE (simulator runs, not exact "
                "draws): " + self.method
            )
        elif self.num_inexact:
            out.append(
                f"{self.num_inexact} of {len(self.exact)} posterior-predictive replicates did "
                "not coalesce within the perfect sampler's budget (they are approximate); "
                "raise the budget."
            )
        for name in self.failures:
            p = float(self.p_values[self.names.index(name)])
            out.append(f"the model fails to reproduce {name} (posterior-predictive p = {p:.3f}).")
        return out

    def text(self) -> str:
        """A table of the statistics with a verdict naming the statistics that fail."""
        head = (
            f"Posterior-predictive check: {len(self.exact)} replicates from "
            f"{self.num_draws} posterior draws.\nReplicates: {self.method}"
        )
        lines = [head]
        if self.approximate:
            lines.append("APPROXIMATE: the replicates are simulator runs, not exact draws.")
        elif self.num_inexact:
            lines.append(
                f"WARNING: {self.num_inexact} replicates did not coalesce within the budget."
            )
        width = max(len(n) for n in self.names)
        lines.append(f"{'statistic':<{width}}  {'observed':>10}  {'replicates 5%–95%':>22}  p")
        low, high = np.nanquantile(self.replicates, [0.05, 0.95], axis=0)
        for k, name in enumerate(self.names):
            p = float(self.p_values[k])
            flag = "  <- fails" if (p < LOW_P or p > HIGH_P) else ""
            band = f"{low[k]:.3g} – {high[k]:.3g}"
            lines.append(f"{name:<{width}}  {self.observed[k]:>10.4g}  {band:>22}  {p:.3f}{flag}")
        failed = self.failures
        if failed:
            lines.append("The model fails to reproduce: " + ", ".join(failed) + ".")
        else:
            lines.append("The model reproduces every statistic (0.05 ≤ p ≤ 0.95).")
        return "\n".join(lines)

    def plot(self, **kwargs: Any):
        """Histograms of the replicates with the observed value, and distance curves as bands."""
        from zhat.check.plots import predictive_figure

        return predictive_figure(self, **kwargs)


@dataclasses.dataclass(frozen=True)
class _Site:
    name: str
    distribution: UnnormalizedDistribution
    observed: np.ndarray
    statistics: StatisticSet
    method: str
    approximate: bool


def _flat_draws(samples: Any) -> tuple[dict[str, np.ndarray], int]:
    if isinstance(samples, az.InferenceData):
        samples = {k: v.values for k, v in samples.posterior.data_vars.items()}
    if not isinstance(samples, Mapping) or not samples:
        raise TypeError(
            "samples must be a non-empty dict of posterior draws grouped by chain "
            "(`mcmc.get_samples(group_by_chain=True)`) or an ArviZ InferenceData."
        )
    flat, lead = {}, None
    for name, value in samples.items():
        if name.endswith(ESTIMATE_SUFFIX) or name.endswith(NOISE_SUFFIX):
            continue
        value = np.asarray(value)
        if value.ndim < 2 or (lead is not None and value.shape[:2] != lead):
            raise ValueError(
                f"'{name}' has shape {value.shape}; pass draws grouped by chain, every array "
                "shaped (chains, draws, ...), e.g. `mcmc.get_samples(group_by_chain=True)`."
            )
        lead = value.shape[:2]
        flat[name] = value.reshape(lead[0] * lead[1], *value.shape[2:])
    if not flat:
        raise ValueError("samples hold no parameters (only noise or log estimates).")
    return flat, int(lead[0] * lead[1])


def _site_statistics(name, distribution, observed, extra, max_distance) -> StatisticSet:
    sets = []
    family = distribution.family
    if family.statistics is not None:
        k = int(np.size(np.asarray(family.statistics(jnp.asarray(observed)))))
        names = tuple(f"{name}: sufficient statistic {i + 1}" for i in range(k))
        sets.append(StatisticSet(names, lambda x: jnp.ravel(family.statistics(x))))
    if isinstance(family.structure, Neighbours):
        labels = np.unique(np.asarray(observed)).tolist()
        sets.append(
            lattice_statistics(family.structure, labels, site=name, max_distance=max_distance)
        )
    if isinstance(family.structure, NetworkStructure):
        sets.append(network_statistics(family.structure, observed, site=name))
    for label, fn in (extra or {}).items():
        shape = np.shape(fn(jnp.asarray(observed)))
        if int(np.prod(shape)) != 1:
            raise ValueError(
                f"The statistic '{label}' returned shape {shape} at site '{name}'; a statistic "
                "must return one number (pass several statistics for several numbers)."
            )
        sets.append(StatisticSet((f"{name}: {label}",), lambda x, fn=fn: jnp.ravel(fn(x))))
    if not sets:
        raise ValueError(
            f"Site '{name}' ({family.name}) has no statistics to check: the family declares "
            "no sufficient statistics and no lattice or network structure. Pass "
            "statistics={'name': fn}."
        )
    names, curves, offset = [], [], 0
    for s in sets:
        curves += [(title, a + offset, b + offset) for title, a, b in s.curves]
        names += s.names
        offset += len(s.names)
    dtype = jnp.result_type(float)

    def compute(x: Array) -> Array:
        return jnp.concatenate([jnp.asarray(s.compute(x), dtype).reshape(-1) for s in sets])

    return StatisticSet(tuple(names), compute, tuple(curves))


def _find_sites(model, params, args, kwargs, extra, max_distance, budget, sweeps, simulator):
    first = {k: jnp.asarray(v[0]) for k, v in params.items()}
    model_trace = trace(substitute(seed(model, random.key(0)), data=first)).get_trace(
        *args, **kwargs
    )
    sites = []
    for name, site in model_trace.items():
        fn = site.get("fn")
        if site["type"] != "sample" or not isinstance(fn, UnnormalizedDistribution):
            continue
        if not site["is_observed"]:
            raise ValueError(f"The unnormalized site '{name}' is not observed: pass `obs=`.")
        family, observed = fn.family, np.asarray(site["value"])
        if family.perfect_sampler is not None:
            cond = family.perfect_sampler.conditions
            method, approx = f"'{name}': perfect sampler (budget {budget}; {cond})", False
        elif family.simulators:
            chosen = simulator or next(iter(family.simulators))
            if chosen not in family.simulators:
                raise ValueError(
                    f"Family '{family.name}' has no simulator '{chosen}'; it has "
                    f"{sorted(family.simulators)}."
                )
            method = (
                f"'{name}': APPROXIMATE, {sweeps} steps of the '{chosen}' simulator started at "
                "the observed data (the family has no perfect sampler)"
            )
            approx = True
        else:
            raise ValueError(
                f"Family '{family.name}' at site '{name}' has neither a perfect sampler nor a "
                "simulator, so no replicate data can be drawn."
            )
        stats = _site_statistics(name, fn, observed, extra, max_distance)
        sites.append(_Site(name, fn, observed, stats, method, approx))
    if not sites:
        raise ValueError(
            "The model has no observed site with a zhat unnormalized family (e.g. "
            "`numpyro.sample('y', lattice.ising(graph, coupling=...), obs=y)`): nothing to check."
        )
    return sites


def _draw(site: _Site, key: Array, fn: UnnormalizedDistribution, budget, sweeps, simulator):
    family, obs = fn.family, jnp.asarray(site.observed)
    if family.perfect_sampler is not None:
        sampler = family.perfect_sampler
        x, ok = sampler.draw(fn.params, random.normal(key, sampler.noise_shape(budget)))
        return jnp.reshape(x, obs.shape).astype(obs.dtype), jnp.asarray(ok, bool)
    step = family.simulators[simulator or next(iter(family.simulators))]

    def body(x: Array, t: Array) -> tuple[Array, None]:
        z = random.normal(random.fold_in(key, t), step.noise_shape(x))
        return jnp.reshape(step.step(fn.params, x, z), obs.shape).astype(obs.dtype), None

    return lax.scan(body, obs, jnp.arange(sweeps))[0], jnp.array(False)


def posterior_predictive(
    rng_key: Array,
    model: Callable[..., Any],
    samples: Any,
    *model_args: Any,
    num_replicates: int = 200,
    budget: int = 1024,
    sweeps: int = 200,
    simulator: str | None = None,
    max_distance: int = 5,
    statistics: Mapping[str, Callable[[Array], Array]] | None = None,
    **model_kwargs: Any,
) -> PredictiveCheck:
    """Posterior-predictive check of every observed unnormalized site of ``model``.

    :param model: the NumPyro model (exposed or not; the replicates use the exact family).
    :param samples: posterior draws grouped by chain, name → (chains, draws, ...), or an
        ArviZ InferenceData.
    :param num_replicates: number of posterior draws used, evenly spaced over all draws.
    :param budget: largest number of sweeps of one perfect draw.
    :param sweeps: simulator steps per replicate when the family has no perfect sampler.
    :param simulator: which of the family's simulators; default its first.
    :param max_distance: largest distance of the correlation-by-distance statistics of a
        lattice (a network's distance bins come from the observed graph instead).
    :param statistics: extra statistics, name → ``fn(x)`` returning a scalar.
    """
    if isinstance(model, expose):
        model = model.fn
    if int(num_replicates) < 2:
        raise ValueError(f"num_replicates must be at least 2, got {num_replicates}.")
    params, total = _flat_draws(samples)
    sites = _find_sites(
        model,
        params,
        model_args,
        model_kwargs,
        statistics,
        max_distance,
        budget,
        sweeps,
        simulator,
    )
    count = min(int(num_replicates), total)
    index = np.unique(np.linspace(0, total - 1, count).round().astype(int))
    chosen = {k: jnp.asarray(v[index]) for k, v in params.items()}

    def replicate(args: tuple[Array, dict[str, Array]]) -> tuple[Array, Array]:
        key, theta = args
        key_model, key_draw = random.split(key)
        model_trace = trace(substitute(seed(model, key_model), data=theta)).get_trace(
            *model_args, **model_kwargs
        )
        values, exact = [], jnp.array(True)
        for i, site in enumerate(sites):
            x, ok = _draw(
                site,
                random.fold_in(key_draw, i),
                model_trace[site.name]["fn"],
                budget,
                sweeps,
                simulator,
            )
            values.append(site.statistics.compute(x))
            exact = exact & ok
        return jnp.concatenate(values), exact

    keys = random.split(rng_key, index.shape[0])
    # batches keep memory bounded: a perfect draw's noise is budget × sites numbers
    reps, exact = lax.map(jax.jit(replicate), (keys, chosen), batch_size=8)
    observed = np.concatenate(
        [np.asarray(s.statistics.compute(jnp.asarray(s.observed))) for s in sites]
    )
    names, curves, offset = [], [], 0
    for s in sites:
        curves += [(t, a + offset, b + offset) for t, a, b in s.statistics.curves]
        names += s.statistics.names
        offset += len(s.statistics.names)
    reps = np.asarray(reps, dtype=float)
    result = PredictiveCheck(
        names=tuple(names),
        observed=observed.astype(float),
        replicates=reps,
        p_values=predictive_p_values(observed, reps),
        exact=np.asarray(exact, dtype=bool),
        method="; ".join(s.method for s in sites),
        approximate=any(s.approximate for s in sites),
        curves=tuple(curves),
        num_draws=total,
    )
    if result.approximate or result.num_inexact:
        warnings.warn(result.warnings()[0], stacklevel=2)
    return result
