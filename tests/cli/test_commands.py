"""The ``zhat`` command end to end, each in a subprocess: fit, stop and continue, report."""

from __future__ import annotations

import json
import re

import arviz as az
import numpy as np
import pytest

from tests.cli.helpers import RUN_OPTIONS, run_zhat, write_inputs
from tests.latent_gaussian import exact_posterior, make_data
from zhat.cli.chunked import read_checkpoint
from zhat.cli.main import main


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    write_inputs(folder)
    return folder


@pytest.fixture(scope="module")
def whole_run(folder):
    """One run never stopped: ``zhat fit lg.py --data y.npy --out whole.nc``."""
    done = run_zhat(
        "fit", "lg.py", "--data", "y.npy", "--out", "whole.nc", *RUN_OPTIONS, cwd=folder
    )
    assert done.returncode == 0, done.stderr
    return done


def test_fit_prints_summary_and_saves_run_and_report(folder, whole_run, monkeypatch, capsys):
    out = whole_run.stdout
    assert "Posterior (2 chains × 40 draws after 30 warmup)" in out
    assert "z: importance sampling (K=8) — unbiased (exact posterior)" in out
    assert "sd(log f̂) =" in out and "over 16 noise draws" in out
    assert "Run saved:   whole.nc" in out and "Report:      whole.html" in out
    assert not (folder / "whole.checkpoint.npz").exists()  # removed once the run is saved

    idata = az.from_netcdf(str(folder / "whole.nc"))
    mu = idata.posterior["mu"].values
    assert mu.shape == (2, 40) and np.all(np.isfinite(mu))
    assert "z_noise" not in idata.posterior
    assert idata.sample_stats["z_log_estimate"].shape == (2, 40)
    np.testing.assert_array_equal(idata.observed_data["y"].values, np.asarray(make_data()))
    attrs = idata.posterior.attrs
    assert attrs["zhat_exact"] == 1
    assert json.loads(attrs["zhat_settings"])["samples"] == 40
    # closed-form posterior (conjugate normal model, see tests/latent_gaussian.py), within
    # 4 Monte Carlo standard errors of the 80 draws
    mean, _ = exact_posterior(make_data())
    mcse = float(az.mcse(idata, var_names=["mu"])["mu"])
    assert abs(float(mu.mean()) - mean) < 4 * mcse, (float(mu.mean()), mean, mcse)

    page = (folder / "whole.html").read_text()
    assert "lg.py fitted to y.npy" in page and "importance sampling" in page

    monkeypatch.chdir(folder)  # a finished run is not overwritten by accident
    assert main(["fit", "lg.py", "--data", "y.npy", "--out", "whole.nc"]) == 2
    assert "whole.nc already holds a finished run; choose another --out, or pass --replace" in (
        capsys.readouterr().err
    )


def test_stopped_and_crashed_run_continues_to_the_same_draws(
    folder, whole_run, monkeypatch, capsys
):
    """Stopped by Ctrl-C after 2 chunks (in warmup), continued and killed after 3 more (in
    sampling), continued again: the draws equal those of the run never stopped."""
    fit = ("fit", "lg.py", "--data", "y.npy", "--out", "parts.nc", *RUN_OPTIONS)
    stopped = run_zhat(*fit, "--stop-after", "2", cwd=folder)
    assert stopped.returncode == 130, stopped.stderr
    assert "Stopped after 20 of 70 steps per chain (0 of 40 draws)" in stopped.stdout
    assert "Continue with: zhat resume parts.nc" in stopped.stdout
    assert not (folder / "parts.nc").exists()
    assert read_checkpoint(folder / "parts.checkpoint.npz").meta["done"] == 20

    monkeypatch.chdir(folder)  # a second `fit` must not overwrite the stopped run
    assert main(list(fit)) == 2
    refused = capsys.readouterr().err
    assert "a stopped run is saved in parts.checkpoint.npz" in refused
    assert "continue it with `zhat resume parts.nc`, or start over with --replace" in refused

    crashed = run_zhat("resume", "parts.nc", "--no-progress", "--kill-after", "3", cwd=folder)
    assert crashed.returncode == -9, crashed.stderr  # SIGKILL: no chance to save anything
    saved = read_checkpoint(folder / "parts.checkpoint.npz")
    assert saved.meta["done"] == 50  # 20 + 3 chunks of 10: nothing but the running chunk lost
    assert saved.draws["mu"].shape == (2, 20)

    model = folder / "lg.py"
    original = model.read_text()
    model.write_text(original + "\n# edited\n")  # a changed model file is not continued
    assert main(["resume", "parts.nc"]) == 2
    assert "lg.py is missing or changed since the run started" in capsys.readouterr().err
    model.write_text(original)

    finished = run_zhat("resume", "parts.nc", "--no-progress", cwd=folder)
    assert finished.returncode == 0, finished.stderr
    assert "Continuing parts.nc: 50 of 70 steps per chain were done." in finished.stdout
    assert not (folder / "parts.checkpoint.npz").exists()

    whole = az.from_netcdf(str(folder / "whole.nc"))
    parts = az.from_netcdf(str(folder / "parts.nc"))
    np.testing.assert_array_equal(parts.posterior["mu"].values, whole.posterior["mu"].values)
    np.testing.assert_array_equal(
        parts.sample_stats["z_log_estimate"].values, whole.sample_stats["z_log_estimate"].values
    )
    # the settings used are those of the original command
    assert json.loads(parts.posterior.attrs["zhat_settings"])["save_every"] == 10


def test_report_renders_a_saved_run_again(folder, whole_run):
    done = run_zhat("report", "whole.nc", "--out", "again.html", cwd=folder)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "Report: again.html"
    page = (folder / "again.html").read_text()
    assert page.startswith("<!DOCTYPE html>")
    assert "lg.py fitted to y.npy" in page and "importance sampling (K=8)" in page
    # from the netCDF file alone, the same page as the one `fit` wrote (but for its time)
    written = re.compile(r"Written \d{4}-\d\d-\d\d \d\d:\d\d UTC")
    assert len(written.findall(page)) == 1
    first = (folder / "whole.html").read_text()
    assert written.sub("", page) == written.sub("", first)


def test_input_error_is_one_line_without_traceback(folder):
    done = run_zhat("fit", "lg.py", "--data", "missing.npy", cwd=folder)
    assert done.returncode == 2
    assert done.stderr.strip().splitlines() == [
        "zhat fit: error: data file missing.npy not found; check the path given to --data."
    ]
    assert "Traceback" not in done.stdout + done.stderr


def test_demo_runs_from_the_installed_package(tmp_path):
    """``zhat demo`` with few draws (its defaults take a minute or two): the beetle-plot model
    from :mod:`zhat.examples.beetles`, run in a folder without the repository's examples."""
    done = run_zhat(
        "demo", "--out", "demo", "--chains", "1", "--warmup", "4", "--samples", "8",
        "--noise-draws", "2", "--predictive", "2", "--no-progress", cwd=tmp_path,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    out = done.stdout
    assert re.search(r"\n\d+ of 400 plots hold the beetle\.\n", out)
    assert "annealed multiple auxiliary (T=8, K=1, perfect draws) — unbiased" in out
    assert "sd(log f̂) =" in out and "Posterior-predictive check: 2 replicates" in out
    assert (tmp_path / "demo" / "beetles.html").exists()
    idata = az.from_netcdf(str(tmp_path / "demo" / "beetles.nc"))
    assert idata.posterior["beta"].shape == (1, 8, 2)
    assert json.loads(idata.posterior.attrs["zhat_truth"])["coupling"] == 0.8
