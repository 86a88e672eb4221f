"""A run as one self-contained HTML page: warnings first, then the summary, plots and checks.

The page needs nothing but itself: images are base64 PNG drawn with matplotlib's Agg canvas, the
style sheet is inline, and there is no script, font or address to fetch, so it opens offline.

Warnings, at the top: approximate estimators or samplers (their posterior is not the exact one),
R-hat above 1.01 and bulk ESS below 100 (Vehtari et al. 2021, Bayesian Analysis 16(2)), chains
that stuck, estimator noise outside sd(log f̂) ≈ 1.0–1.7 (Doucet et al. 2015, Biometrika 102(2);
Sherlock et al. 2015, Ann. Statist. 43(1)), approximate or non-coalesced posterior-predictive
replicates, and the statistics the model fails to reproduce. The summary table is ArviZ's.

Everything comes from the InferenceData (see :func:`zhat.check.to_inference_data` and
:func:`zhat.check.store_checks`) or the optional arguments, so a run saved as netCDF renders
the same page after reading it back.
"""

from __future__ import annotations

import datetime
import html
import json
import math
import pathlib
from collections.abc import Iterable
from typing import Any

import arviz as az
import numpy as np

from zhat.check.noise import HIGH, LOW, NoiseReport
from zhat.check.plots import (
    MAX_PAIRS,
    MAX_TRACES,
    figure_png,
    noise_figure,
    pair_figure,
    scalar_components,
    trace_figure,
)
from zhat.check.predictive import PredictiveCheck
from zhat.check.sticking import sticking
from zhat.check.stored import sampler_description, stored_noise, stored_predictive, stored_sampler
from zhat.check.summary import ESS_LIMIT, RHAT_LIMIT
from zhat.model.expose import ESTIMATE_SUFFIX, FactorInfo

__all__ = ["write_report"]

STYLE = """
body { font-family: sans-serif; max-width: 70em; margin: 1em auto; padding: 0 1em;
       color: #222; line-height: 1.4; }
h1 { font-size: 1.6em; } h2 { border-bottom: 1px solid #ccc; margin-top: 1.6em; }
section.warnings { border: 3px solid #b00020; background: #fdecee; padding: 0.5em 1em; }
section.warnings h2 { color: #b00020; border: none; margin-top: 0.3em; }
section.no-warnings { border: 2px solid #2e7d32; background: #edf7ee; padding: 0.5em 1em; }
table { border-collapse: collapse; font-size: 0.9em; }
th, td { border: 1px solid #bbb; padding: 0.2em 0.6em; text-align: right; }
th { background: #f0f0f0; }
table.text td { text-align: left; }
img { max-width: 100%; display: block; margin: 0.5em 0; }
pre { background: #f6f6f6; padding: 0.6em; overflow-x: auto; font-size: 0.85em; }
.flag { color: #b00020; font-weight: bold; }
"""


def _estimators(idata: az.InferenceData, factors: Iterable[FactorInfo]) -> dict[str, dict]:
    """Estimator name and flags per factor site: from ``factors``, else the stored attribute."""
    factors = list(factors)
    if factors:
        return {
            f.site: {
                "estimator": f.estimator.name,
                "unbiased": bool(f.estimator.unbiased),
                "smooth": bool(f.estimator.smooth),
                "note": f.estimator.note,
            }
            for f in factors
        }
    text = idata.posterior.attrs.get("zhat_estimators")
    return json.loads(text) if isinstance(text, str) else {}


