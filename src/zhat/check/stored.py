"""Keep checks with a run: store noise reports, predictive checks and the sampler in an
InferenceData so that they survive a netCDF file and a report can be rendered from it alone.

Where they go: the estimator-noise reports and the sampler (name and exactness) as JSON
attributes ``zhat_noise`` and ``zhat_sampler`` of the ``posterior`` group; a posterior-predictive
check as a group of its own, ``predictive_check``, with variables ``observed`` (statistic),
``replicates`` (replicate, statistic), ``p_value`` (statistic) and ``exact`` (replicate). It is
not ArviZ's ``posterior_predictive`` group, which holds replicate data sets, not statistics.
"""

from __future__ import annotations

import json
import warnings
from collections.abc import Iterable
from typing import Any

import arviz as az
import numpy as np
import xarray as xr

from zhat.check.noise import NoiseReport
from zhat.check.predictive import PredictiveCheck
from zhat.kernels.exchange import Exchange

__all__ = [
    "PREDICTIVE_GROUP",
    "sampler_description",
    "store_checks",
    "stored_noise",
    "stored_predictive",
    "stored_sampler",
]

PREDICTIVE_GROUP = "predictive_check"
NOISE_ATTR, SAMPLER_ATTR = "zhat_noise", "zhat_sampler"


def sampler_description(sampler: Any) -> dict[str, Any] | None:
    """``{"name", "exact"}`` of a kernel (or a name); None for None.

    The exchange algorithm is exact only with perfect auxiliary draws (double
    Metropolis–Hastings is not); other kernels are valid MCMC on the exposed model, so exact
    whenever the estimators are. A bare name carries no exactness (``exact`` None).
    """
    if sampler is None:
        return None
    if isinstance(sampler, str):
        return {"name": sampler, "exact": None}
    if isinstance(sampler, dict):
        return {"name": str(sampler.get("name")), "exact": sampler.get("exact")}
    exact = bool(sampler.exact) if isinstance(sampler, Exchange) else True
    return {"name": type(sampler).__name__, "exact": exact}


def store_checks(
    idata: az.InferenceData,
    *,
    noise: Iterable[NoiseReport] = (),
    predictive: PredictiveCheck | None = None,
    sampler: Any = None,
) -> az.InferenceData:
    """Add the checks to ``idata`` (in place, also returned); an existing entry is replaced."""
    if not isinstance(idata, az.InferenceData) or "posterior" not in idata.groups():
        raise TypeError("store_checks needs an InferenceData with a posterior group.")
    noise = list(noise)
    if noise:
        idata.posterior.attrs[NOISE_ATTR] = json.dumps([r._asdict() for r in noise])
    info = sampler_description(sampler)
    if info is not None:
        idata.posterior.attrs[SAMPLER_ATTR] = json.dumps(info)
    if predictive is not None:
        dataset = xr.Dataset(
            {
                "observed": ("statistic", np.asarray(predictive.observed, float)),
                "replicates": (("replicate", "statistic"), np.asarray(predictive.replicates)),
                "p_value": ("statistic", np.asarray(predictive.p_values, float)),
                "exact": ("replicate", np.asarray(predictive.exact).astype(np.int8)),
            },
            coords={"statistic": list(predictive.names)},
            attrs={
                "method": predictive.method,
                "approximate": int(predictive.approximate),
                "curves": json.dumps([list(c) for c in predictive.curves]),
                "num_draws": int(predictive.num_draws),
            },
        )
        if PREDICTIVE_GROUP in idata.groups():
            del idata[PREDICTIVE_GROUP]
        with warnings.catch_warnings():  # a group outside ArviZ's scheme, on purpose
            warnings.simplefilter("ignore", UserWarning)
            idata.add_groups({PREDICTIVE_GROUP: dataset})
    return idata


def _attr(idata: az.InferenceData, name: str) -> Any:
    if "posterior" not in idata.groups():
        return None
    text = idata.posterior.attrs.get(name)
    return json.loads(text) if isinstance(text, str) else None


def stored_noise(idata: az.InferenceData) -> list[NoiseReport]:
    """The noise reports stored by :func:`store_checks` (empty when none)."""
    return [NoiseReport(**r) for r in (_attr(idata, NOISE_ATTR) or [])]


def stored_sampler(idata: az.InferenceData) -> dict[str, Any] | None:
    """The sampler stored by :func:`store_checks`, or a ``sampler`` attribute (name only)."""
    info = _attr(idata, SAMPLER_ATTR)
    if info is None and "posterior" in idata.groups():
        name = idata.posterior.attrs.get("sampler")
        info = sampler_description(str(name)) if name is not None else None
    return info


def stored_predictive(idata: az.InferenceData) -> PredictiveCheck | None:
    """The posterior-predictive check stored by :func:`store_checks`, or None."""
    if PREDICTIVE_GROUP not in idata.groups():
        return None
    ds = idata[PREDICTIVE_GROUP]
    return PredictiveCheck(
        names=tuple(str(n) for n in ds["statistic"].values),
        observed=np.asarray(ds["observed"].values, float),
        replicates=np.asarray(ds["replicates"].values, float),
        p_values=np.asarray(ds["p_value"].values, float),
        exact=np.asarray(ds["exact"].values).astype(bool),
        method=str(ds.attrs.get("method", "")),
        approximate=bool(int(ds.attrs.get("approximate", 0))),
        curves=tuple((str(t), int(a), int(b)) for t, a, b in json.loads(ds.attrs["curves"])),
        num_draws=int(ds.attrs.get("num_draws", 0)),
    )
