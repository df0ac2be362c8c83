"""``longwave fit INPUT --out RESULT.h5``: fit one long series, stream its posterior grid.

Thin: the options become keywords of :func:`longwave.survey.fit_series`.
"""

from __future__ import annotations

import argparse

from .survey import EPILOG, add_model_options, columns_from_args, grid_from_args, model_from_args


def register(sub) -> None:
    p = sub.add_parser(
        "fit", help="fit one long series; stream its posterior on a grid to HDF5",
        description="Fit a GP to one series (CSV with time, value, error columns; .npy of "
                    "shape (n, 2|3); .npz with t, y, err; an HDF5 series file, or one object "
                    "of a survey file with --id) and stream the posterior on a grid to HDF5.",
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("input", metavar="INPUT", help="series file (.csv, .npy, .npz, .h5)")
    p.add_argument("-o", "--out", required=True, metavar="RESULT.h5",
                   help="result store receiving the fitted row")
    p.add_argument("--id", help="object of a survey HDF5 file")
    p.add_argument("--prediction-out", metavar="PRED.h5",
                   help="prediction file (default: RESULT.prediction.h5)")
    p.add_argument("--chunk", type=int, default=1 << 20, metavar="K",
                   help="grid points predicted and written at a time (default: %(default)s)")
    p.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    add_model_options(p)
    g = p.add_argument_group("table columns (CSV input; common names are found)")
    for role in ("time", "value", "error"):
        g.add_argument(f"--{role}-column", metavar="NAME", help=f"column holding the {role}")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bars, no summary")
    p.add_argument("--json", action="store_true", help="print the result as JSON on stdout")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..survey import fit_series

    out = fit_series(
        args.input, args.out, model=model_from_args(args), method=args.method,
        clip=args.clip, max_clip_iter=args.max_clip_iter, grid=grid_from_args(args),
        prediction_out=args.prediction_out, id=args.id, columns=columns_from_args(args),
        inducing=args.inducing, chunk=args.chunk, progress=not args.quiet,
        overwrite=args.overwrite)
    if args.json:
        print(out.to_json())
    elif not args.quiet:
        print(out.format())
    return 0 if out.result["status"] in ("ok", "not_converged") else 1
