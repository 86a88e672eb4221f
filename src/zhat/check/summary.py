"""A posterior summary that says which estimators are exact and warns before results mislead.

Parameters: ArviZ's summary (mean, sd, 90% interval, bulk ESS, R-hat; Vehtari et al. 2021,
Bayesian Analysis 16(2)). Estimators: each exposed factor's estimator with its exactness flag
and assumption; an APPROXIMATE estimator is stated as such in capitals, because its posterior
is not the exact one. Warnings: R-hat above 1.01 or bulk ESS below 100 per parameter (the
thresholds recommended by the same source), and the estimator-noise verdicts when given.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import arviz as az
import numpy as np

from zhat.check.noise import NoiseReport
from zhat.kernels.exchange import Exchange
from zhat.model.expose import FactorInfo

__all__ = ["posterior_summary"]

RHAT_LIMIT, ESS_LIMIT = 1.01, 100.0


def posterior_summary(
    samples: Mapping[str, Any],
    factors: Iterable[FactorInfo] = (),
    noise: Iterable[NoiseReport] = (),
    *,
    truth: Mapping[str, Any] | None = None,
    sampler: Any = None,
) -> str:
    """Text summary of chains ``samples`` (name → array (chains, draws, ...)).

    :param factors: what ``exposed.describe(*args)`` returned (estimators and their flags).
    :param noise: reports from :func:`zhat.check.estimator_noise`.
    :param truth: values used to simulate invented data, shown beside the estimates.
    :param sampler: the kernel that produced the chains; an approximate one (double
        Metropolis–Hastings) is flagged like an approximate estimator.
    """
    posterior = {k: np.asarray(v) for k, v in samples.items() if not k.endswith("_log_estimate")}
    for name, value in posterior.items():
        if value.ndim < 2:
            raise ValueError(
                f"Sample '{name}' has shape {value.shape}; pass chains grouped, e.g. "
                "`mcmc.get_samples(group_by_chain=True)`."
            )
    table = az.summary(az.from_dict(posterior=posterior), hdi_prob=0.9, round_to=4)
    columns = ["mean", "sd", "hdi_5%", "hdi_95%", "ess_bulk", "r_hat"]
    if truth is not None:
        table.insert(0, "simulated with", [_truth_for(truth, row) for row in table.index])
        columns = ["simulated with", *columns]
    lines = [table[columns].to_string()]
    warnings = []
    for row, values in table.iterrows():
        if values["r_hat"] > RHAT_LIMIT:
            warnings.append(
                f"R-hat of {row} is {values['r_hat']:.3f} > {RHAT_LIMIT}: not converged."
            )
        if values["ess_bulk"] < ESS_LIMIT:
            warnings.append(f"bulk ESS of {row} is {values['ess_bulk']:.0f} < {ESS_LIMIT:.0f}.")
    factors = list(factors)
    if factors:
        lines.append("\nEstimators:")
        for info in factors:
            est = info.estimator
            flag = "unbiased (exact posterior)" if est.unbiased else "APPROXIMATE (biased)"
            lines.append(f"  {info.site}: {est.name} — {flag}; {est.note}")
            if not est.unbiased:
                warnings.append(
                    f"the estimator at '{info.site}' is APPROXIMATE: this posterior is not the "
                    "exact one; compare with an exact estimator or a longer simulator run."
                )
    if isinstance(sampler, Exchange):
        flag = "exact auxiliary draws" if sampler.exact else "APPROXIMATE auxiliary draws"
        lines.append(f"\nSampler: {type(sampler).__name__} — {flag}")
        if not sampler.exact:
            warnings.append(
                f"{type(sampler).__name__} uses simulator runs instead of exact draws: this "
                "posterior is APPROXIMATE."
            )
    for report in noise:
        lines.append("  " + report.line())
        if report.verdict.startswith("WARNING") or not np.isfinite(report.sd):
            warnings.append(f"estimator noise at '{report.site}': {report.verdict}")
    if warnings:
        lines.append("\nWARNINGS:")
        lines.extend(f"  - {w}" for w in warnings)
    return "\n".join(lines)


def _truth_for(truth: Mapping[str, Any], row: str) -> Any:
    """The simulated value for an ArviZ row label such as 'beta[1]'."""
    name, _, index = row.partition("[")
    value = truth.get(name)
    if value is None or not index:
        return value
    return np.asarray(value)[tuple(int(i) for i in index.rstrip("]").split(","))]
