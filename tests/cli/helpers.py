"""A tiny model file and data for the command tests, and a way to run ``zhat`` in a subprocess.

The model is the latent-Gaussian model of :mod:`tests.latent_gaussian` (same constants), with
z integrated out by importance sampling, so its posterior of μ is known in closed form.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np

from tests.latent_gaussian import S0, SIGMA, TAU, make_data

MODEL_FILE = f"""
import numpyro
import numpyro.distributions as dist

import zhat
from zhat.estimators import importance_sampling


def model(y):
    mu = numpyro.sample("mu", dist.Normal(0.0, {S0}))

    def log_joint(z):
        return dist.Normal(mu, {TAU}).log_prob(z).sum() + dist.Normal(z, {SIGMA}).log_prob(y).sum()

    zhat.integrate_out("z", log_joint, y.shape, proposal=(mu, {TAU}))


estimators = importance_sampling(8)
"""

# 2 chains, 30 warmup steps and 40 draws, a checkpoint every 10 steps: 3 + 4 chunks
RUN_OPTIONS = [
    "--chains", "2", "--warmup", "30", "--samples", "40", "--save-every", "10",
    "--noise-draws", "16", "--predictive", "0", "--no-progress",
]  # fmt: skip


def write_inputs(folder: Path) -> tuple[Path, Path]:
    """``lg.py`` and ``y.npy`` (10 observations from :func:`make_data`) in ``folder``."""
    model = folder / "lg.py"
    model.write_text(MODEL_FILE)
    data = folder / "y.npy"
    np.save(data, np.asarray(make_data()))
    return model, data


def zhat_command() -> list[str]:
    """The installed console script when there is one, else ``python -m zhat.cli``."""
    script = Path(sys.executable).with_name("zhat")
    return [str(script)] if script.exists() else [sys.executable, "-m", "zhat.cli"]


def run_zhat(*args: str, cwd: Path, timeout: float = 300) -> subprocess.CompletedProcess:
    env = {**os.environ, "JAX_PLATFORMS": "cpu"}
    return subprocess.run(
        [*zhat_command(), *args],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=timeout,
    )
