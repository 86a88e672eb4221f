"""Runs as ArviZ InferenceData, saved as netCDF files ArviZ reads back.

Groups: ``posterior`` (the parameters; never the estimator noise), ``sample_stats`` (the
estimator's log f̂ per draw as ``<site>_log_estimate``, and sampler statistics such as
acceptance), ``observed_data`` when given. The noisy factor log f̂ is *not* a pointwise
log-likelihood, so there is no ``log_likelihood`` group: criteria built on it (WAIC, PSIS-LOO)
would silently be wrong. Attributes record each estimator and whether it is unbiased.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping
from typing import Any

import arviz as az
import numpy as np

from zhat.model.expose import ESTIMATE_SUFFIX, NOISE_SUFFIX, FactorInfo

__all__ = ["to_inference_data"]


def to_inference_data(
    samples: Mapping[str, Any],
    factors: Iterable[FactorInfo] = (),
    *,
    sample_stats: Mapping[str, Any] | None = None,
    observed: Mapping[str, Any] | None = None,
    attrs: Mapping[str, Any] | None = None,
) -> az.InferenceData:
    """InferenceData from grouped chains ``samples`` (name → (chains, draws, ...)).

    :param factors: ``exposed.describe(*args)``, for the estimator attributes.
    :param sample_stats: extra per-draw statistics (chains, draws), e.g. acceptance.
    :param observed: observed data to store.
    :param attrs: further attributes (sampler name, settings).
    """
    posterior, stats = {}, {}
    for name, value in samples.items():
        value = np.asarray(value)
        if value.ndim < 2:
            raise ValueError(
                f"'{name}' has shape {value.shape}; pass chains grouped "
                "(`mcmc.get_samples(group_by_chain=True)`)."
            )
        if name.endswith(ESTIMATE_SUFFIX):
            stats[name] = value
        elif not name.endswith(NOISE_SUFFIX):
            posterior[name] = value
    for name, value in (sample_stats or {}).items():
        stats[name] = np.asarray(value)
    factors = list(factors)
    meta = {
        "zhat_estimators": json.dumps(
            {
                f.site: {
                    "estimator": f.estimator.name,
                    "unbiased": f.estimator.unbiased,
                    "smooth": f.estimator.smooth,
                    "note": f.estimator.note,
                }
                for f in factors
            }
        ),
        "zhat_exact": int(all(f.estimator.unbiased for f in factors)),
        **{
            k: (v if isinstance(v, (str, int, float)) else json.dumps(v))
            for k, v in (attrs or {}).items()
        },
    }
    groups: dict[str, Any] = {"posterior": posterior}
    if stats:
        groups["sample_stats"] = stats
    if observed:
        groups["observed_data"] = {k: np.asarray(v) for k, v in observed.items()}
    idata = az.from_dict(**groups)
    for group in idata.groups():
        idata[group].attrs.update(meta)
    return idata
