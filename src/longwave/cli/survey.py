"""``longwave survey INPUT --out RESULTS.h5``: fit every object of a survey.

Thin: the options become keywords of :func:`longwave.survey.run_survey`.
The model options are shared with ``longwave fit`` (see :func:`add_model_options`).
"""

from __future__ import annotations

import argparse
import dataclasses
import sys

EPILOG = """\
model specification (--model), for example:
  matern32
  matern32(scale=20 in [1, 500]) + matern12(amplitude=0.1, scale=fixed 3)
  matern52 * matern12(scale=auto in [100, inf]) with noise=none, mean=fixed 0
Left-out parameters start from each object's data. See DEVELOPERS.md, "Survey runner".
"""


def add_model_options(p) -> None:
    """Options naming the model, method, clipping and grid (shared with ``fit``)."""
    from ..methods import REGISTRY

    g = p.add_argument_group("model")
    which = g.add_mutually_exclusive_group()
    which.add_argument("-m", "--model", default="matern32", metavar="SPEC",
                       help="model specification (default: %(default)s)")
    which.add_argument("--model-file", metavar="TOML", help="read the model from a TOML file")
    g.add_argument("--noise", metavar="VALUE",
                   help="excess noise, overriding the model's: auto, none, 0.01, fixed 0.01, "
                        "'0.01 in [1e-4, 1]'")
    g.add_argument("--mean", metavar="VALUE",
                   help="constant mean, overriding the model's: auto, fixed 0, '2 in [-5, 5]'")
    g.add_argument("--method", default="auto", choices=["auto", *sorted(REGISTRY)],
                   help="inference method (default: %(default)s: Kalman for exact state-space "
                        "kernels, Exact for small n, a sparse method otherwise)")
    g.add_argument("--inducing", type=int, metavar="M", help="inducing points (vfe, fitc)")
    g.add_argument("--clip", type=float, metavar="SIGMA",
                   help="iterative sigma clipping of residuals at SIGMA (default: off)")
    g.add_argument("--max-clip-iter", type=int, default=5, metavar="K",
                   help="refits while clipping (default: %(default)s)")
    grid = g.add_mutually_exclusive_group()
    grid.add_argument("--grid-step", type=float, metavar="DT",
                      help="predict on a grid of this step over each object's span")
    grid.add_argument("--grid-count", type=int, metavar="N",
                      help="predict on N evenly spaced times over each object's span")


def add_column_options(p) -> None:
    g = p.add_argument_group("table columns (CSV / Parquet input; common names are found)")
    for role in ("id", "time", "value", "error"):
        g.add_argument(f"--{role}-column", metavar="NAME", help=f"column holding the {role}")


def model_from_args(args):
    """The ModelSpec the model options describe."""
    from ..survey import load_model_file, parse_spec
    from ..survey.spec import parse_option

    spec = load_model_file(args.model_file) if args.model_file else parse_spec(args.model)
    if args.noise is not None:
        spec = dataclasses.replace(spec, noise=parse_option("noise", args.noise))
    if args.mean is not None:
        spec = dataclasses.replace(spec, mean=parse_option("mean", args.mean))
    return spec


def grid_from_args(args):
    from ..survey import PredictionGrid

    if args.grid_step is None and args.grid_count is None:
        return None
    return PredictionGrid(step=args.grid_step, count=args.grid_count)


def columns_from_args(args):
    columns = {role: getattr(args, f"{role}_column") for role in ("id", "time", "value", "error")
               if getattr(args, f"{role}_column", None)}
    return columns or None


def register(sub) -> None:
    p = sub.add_parser(
        "survey", help="fit every object of a survey file or long table",
        description="Fit a GP to every object of a survey and write one result row per "
                    "object (with optional prediction grids) to an HDF5 result store.",
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("input", metavar="INPUT",
                   help="survey HDF5 file, or CSV / Parquet / FITS long table")
    p.add_argument("-o", "--out", required=True, metavar="RESULTS.h5", help="result store")
    add_model_options(p)
    add_column_options(p)
    g = p.add_argument_group("execution")
    g.add_argument("-w", "--workers", type=int, metavar="N",
                   help="worker processes of an embedded cluster (default: one per core; "
                        "0: serial, in this process)")
    g.add_argument("--scheduler", metavar="ADDRESS",
                   help="use an existing dask scheduler, e.g. tcp://127.0.0.1:8786")
    g.add_argument("--workers-read", action=argparse.BooleanOptionalAction, default=None,
                   help="workers read their objects from the survey HDF5 file instead of "
                        "receiving them (default: yes for an embedded cluster, no with "
                        "--scheduler, whose workers may not see the file)")
    g.add_argument("--resume", action="store_true",
                   help="continue RESULTS.h5, skipping the objects it holds")
    g.add_argument("--overwrite", action="store_true", help="replace RESULTS.h5")
    g.add_argument("--batch-size", type=int, default=64, metavar="K",
                   help="objects per task (default: %(default)s)")
    g.add_argument("--in-flight", type=int, metavar="T",
                   help="tasks submitted at once (default: two per worker thread)")
    g.add_argument("--retries", type=int, default=2, help="reruns of a failed task "
                   "(default: %(default)s)")
    g.add_argument("--flush-seconds", type=float, default=10.0, metavar="S",
                   help="write buffered results at least this often (default: %(default)s)")
    out = p.add_argument_group("output")
    out.add_argument("-q", "--quiet", action="store_true", help="no progress bar, no summary")
    out.add_argument("--json", action="store_true", help="print the summary as JSON on stdout")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..survey import run_survey
    from ..survey.runner import ClusterError

    try:
        summary = run_survey(
            args.input, args.out, model=model_from_args(args), method=args.method,
            clip=args.clip, max_clip_iter=args.max_clip_iter, grid=grid_from_args(args),
            inducing=args.inducing, workers=args.workers, scheduler=args.scheduler,
            resume=args.resume, overwrite=args.overwrite, batch_size=args.batch_size,
            in_flight=args.in_flight, retries=args.retries, columns=columns_from_args(args),
            progress=not args.quiet, quiet=args.quiet, flush_seconds=args.flush_seconds,
            workers_read=args.workers_read)
    except ClusterError as exc:
        print(f"longwave survey: error: {exc}", file=sys.stderr)
        return 2
    if args.json:
        print(summary.to_json())
    elif not args.quiet:
        print(summary.format(), file=sys.stdout)
    return 0

