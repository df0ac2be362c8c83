"""``longwave bench``: which approximation to pick for your data (and scaling mode).

Examples::

    longwave bench series.csv --out report --methods exact kalman vfe:m=64,128,256
    longwave bench survey.h5 --objects 5 --seed 1 --model "matern32 + matern12" --out report
    longwave bench --scaling --max-n 1e6 --methods kalman exact --out scaling
"""

from __future__ import annotations

import sys


def _size(text: str) -> int:
    """An integer that may be written as 1e6."""
    try:
        value = float(text)
    except ValueError as exc:
        raise ValueError(f"expected a size such as 100000 or 1e5, got {text!r}") from exc
    if value != int(value) or value < 1:
        raise ValueError(f"expected a positive whole size, got {text!r}")
    return int(value)


def register(sub) -> None:
    p = sub.add_parser(
        "bench", help="compare inference methods on your data and recommend one",
        description="Compare inference methods and settings against an exact reference on "
        "INPUT and recommend the cheapest within the tolerance; with --scaling, time every "
        "method on synthetic series of growing n instead.",
    )
    p.add_argument("input", nargs="?", metavar="INPUT",
                   help="CSV (time,value,error), .npy/.npz, or survey HDF5 file")
    p.add_argument("--out", required=True, metavar="REPORT_DIR", help="report folder")
    p.add_argument("--model", default=None,
                   help="model specification or .toml model file (default: matern32)")
    p.add_argument("--methods", nargs="+", default=None, metavar="SETTING",
                   help="settings such as exact kalman vfe:m=64,128 fitc:m=128:placement=uniform "
                   "(default: every registered method)")
    p.add_argument("--tolerance", type=float, default=0.01,
                   help="nats: bounds |dlml|/n and mean KL by it, mean error/sd by "
                   "sqrt(2 tolerance) (default: %(default)s)")
    p.add_argument("--tol-lml", type=float, default=None, help="override the |dlml|/n bound")
    p.add_argument("--tol-mean", type=float, default=None,
                   help="override the mean error/sd bound")
    p.add_argument("--tol-kl", type=float, default=None, help="override the mean KL bound")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--objects", type=int, default=None, metavar="K",
                   help="survey objects to sample (default 3)")
    p.add_argument("--reference-max-n", type=_size, default=5000,
                   help="largest stretch for an Exact reference (default: %(default)s)")
    p.add_argument("--no-fit", action="store_true",
                   help="score at the reference's hyperparameters only (faster)")
    p.add_argument("--restarts", type=int, default=0, help="extra optimiser starts per fit")
    p.add_argument("--gaps", type=int, default=3, help="interpolation gaps held out")
    p.add_argument("--hdf5", action="store_true", help="also write report.h5")
    p.add_argument("--scaling", action="store_true", help="scaling mode (no INPUT)")
    p.add_argument("--min-n", type=_size, default=1000, help="scaling: smallest n")
    p.add_argument("--max-n", type=_size, default=10**7, help="scaling: largest n")
    p.add_argument("--time-budget", type=float, default=60.0,
                   help="scaling: seconds one call may take (default: %(default)s)")
    p.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..benchmark.entry import DEFAULT_MODEL, benchmark_file, scaling_to_dir

    def progress(line):
        print(line, file=sys.stderr, flush=True)

    say = None if args.quiet else progress
    if args.scaling:
        if args.input is not None or args.model is not None:
            raise ValueError("--scaling simulates its own series; leave out INPUT and --model")
        outcome = scaling_to_dir(args.out, methods=args.methods, min_n=args.min_n,
                                 max_n=args.max_n, seed=args.seed,
                                 time_budget=args.time_budget, progress=say)
    else:
        if args.input is None:
            raise ValueError("give an INPUT file to benchmark, or --scaling for scaling mode")
        outcome = benchmark_file(
            args.input, args.out, model=args.model or DEFAULT_MODEL, methods=args.methods,
            tolerance=args.tolerance, tol_lml=args.tol_lml, tol_mean=args.tol_mean,
            tol_kl=args.tol_kl, seed=args.seed, objects=args.objects,
            reference_max_n=args.reference_max_n, fit=not args.no_fit,
            restarts=args.restarts, gaps=args.gaps, hdf5=args.hdf5, progress=say,
        )
    print(outcome.text)
    print(f"\nreport: {outcome.files['json']}")
    return 0
