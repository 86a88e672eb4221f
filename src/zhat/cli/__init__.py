"""The ``zhat`` command: a built-in demo, fitting a model file, stopping and continuing, reports.

::

    zhat demo [--out DIR]                    the beetle-plot example on invented data
    zhat fit MODEL.py --data FILE [...]      sample a model file's posterior, save RUN.nc
    zhat resume RUN.nc                       continue a run stopped by Ctrl-C or a crash
    zhat report RUN.nc [--out REPORT.html]   render the HTML report of a saved run again

A model file defines ``model`` (a NumPyro model whose arguments are filled by name from the
data) and ``estimators`` (what :func:`zhat.expose` takes), and optionally
``sampler(exposed_model)`` returning a kernel (default
:func:`zhat.kernels.pseudo_marginal_gibbs`) and ``init_params``; see :mod:`zhat.cli.inputs`
for the data formats. For example::

    import numpyro, numpyro.distributions as dist
    import zhat
    from zhat.estimators import importance_sampling

    def model(y):
        mu = numpyro.sample("mu", dist.Normal(0, 2))
        def log_joint(z):
            return dist.Normal(mu, 1).log_prob(z).sum() + dist.Normal(z, 1).log_prob(y).sum()
        zhat.integrate_out("z", log_joint, y.shape, proposal=(mu, 1.0))

    estimators = importance_sampling(16)

and ``zhat fit model.py --data y.npy`` (a .npy file named after the argument it fills).

Runs go in chunks (``--save-every`` steps per chain, about 20 chunks by default) with a
checkpoint ``RUN.checkpoint.npz`` after each (:mod:`zhat.cli.chunked`): Ctrl-C finishes the
chunk in progress, saves and says how to continue; ``zhat resume RUN.nc`` continues to the
requested number of draws, and the result equals that of a run never stopped. Problems with
the input stop the command with a one-line message and exit code 2; a stopped run exits with
130. Nothing else in zhat imports this package.
"""

__all__: list[str] = []  # the entry point is zhat.cli.main:main_exit