def _warnings(
    table: Any,
    estimators: dict[str, dict],
    sampler: dict | None,
    noise: list[NoiseReport],
    predictive: PredictiveCheck | None,
    posterior: dict[str, np.ndarray],
) -> list[str]:
    out = []
    for site, info in estimators.items():
        if not info.get("unbiased", True):
            out.append(
                f"The estimator at '{site}' ({info.get('estimator')}) is APPROXIMATE: this "
                "posterior is not the exact one. Compare with an exact estimator."
            )
    if sampler is not None and sampler.get("exact") is False:
        out.append(
            f"The sampler {sampler['name']} uses simulator runs instead of exact draws: this "
            "posterior is APPROXIMATE."
        )
    chains = next(iter(posterior.values())).shape[0]
    if chains < 2:
        out.append("Only one chain: R-hat cannot be computed. Run at least 2 chains.")
    for row, values in table.iterrows():
        if values["r_hat"] > RHAT_LIMIT:
            out.append(f"R-hat of {row} is {values['r_hat']:.3f} > {RHAT_LIMIT}: not converged.")
        if values["ess_bulk"] < ESS_LIMIT:
            out.append(
                f"Bulk ESS of {row} is {values['ess_bulk']:.0f} < {ESS_LIMIT:.0f}: too few "
                "effective draws for reliable summaries."
            )
    for report in sticking(posterior):
        if report.stuck:
            out.append(report.line())
    for report in noise:
        if report.verdict.startswith("WARNING") or not math.isfinite(report.sd):
            out.append(f"Estimator noise at '{report.site}': {report.verdict}")
    if predictive is not None:
        out.extend(w[0].upper() + w[1:] for w in predictive.warnings())
    return out


def _image(fig: Any, alt: str) -> str:
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{figure_png(fig)}">'


def _warning_section(items: list[str]) -> str:
    if not items:
        return '<section id="warnings" class="no-warnings"><h2>Warnings</h2><p>None.</p></section>'
    rows = "".join(f"<li>{html.escape(w)}</li>" for w in items)
    return (
        '<section id="warnings" class="warnings">'
        f"<h2>Warnings ({len(items)})</h2><ul>{rows}</ul></section>"
    )


def _estimator_section(estimators: dict[str, dict], sampler: dict | None) -> str:
    rows = []
    for site, info in estimators.items():
        exact = info.get("unbiased", True)
        flag = "unbiased (exact posterior)" if exact else '<span class="flag">APPROXIMATE</span>'
        rows.append(
            f"<tr><td>{html.escape(site)}</td><td>{html.escape(str(info.get('estimator')))}"
            f"</td><td>{flag}</td><td>{html.escape(str(info.get('note', '')))}</td></tr>"
        )
    body = (
        '<table class="text"><tr><th>site</th><th>estimator</th><th>exactness</th>'
        "<th>assumes</th></tr>" + "".join(rows) + "</table>"
        if rows
        else "<p>No intractable factor was recorded with this run.</p>"
    )
    if sampler is not None:
        state = {True: "exact", False: '<span class="flag">APPROXIMATE</span>', None: "not stated"}
        body += f"<p>Sampler: {html.escape(sampler['name'])} ({state[sampler.get('exact')]}).</p>"
    return f'<section id="estimators"><h2>Estimators</h2>{body}</section>'


def _noise_section(noise: list[NoiseReport], log_estimates: dict[str, np.ndarray]) -> str:
    parts = [
        f"<p>Target: sd(log f̂) between {LOW} and {HIGH} at parameter values of high posterior "
        "mass (Doucet et al. 2015; Sherlock et al. 2015).</p>"
    ]
    if noise:
        parts.append("<pre>" + html.escape("\n".join(r.line() for r in noise)) + "</pre>")
    else:
        parts.append(
            "<p>No estimator-noise measurement is stored with this run: measure it with "
            "<code>zhat.check.estimator_noise</code> at the posterior mean and pass "
            "<code>noise=</code> (or keep it with <code>zhat.check.store_checks</code>).</p>"
        )
    if noise or log_estimates:
        parts.append(_image(noise_figure(noise, log_estimates), "estimator noise"))
    return f'<section id="noise"><h2>Estimator noise</h2>{"".join(parts)}</section>'


def _predictive_section(predictive: PredictiveCheck | None) -> str:
    if predictive is None:
        body = (
            "<p>No posterior-predictive check with this run (see "
            "<code>zhat.check.posterior_predictive</code>).</p>"
        )
    else:
        body = "<pre>" + html.escape(predictive.text()) + "</pre>"
        body += _image(predictive.plot(), "posterior-predictive checks")
    return f'<section id="predictive"><h2>Posterior-predictive checks</h2>{body}</section>'


