"""What a finished run leaves behind: a summary on screen, a netCDF file, an HTML report.

The netCDF file is ArviZ InferenceData (:func:`zhat.check.to_inference_data`) holding what
``zhat report`` needs to render the report again without the model: the estimator-noise
reports, the sampler and the posterior-predictive check (:func:`zhat.check.store_checks`), and
as ``posterior`` attributes the title, the settings (``zhat_settings``), what the run was
started from (``zhat_source``) and, for invented data, the values they were simulated with
(``zhat_truth``).
"""

from __future__ import annotations

import json
import os
import warnings
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import arviz as az
import numpy as np
from jax import random

import zhat
from zhat.check.noise import NoiseReport
from zhat.cli.chunked import Job, Result, Settings
from zhat.cli.inputs import CommandError

__all__ = [
    "inference_data",
    "load_run",
    "noise_reports",
    "predictive_check",
    "render_report",
    "save_run",
    "summary_text",
    "title_of",
]


def noise_reports(result: Result, job: Job, seed: int, num_draws: int) -> list[NoiseReport]:
    """sd(log f̂) of every estimator at the posterior means."""
    if not result.factors or num_draws < 2:
        return []
    means = {k: np.mean(result.samples[k], axis=(0, 1)) for k in result.latent}
    key = random.fold_in(random.key(seed), 1)
    return zhat.check.estimator_noise(
        key, result.exposed, means, num_draws=num_draws, **dict(job.data)
    )


def summary_text(result: Result, noise: Iterable[NoiseReport], truth: Mapping | None) -> str:
    """The posterior summary with each estimator's exactness flag and the noise figures."""
    posterior = {k: result.samples[k] for k in result.latent}
    return zhat.check.posterior_summary(
        posterior, result.factors, noise, truth=truth, sampler=result.kernel
    )


def _plain(value: Any) -> Any:
    """JSON-ready copy of nested mappings of arrays and numbers."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (np.ndarray, np.generic)) or hasattr(value, "__array__"):
        return np.asarray(value).tolist()
    return value


def inference_data(
    result: Result,
    job: Job,
    settings: Settings,
    noise: Iterable[NoiseReport],
    predictive: Any = None,
    *,
    complete: bool = True,
) -> az.InferenceData:
    """InferenceData of the run, with what ``zhat report`` needs in its attributes."""
    # every recorded site (parameters, deterministic sites, log f̂) but copies of the data
    samples = {k: v for k, v in result.samples.items() if k in result.latent or k not in job.data}
    attrs = {
        "zhat_title": job.title,
        "zhat_settings": settings._asdict(),
        "zhat_source": job.source,
        "zhat_complete": int(complete),
    }
    if job.truth is not None:
        attrs["zhat_truth"] = _plain(job.truth)
    observed = {k: np.asarray(v) for k, v in job.data.items()}
    idata = zhat.check.to_inference_data(samples, result.factors, observed=observed, attrs=attrs)
    return _store_checks(idata, noise, predictive, result.kernel)


def _store_checks(idata: az.InferenceData, noise, predictive, sampler) -> az.InferenceData:
    """Noise reports, predictive check and sampler kept in ``idata`` for ``zhat report``."""
    try:
        from zhat.check.stored import store_checks
    except ImportError:
        return idata
    return store_checks(idata, noise=tuple(noise), predictive=predictive, sampler=sampler)


def predictive_check(result: Result, job: Job, seed: int, num_replicates: int):
    """Posterior-predictive check of the model's unnormalized observed sites, or ``None`` (with
    the reason) when it has none or the check is switched off."""
    if num_replicates < 2:
        return None, "switched off"
    try:
        from zhat.check.predictive import posterior_predictive
    except ImportError:
        return None, "not available in this installation"
    posterior = {k: result.samples[k] for k in result.latent}
    key = random.fold_in(random.key(seed), 2)
    try:
        with warnings.catch_warnings():  # its warnings are printed with the check's text
            warnings.simplefilter("ignore", UserWarning)
            check = posterior_predictive(
                key, job.model, posterior, num_replicates=num_replicates, **dict(job.data)
            )
    except ValueError as reason:
        return None, str(reason)
    return check, ""


def save_run(path: Path, idata: az.InferenceData) -> Path:
    """Write netCDF through a temporary file, so an existing run is never half overwritten."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    idata.to_netcdf(str(tmp))
    os.replace(tmp, path)
    return path


def load_run(path: Path) -> az.InferenceData:
    path = Path(path)
    if not path.is_file():
        raise CommandError(f"run file {path} not found; give a RUN.nc written by `zhat fit`.")
    try:
        return az.from_netcdf(str(path))
    except Exception as error:
        raise CommandError(
            f"{path} could not be read as a saved run ({type(error).__name__}: {error}); give a "
            "RUN.nc written by `zhat fit` or `zhat demo`."
        ) from None


def _attr(idata: az.InferenceData, name: str, default: Any = None) -> Any:
    value = idata.posterior.attrs.get(name, default)
    if isinstance(value, str) and value[:1] in "[{":
        return json.loads(value)
    return value


def title_of(idata: az.InferenceData) -> str | None:
    return _attr(idata, "zhat_title")


def render_report(
    path: Path,
    idata: az.InferenceData,
    *,
    factors: Iterable = (),
    noise: Iterable[NoiseReport] = (),
    predictive: Any = None,
    title: str | None = None,
    sampler: Any = None,
) -> Path | None:
    """The HTML report of a run (``zhat.check.report.write_report``), or ``None`` if this
    installation has no report writer."""
    try:
        from zhat.check.report import write_report
    except ImportError:
        return None
    return write_report(
        Path(path),
        idata,
        factors=tuple(factors),
        noise=tuple(noise),
        predictive=predictive,
        title=title,
        sampler=sampler,
    )
