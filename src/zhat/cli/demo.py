"""``zhat demo``: the beetle-plot autologistic model of :mod:`zhat.examples.beetles`, end to end."""

from __future__ import annotations

from zhat.cli.chunked import Job
from zhat.examples import beetles
from zhat.kernels import pseudo_marginal_gibbs

__all__ = ["demo_job", "scenario"]

TITLE = "Beetles on forest plots (invented data): centred autologistic model"


def scenario() -> str:
    """The paragraph describing the invented survey."""
    return beetles.__doc__.split("\n\n")[1].replace("\n", " ")


def demo_job() -> Job:
    return Job(
        model=beetles.model,
        estimators=beetles.estimator(),
        data=beetles.survey_data(),
        make_sampler=pseudo_marginal_gibbs,
        init_params=None,
        source={"kind": "demo"},
        title=TITLE,
        truth=beetles.TRUE,
    )