def _attributes_section(idata: az.InferenceData) -> str:
    skip = {"zhat_estimators", "zhat_noise", "zhat_sampler"}
    rows = "".join(
        f"<tr><th>{html.escape(str(k))}</th><td>{html.escape(str(v))}</td></tr>"
        for k, v in idata.posterior.attrs.items()
        if k not in skip
    )
    groups = ", ".join(idata.groups())
    return (
        f'<section id="run"><h2>Run</h2><p>Groups: {html.escape(groups)}.</p>'
        f"<table>{rows}</table></section>"
    )


def write_report(
    path: str | pathlib.Path,
    idata: az.InferenceData,
    *,
    factors: Iterable[FactorInfo] = (),
    noise: Iterable[NoiseReport] = (),
    predictive: PredictiveCheck | None = None,
    title: str | None = None,
    sampler: Any = None,
) -> pathlib.Path:
    """Write the run ``idata`` as one self-contained HTML file at ``path``; returns the path.

    :param factors: ``exposed.describe(*args)``; default the estimators stored in ``idata``.
    :param noise: :func:`zhat.check.estimator_noise` reports; default those stored in ``idata``.
    :param predictive: a :func:`zhat.check.posterior_predictive` result; default the stored one.
    :param title: page title; default 'zhat run report'.
    :param sampler: the kernel (or its name); default the sampler stored in ``idata``.
    """
    if not isinstance(idata, az.InferenceData) or "posterior" not in idata.groups():
        raise TypeError(
            "write_report needs an ArviZ InferenceData with a posterior group, e.g. from "
            "`zhat.check.to_inference_data(samples, ...)` or `arviz.from_netcdf(path)`."
        )
    posterior = {k: np.asarray(v.values) for k, v in idata.posterior.data_vars.items()}
    if not posterior:
        raise ValueError("The InferenceData's posterior group holds no parameters.")
    noise = list(noise) or stored_noise(idata)
    predictive = predictive if predictive is not None else stored_predictive(idata)
    sampler_info = sampler_description(sampler) or stored_sampler(idata)
    estimators = _estimators(idata, factors)
    table = az.summary(idata, var_names=list(posterior), hdi_prob=0.9, round_to=4)
    log_estimates = {}
    if "sample_stats" in idata.groups():
        for name, value in idata.sample_stats.data_vars.items():
            if name.endswith(ESTIMATE_SUFFIX):
                log_estimates[name[: -len(ESTIMATE_SUFFIX)]] = np.asarray(value.values)
    items = _warnings(table, estimators, sampler_info, noise, predictive, posterior)
    title = title or "zhat run report"
    pair = pair_figure(posterior)
    chains, draws = next(iter(posterior.values())).shape[:2]
    width = len(scalar_components(posterior))
    shown = (
        f"<p>The first {MAX_TRACES} of {width} parameter components.</p>"
        if width > MAX_TRACES
        else ""
    )
    paired = f"<p>The first {MAX_PAIRS} of {width} components.</p>" if width > MAX_PAIRS else ""
    sections = [
        f"<h1>{html.escape(title)}</h1>",
        f"<p>{chains} chains × {draws} draws. Written "
        f"{datetime.datetime.now(datetime.timezone.utc):%Y-%m-%d %H:%M} UTC.</p>",
        _warning_section(items),
        '<section id="summary"><h2>Posterior summary</h2>'
        + table.to_html(classes="summary", border=0)
        + "</section>",
        _estimator_section(estimators, sampler_info),
        '<section id="traces"><h2>Trace plots</h2>'
        + shown
        + _image(trace_figure(posterior), "trace plots")
        + "</section>",
        '<section id="pairs"><h2>Pair plot</h2>'
        + paired
        + (_image(pair, "pair plot") if pair is not None else "<p>One parameter only.</p>")
        + "</section>",
        _noise_section(noise, log_estimates),
        _predictive_section(predictive),
        _attributes_section(idata),
    ]
    page = (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f"<title>{html.escape(title)}</title><style>{STYLE}</style></head>"
        f"<body>{''.join(sections)}</body></html>\n"
    )
    path = pathlib.Path(path)
    path.write_text(page, encoding="utf-8")
    return path
