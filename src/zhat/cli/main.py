"""Argument parsing and the four subcommands of ``zhat`` (see :mod:`zhat.cli`)."""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path
from typing import Any

from zhat.cli.inputs import CommandError, file_digest, load_data, load_model_file, match

__all__ = ["main", "main_exit"]

EXIT_INPUT, EXIT_STOPPED = 2, 130
NUM_CHUNKS = 20


def _positive(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _count(text: str) -> int:
    value = int(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be 0 or more, got {value}")
    return value


def _add_run_options(parser: argparse.ArgumentParser, chains: int, warmup: int, samples: int):
    parser.add_argument(
        "--chains", type=_positive, default=chains, metavar="N", help=f"(default {chains})"
    )
    parser.add_argument(
        "--warmup",
        type=_count,
        default=warmup,
        metavar="N",
        help=f"warmup steps per chain (default {warmup})",
    )
    parser.add_argument(
        "--samples",
        type=_positive,
        default=samples,
        metavar="N",
        help=f"draws per chain (default {samples})",
    )
    parser.add_argument("--seed", type=int, default=0, metavar="N", help="random seed (default 0)")
    parser.add_argument(
        "--save-every",
        type=_positive,
        default=None,
        metavar="N",
        help=f"steps per chain between checkpoints (default: {NUM_CHUNKS} checkpoints a run)",
    )
    parser.add_argument(
        "--noise-draws",
        type=_count,
        default=64,
        metavar="N",
        help="noise draws for the estimator-noise check at the posterior means (0: skip)",
    )
    parser.add_argument(
        "--predictive",
        type=_count,
        default=100,
        metavar="N",
        help="replicate data sets for the posterior-predictive check (0: skip)",
    )
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")
    _add_test_hooks(parser)


def _add_test_hooks(parser: argparse.ArgumentParser) -> None:
    """Hidden options for the tests: behave as if Ctrl-C were pressed (SIGINT), or as if the
    process were killed (SIGKILL), after N chunks."""
    parser.add_argument("--stop-after", type=_positive, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--kill-after", type=_positive, default=None, help=argparse.SUPPRESS)


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("zhat")
    except PackageNotFoundError:
        return "(not installed)"


def parser() -> argparse.ArgumentParser:
    top = argparse.ArgumentParser(
        prog="zhat",
        description="Posteriors of models with intractable normalizing constants or "
        "estimated likelihoods (pseudo-marginal MCMC on NumPyro).",
    )
    top.add_argument("--version", action="version", version=f"zhat {_version()}")
    sub = top.add_subparsers(dest="command", required=True, metavar="COMMAND")

    demo = sub.add_parser("demo", help="fit the built-in beetle-plot example (invented data)")
    demo.add_argument("--out", default="zhat-demo", metavar="DIR", help="(default ./zhat-demo)")
    _add_run_options(demo, chains=2, warmup=500, samples=2000)

    fit = sub.add_parser("fit", help="sample the posterior of a model file")
    fit.add_argument("model", metavar="MODEL.py", help="defines `model` and `estimators`")
    fit.add_argument(
        "--data",
        action="append",
        default=[],
        metavar="[NAME=]FILE",
        help=".npy, .npz, .csv, .graphml, .gml or .edgelist; repeat for several files",
    )
    fit.add_argument("--out", metavar="RUN.nc", help="saved run (default: MODEL.nc)")
    fit.add_argument("--report", metavar="REPORT.html", help="(default: RUN.html)")
    fit.add_argument(
        "--replace",
        action="store_true",
        help="start over, replacing a stopped or finished run saved at --out",
    )
    _add_run_options(fit, chains=2, warmup=500, samples=1000)

    resume = sub.add_parser("resume", help="continue a stopped run to its requested draws")
    resume.add_argument("run", metavar="RUN.nc", help="the --out of the stopped run")
    resume.add_argument("--no-progress", action="store_true", help="no progress bar")
    _add_test_hooks(resume)

    report = sub.add_parser("report", help="render the HTML report of a saved run again")
    report.add_argument("run", metavar="RUN.nc")
    report.add_argument("--out", metavar="REPORT.html", help="(default: RUN.html)")
    return top


def main(argv: list[str] | None = None) -> int:
    args = parser().parse_args(argv)
    try:
        return COMMANDS[args.command](args)
    except CommandError as error:
        print(f"zhat {args.command}: error: {error}", file=sys.stderr)
        return EXIT_INPUT


# --- the commands ----------------------------------------------------------------------------
def _settings(args: argparse.Namespace):
    from zhat.cli.chunked import Settings

    every = args.save_every or max(1, math.ceil(args.samples / NUM_CHUNKS))
    return Settings(args.chains, args.warmup, args.samples, args.seed, every)


def _refuse_overwrite(checkpoint: Path, out: Path, replace: bool) -> None:
    """Never lose a run by accident: a stopped run is continued, a finished one kept."""
    if checkpoint.exists():
        if not replace:
            raise CommandError(
                f"a stopped run is saved in {checkpoint}; continue it with `zhat resume {out}`, "
                "or start over with --replace."
            )
        checkpoint.unlink()
    elif out.exists() and not replace:
        raise CommandError(
            f"{out} already holds a finished run; choose another --out, or pass --replace to "
            "overwrite it."
        )


def run_demo(args: argparse.Namespace) -> int:
    from zhat.cli.chunked import checkpoint_path
    from zhat.cli.demo import demo_job, scenario

    out = Path(args.out) / "beetles.nc"
    job = demo_job()
    outputs = {"noise_draws": args.noise_draws, "predictive": args.predictive, "report": None}
    job = job._replace(source={**job.source, **outputs})
    print(scenario())
    presence = job.data["presence"]
    print(f"\n{int(presence.sum())} of {presence.size} plots hold the beetle.\n")
    out.parent.mkdir(parents=True, exist_ok=True)
    _refuse_overwrite(checkpoint_path(out), out, replace=True)  # the demo is redone
    return _execute(job, _settings(args), out, None, args)


def _file_job(model_path: str, specs: list[str], outputs: dict[str, Any]):
    from zhat.cli.chunked import Job
    from zhat.kernels import pseudo_marginal_gibbs

    model_file = load_model_file(model_path)
    data, files = load_data(specs)
    match(model_file.model, data, str(model_file.path))
    absolute = []
    for spec, file in zip(specs, files, strict=True):
        name, sep, _ = spec.partition("=")
        absolute.append(
            f"{name}={file.resolve()}" if sep and name.isidentifier() else str(file.resolve())
        )
    source = {
        "kind": "file",
        "model": str(model_file.path.resolve()),
        "model_sha256": file_digest(model_file.path),
        "data": absolute,
        "data_sha256": [file_digest(f) for f in files],
        **outputs,
    }
    return Job(
        model=model_file.model,
        estimators=model_file.estimators,
        data=data,
        make_sampler=model_file.sampler or pseudo_marginal_gibbs,
        init_params=model_file.init_params,
        source=source,
        title=f"{model_file.path.name} fitted to {', '.join(f.name for f in files) or 'no data'}",
    )


def run_fit(args: argparse.Namespace) -> int:
    from zhat.cli.chunked import checkpoint_path

    out = Path(args.out) if args.out else Path(args.model).with_suffix(".nc")
    report = Path(args.report) if args.report else None
    outputs = {
        "noise_draws": args.noise_draws,
        "predictive": args.predictive,
        "report": str(report.resolve()) if report else None,
    }
    job = _file_job(args.model, args.data, outputs)
    _refuse_overwrite(checkpoint_path(out), out, args.replace)
    out.parent.mkdir(parents=True, exist_ok=True)
    return _execute(job, _settings(args), out, None, args)


def run_resume(args: argparse.Namespace) -> int:
    from zhat.cli.chunked import Settings, checkpoint_path, read_checkpoint
    from zhat.cli.demo import demo_job

    out = Path(args.run)
    if out.name.endswith(".checkpoint.npz"):
        out = out.with_name(out.name.removesuffix(".checkpoint.npz") + ".nc")
    checkpoint = checkpoint_path(out)
    if not checkpoint.exists():
        done = " (that run is complete)" if out.exists() else ""
        raise CommandError(f"no stopped run to continue: {checkpoint} not found{done}.")
    saved = read_checkpoint(checkpoint)
    source = saved.meta["source"]
    outputs = {k: source.get(k) for k in ("noise_draws", "predictive", "report")}
    if source["kind"] == "demo":
        job = demo_job()
        job = job._replace(source={**job.source, **outputs})
    else:
        for path, digest in [
            (source["model"], source["model_sha256"]),
            *zip(
                [s.partition("=")[2] or s for s in source["data"]],
                source["data_sha256"],
                strict=True,
            ),
        ]:
            if not Path(path).is_file() or file_digest(Path(path)) != digest:
                raise CommandError(
                    f"{path} is missing or changed since the run started, so the run cannot be "
                    "continued; restore it, or start over with `zhat fit ... --replace`."
                )
        job = _file_job(source["model"], source["data"], outputs)
    settings = Settings(**saved.meta["settings"])
    print(
        f"Continuing {out}: {saved.meta['done']} of {settings.warmup + settings.samples} steps "
        "per chain were done."
    )
    return _execute(job, settings, out, saved, args)


def run_report(args: argparse.Namespace) -> int:
    from zhat.cli.outputs import load_run, render_report, title_of

    run = Path(args.run)
    idata = load_run(run)
    target = Path(args.out) if args.out else run.with_suffix(".html")
    written = render_report(target, idata, title=title_of(idata))
    if written is None:
        raise CommandError("this installation of zhat has no report writer; update zhat.")
    print(f"Report: {written}")
    return 0


def _chains(count: int) -> str:
    return f"{count} chain" + ("s" if count != 1 else "")


def _execute(job, settings, out: Path, saved, args: argparse.Namespace) -> int:
    """Sample (or continue), then print the summary and write the run and its report."""
    from zhat.cli.chunked import Interrupted, checkpoint_path, sample

    checkpoint = checkpoint_path(out)
    how = f"zhat resume {out}"
    total = settings.warmup + settings.samples
    print(
        f"Sampling {_chains(settings.chains)} × {settings.samples} draws after "
        f"{settings.warmup} warmup steps; checkpoint every {settings.save_every} steps in "
        f"{checkpoint} (Ctrl-C stops and saves)."
    )
    try:
        result = sample(
            job,
            settings,
            checkpoint,
            resume=saved,
            stop_after=args.stop_after,
            kill_after=args.kill_after,
            progress=not args.no_progress,
        )
        return _finish(job, settings, out, checkpoint, result)
    except Interrupted as stop:
        drawn = max(0, stop.done - stop.warmup)
        print(
            f"Stopped after {stop.done} of {total} steps per chain ({drawn} of "
            f"{settings.samples} draws); saved in {checkpoint}.\nContinue with: {how}"
        )
        return EXIT_STOPPED
    except KeyboardInterrupt:
        if checkpoint.exists():
            kept = f"everything up to the last chunk is saved in {checkpoint}"
        else:
            kept = "nothing was sampled yet"
        print(f"\nStopped at once; {kept}.\nContinue with: {how}", file=sys.stderr)
        return EXIT_STOPPED


def _finish(job, settings, out: Path, checkpoint: Path, result) -> int:
    """Summary, checks, the saved run (then the checkpoint goes) and the report."""
    from zhat.cli.outputs import (
        inference_data,
        noise_reports,
        predictive_check,
        render_report,
        save_run,
        summary_text,
    )

    noise = noise_reports(result, job, settings.seed, job.source.get("noise_draws") or 0)
    print(
        f"\nPosterior ({_chains(settings.chains)} × {settings.samples} draws after "
        f"{settings.warmup} warmup):"
    )
    print(summary_text(result, noise, job.truth))
    predictive, skipped = predictive_check(
        result, job, settings.seed, job.source.get("predictive") or 0
    )
    if predictive is not None:
        print("\n" + predictive.text())
    else:
        print(f"\nPosterior-predictive check skipped: {skipped}")
    idata = inference_data(result, job, settings, noise, predictive)
    save_run(out, idata)
    checkpoint.unlink(missing_ok=True)
    print(f"\nRun saved:   {out}  (ArviZ InferenceData; `arviz.from_netcdf`)")
    report = Path(job.source.get("report") or out.with_suffix(".html"))
    try:
        written = render_report(
            report,
            idata,
            factors=result.factors,
            noise=noise,
            predictive=predictive,
            title=job.title,
            sampler=result.kernel,
        )
    except KeyboardInterrupt:
        print(f"\nStopped before the report was written; `zhat report {out}` writes it.")
        return EXIT_STOPPED
    if written is not None:
        print(f"Report:      {written}")
        print(f"Render again: zhat report {out}")
    return 0


COMMANDS = {"demo": run_demo, "fit": run_fit, "resume": run_resume, "report": run_report}


def main_exit() -> None:
    """Console-script entry point: run :func:`main` and exit with its code.

    Before the first computation it lets XLA compile small loops whole (the toggle and sweep
    loops of the samplers; :mod:`zhat.xla_options`), unless ``XLA_FLAGS`` already sets that
    threshold.
    """
    from zhat import xla_options

    if xla_options.small_loops_threshold() is None:
        xla_options.compile_small_loops()
    sys.exit(main())
