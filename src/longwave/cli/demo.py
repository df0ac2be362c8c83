"""``longwave demo``: the main job out of the box (or ``--single`` for one long series).

Thin: the options become keywords of :func:`longwave.demo.run_demo` (or of
:func:`longwave.demo.run_single_series_demo` with ``--single``).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path


def _positive(text: str) -> int:
    try:
        value = float(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(
            f"expected a whole number such as 1000 or 2e4, got {text!r}") from exc
    if value != int(value) or value < 1:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}")
    return int(value)


def register(sub) -> None:
    p = sub.add_parser(
        "demo", help="simulate a survey, fit it on a local cluster, benchmark, report",
        description="Simulate a season of a robotic-telescope campaign (about 1,000 sources "
        "in known variability classes, with outliers), write it as a survey file, fit every "
        "source with the survey runner on an embedded local cluster (once per candidate "
        "kernel), compare the fits with the truth, benchmark the inference methods on one "
        "long series of the campaign, and write results, a report and PNG figures.",
    )
    p.add_argument("--out", default="longwave-demo", metavar="DIR",
                   help="output folder; the demo's files in it are replaced "
                   "(default: %(default)s)")
    p.add_argument("--objects", type=_positive, default=1000, metavar="N",
                   help="sources in the campaign (default: %(default)s)")
    p.add_argument("--long-points", type=_positive, default=20_000, metavar="N",
                   help="points of the benchmarked long series (default: %(default)s)")
    p.add_argument("--seed", type=int, default=None,
                   help="seed of the simulation (default: 0; 7 with --single)")
    p.add_argument("--workers", type=int, default=None,
                   help="worker processes of the local cluster (default: one per core; "
                   "0 fits serially)")
    p.add_argument("--no-plot", action="store_true", help="skip the PNG figures")
    p.add_argument("--quiet", action="store_true", help="no step lines or progress bars")
    g = p.add_argument_group("single-series demo (the former default)")
    g.add_argument("--single", action="store_true",
                   help="instead: fit one long night-time series with Kalman and plot it")
    g.add_argument("--n", type=_positive, default=100_000,
                   help="--single: points of that series (default: %(default)s)")
    p.set_defaults(func=run)


def run(args) -> int:
    if args.single:
        return _single(args)
    from ..demo import run_demo

    def say(line):
        print(line, file=sys.stderr, flush=True)

    seed = 0 if args.seed is None else args.seed
    outcome = run_demo(Path(args.out), n_objects=args.objects, long_points=args.long_points,
                       seed=seed, workers=args.workers, plot=not args.no_plot,
                       progress=not args.quiet, say=(lambda _l: None) if args.quiet else say)
    print(outcome.text())
    return 0


def _single(args) -> int:
    from ..demo import run_single_series_demo

    seed = 7 if args.seed is None else args.seed
    res = run_single_series_demo(Path(args.out), n=args.n, seed=seed,
                                 plot=not args.no_plot)
    print(f"fitted {res.n} points with Kalman in {res.fit_seconds:.2f} s "
          f"(converged: {res.converged}); "
          f"log marginal likelihood {res.log_marginal_likelihood:.2f}")
    print(f"{'hyperparameter':<22}{'true':>12}{'fitted':>12}")
    for name, true in res.truth.items():
        print(f"{name:<22}{true:>12.4g}{res.fitted[name]:>12.4g}")
    if res.plot:
        print(f"plot: {res.plot}")
    return 0
