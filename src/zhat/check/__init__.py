"""Diagnostics: how noisy the estimators are, and what to do about it."""

from zhat.check.noise import NoiseReport, estimator_noise, log_estimates

__all__ = ["NoiseReport", "estimator_noise", "log_estimates"]
