"""Diagnostics: summaries that flag approximate estimators, and how noisy the estimators are."""

from zhat.check.noise import NoiseReport, estimator_noise, log_estimates
from zhat.check.summary import posterior_summary

__all__ = ["NoiseReport", "estimator_noise", "log_estimates", "posterior_summary"]
