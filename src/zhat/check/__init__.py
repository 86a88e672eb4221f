"""Diagnostics: summaries that flag approximate estimators, how noisy the estimators are,
posterior-predictive checks, and a self-contained HTML report of a run."""

from zhat.check.arviz_output import to_inference_data
from zhat.check.lattice_statistics import (
    StatisticSet,
    correlation_by_distance,
    distance_pairs,
    join_counts,
    lattice_statistics,
)
from zhat.check.network_statistics import (
    degree_counts,
    distance_counts,
    network_statistics,
    shared_partner_counts,
)
from zhat.check.noise import NoiseReport, estimator_noise, log_estimates
from zhat.check.plots import noise_figure, pair_figure, predictive_figure, trace_figure
from zhat.check.predictive import PredictiveCheck, posterior_predictive, predictive_p_values
from zhat.check.report import write_report
from zhat.check.sticking import StickingReport, longest_runs, sticking
from zhat.check.stored import store_checks, stored_noise, stored_predictive, stored_sampler
from zhat.check.summary import posterior_summary

__all__ = [
    "NoiseReport",
    "PredictiveCheck",
    "StatisticSet",
    "StickingReport",
    "correlation_by_distance",
    "degree_counts",
    "distance_counts",
    "distance_pairs",
    "estimator_noise",
    "join_counts",
    "lattice_statistics",
    "log_estimates",
    "network_statistics",
    "longest_runs",
    "noise_figure",
    "pair_figure",
    "posterior_predictive",
    "posterior_summary",
    "predictive_figure",
    "predictive_p_values",
    "shared_partner_counts",
    "sticking",
    "store_checks",
    "stored_noise",
    "stored_predictive",
    "stored_sampler",
    "to_inference_data",
    "trace_figure",
    "write_report",
]
