"""The HTML report: every image loads in headless Chromium, the page fetches nothing, warnings and
the summary table are present, and a run read back from netCDF renders the same page."""

import base64
import os
import pathlib
import re
import shutil
import subprocess

import arviz as az
import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest

import zhat
from zhat.estimators import single_auxiliary
from zhat.families import lattice
from zhat.kernels import DoubleMetropolisHastings, pseudo_marginal_gibbs

CHROMIUM = pathlib.Path("/usr/bin/chromium")
GRID = lattice.grid(4, 4)
STAMP = re.compile(r"Written [^<]*UTC\.")


def ising_model(y):
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 0.6))
    field = numpyro.sample("field", dist.Normal(0.0, 0.5))
    numpyro.sample("y", lattice.ising(GRID, coupling=coupling, field=field), obs=y)


@pytest.fixture(scope="module")
def run():
    """A small real run: 4×4 Ising data (one exact draw), 2 chains × 250 draws of
    pseudo_marginal_gibbs, the noise at the posterior mean and a posterior-predictive check."""
    key = jax.random.key(20261201)
    truth = lattice.ising(GRID, coupling=0.3)
    sampler = truth.family.perfect_sampler
    noise = jax.random.normal(jax.random.fold_in(key, 1), sampler.noise_shape(256))
    y, ok = sampler.draw(truth.params, noise)
    assert bool(ok)
    y = jnp.reshape(y, (4, 4))
    exposed = zhat.expose(ising_model, single_auxiliary(num_draws=2, budget=256))
    kernel = pseudo_marginal_gibbs(exposed)
    mcmc = zhat.MCMC(
        kernel,
        num_warmup=150,
        num_samples=250,
        num_chains=2,
        chain_method="sequential",
        progress_bar=False,
    )
    mcmc.run(jax.random.fold_in(key, 2), y)
    samples = mcmc.get_samples(group_by_chain=True)
    factors = exposed.describe(y)
    idata = zhat.check.to_inference_data(samples, factors, observed={"y": y})
    means = {k: np.asarray(samples[k]).mean(axis=(0, 1)) for k in ("coupling", "field")}
    noise = zhat.check.estimator_noise(jax.random.fold_in(key, 3), exposed, means, y, num_draws=64)
    predictive = zhat.check.posterior_predictive(
        jax.random.fold_in(key, 4), ising_model, samples, y, num_replicates=64, budget=256
    )
    return {
        "idata": idata,
        "factors": factors,
        "noise": noise,
        "predictive": predictive,
        "kernel": kernel,
    }


def write(run, path):
    return zhat.check.write_report(
        path,
        run["idata"],
        factors=run["factors"],
        noise=run["noise"],
        predictive=run["predictive"],
        title="4×4 Ising test run",
        sampler=run["kernel"],
    )


def expected_warnings(run):
    """What the warnings section must hold, from ArviZ's table and the noise verdicts."""
    table = az.summary(run["idata"], hdi_prob=0.9, round_to=4)
    out = [f"R-hat of {row}" for row in table.index if table.loc[row, "r_hat"] > 1.01]
    out += [f"Bulk ESS of {row}" for row in table.index if table.loc[row, "ess_bulk"] < 100]
    out += [r.verdict for r in run["noise"] if r.verdict.startswith("WARNING")]
    out += [f"fails to reproduce {name}" for name in run["predictive"].failures]
    return out


def warning_section(page):
    match = re.search(r'<section id="warnings"[^>]*>(.*?)</section>', page, re.S)
    assert match, "no warnings section"
    return match.group(1)


def test_report_sections_warnings_and_offline_page(run, tmp_path):
    page = write(run, tmp_path / "run.html").read_text(encoding="utf-8")
    # the warnings come first, before the summary table
    assert page.index('id="warnings"') < page.index('id="summary"')
    warnings = warning_section(page).replace("&#x27;", "'")
    for item in expected_warnings(run):
        assert item in warnings, item
    summary = re.search(r'<section id="summary">(.*?)</section>', page, re.S).group(1)
    assert "<table" in summary and "r_hat" in summary and "ess_bulk" in summary
    assert all(f"<th>{name}</th>" in summary for name in ("coupling", "field"))
    for section in ("estimators", "traces", "pairs", "noise", "predictive"):
        assert f'id="{section}"' in page, section
    # offline: no address anywhere, no script or style sheet to fetch, every image inline PNG
    assert not re.search(r"https?://", page)
    assert "<script" not in page and "<link" not in page
    sources = re.findall(r'<img [^>]*src="([^"]*)"', page)
    assert len(sources) == 4  # traces, pairs, estimator noise, posterior-predictive checks
    for src in sources:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"


