"""Diagnostics: summaries that flag approximate estimators, and how noisy the estimators are."""

from zhat.check.arviz_output import to_inference_data
from zhat.check.noise import NoiseReport, estimator_noise, log_estimates
from zhat.check.sticking import StickingReport, longest_runs, sticking
from zhat.check.summary import posterior_summary

__all__ = [
    "NoiseReport",
    "StickingReport",
    "estimator_noise",
    "log_estimates",
    "longest_runs",
    "posterior_summary",
    "sticking",
    "to_inference_data",
]