def install_chromium():
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    logs = []
    for command in (
        ["apt-get", "install", "-y", "chromium"],
        ["apt-get", "update"],
        ["apt-get", "install", "-y", "chromium"],
    ):
        done = subprocess.run(command, capture_output=True, text=True, env=env, timeout=900)
        logs.append(done.stderr[-2000:])
        if command[1] == "install" and done.returncode == 0 and CHROMIUM.exists():
            return
    pytest.fail(
        "The report test needs headless Chromium at /usr/bin/chromium and could not install "
        "it with `apt-get install -y chromium`; install it by hand. apt-get said:\n"
        + "\n".join(logs)
    )


@pytest.fixture(scope="module")
def chromium():
    if not CHROMIUM.exists():
        install_chromium()
    return CHROMIUM


IMAGE_PROBE = """<script>
window.addEventListener("load", function () {
  var out = document.createElement("pre");
  out.id = "image-probe";
  out.textContent = Array.from(document.images).map(function (im) {
    return im.alt + "=" + (im.complete && im.naturalWidth > 0);
  }).join(";");
  document.body.appendChild(out);
});
</script>"""


def test_report_renders_in_headless_chromium(run, chromium, tmp_path):
    page = write(run, tmp_path / "run.html").read_text(encoding="utf-8")
    probe = tmp_path / "probe.html"  # the report with a probe that records each image's state
    probe.write_text(page.replace("</body>", IMAGE_PROBE + "</body>"), encoding="utf-8")
    profile = tmp_path / "profile"
    profile.mkdir()
    command = [
        str(chromium),
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={profile}",
        "--virtual-time-budget=5000",
        "--dump-dom",
        probe.as_uri(),
    ]
    done = subprocess.run(command, capture_output=True, text=True, timeout=90)
    assert done.returncode == 0, done.stderr[-2000:]
    dom = done.stdout
    states = re.search(r'<pre id="image-probe">(.*?)</pre>', dom, re.S)
    assert states, "the probe did not run: " + dom[-500:] + done.stderr[-1000:]
    results = dict(item.rsplit("=", 1) for item in states.group(1).split(";"))
    assert len(results) == len(re.findall(r"<img ", page)) and len(results) >= 4, results
    assert all(v == "true" for v in results.values()), results
    # the browser's DOM holds the summary table and the warnings
    assert re.search(r'<section id="summary">.*?<table', dom, re.S)
    assert 'id="warnings"' in dom and "Warnings" in dom
    shutil.rmtree(profile, ignore_errors=True)


def test_report_from_netcdf_renders_the_same_page(run, tmp_path):
    first = write(run, tmp_path / "direct.html").read_text(encoding="utf-8")
    idata = run["idata"].copy()
    zhat.check.store_checks(
        idata, noise=run["noise"], predictive=run["predictive"], sampler=run["kernel"]
    )
    idata.to_netcdf(str(tmp_path / "run.nc"))
    back = az.from_netcdf(str(tmp_path / "run.nc"))
    stored = zhat.check.stored_predictive(back)
    np.testing.assert_array_equal(stored.replicates, run["predictive"].replicates)
    assert stored.names == run["predictive"].names
    assert zhat.check.stored_noise(back) == run["noise"]
    again = zhat.check.write_report(tmp_path / "again.html", back, title="4×4 Ising test run")
    second = again.read_text(encoding="utf-8")
    # the same page except the time it was written (and the stored groups listed under Run)
    strip = lambda s: re.sub(r'<section id="run">.*?</section>', "", STAMP.sub("", s), flags=re.S)
    assert strip(first) == strip(second)


def test_approximate_estimator_and_unconverged_chains_are_warned(tmp_path):
    """Two chains around different values cannot pass R-hat; an estimator on simulator draws
    and double Metropolis–Hastings are approximate. All three must be in the warnings."""
    rng = np.random.default_rng(5)
    samples = {
        "coupling": np.stack([rng.normal(0.2, 0.01, 300), rng.normal(0.4, 0.01, 300)]),
        "field": rng.normal(0.0, 0.1, (2, 300)),
    }
    y = jnp.ones((4, 4)).at[0, 0].set(-1.0)
    exposed = zhat.expose(ising_model, single_auxiliary(num_draws=2, sampler="gibbs", sweeps=5))
    factors = exposed.describe(y)
    assert not factors[0].estimator.unbiased
    idata = zhat.check.to_inference_data(samples, factors)
    kernel = DoubleMetropolisHastings(ising_model, sweeps=5)
    page = zhat.check.write_report(tmp_path / "r.html", idata, sampler=kernel).read_text()
    warnings = warning_section(page).replace("&#x27;", "'")
    assert "The estimator at 'y'" in warnings and "is APPROXIMATE" in warnings
    assert "DoubleMetropolisHastings uses simulator runs" in warnings
    assert "R-hat of coupling" in warnings


def test_write_report_needs_inference_data(tmp_path):
    with pytest.raises(TypeError, match="InferenceData"):
        zhat.check.write_report(tmp_path / "r.html", {"coupling": np.zeros((2, 10))})
