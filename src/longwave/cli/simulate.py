"""``longwave simulate OUT``: make a simulated survey (or one long series) to test or benchmark on.

Thin: the options become keywords of :func:`longwave.demo.files.simulate_survey_file`
(or :func:`~longwave.demo.files.simulate_series_file` with ``--long N``).

Examples::

    longwave simulate survey.h5 --objects 5000 --seed 3
    longwave simulate quiet.h5 --classes flickering,wandering --points 50 120 --outliers 0
    longwave simulate pulsators.h5 --classes pulsating --objects 200
    longwave simulate long.npz --long 1e6 --scale 0.5
"""

from __future__ import annotations

import argparse


def _count(text: str) -> int:
    try:
        value = float(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(
            f"expected a whole number such as 1000 or 1e6, got {text!r}") from exc
    if value != int(value) or value < 1:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}")
    return int(value)


def register(sub) -> None:
    from ..demo.campaign import CLASSES, OPTIONAL_CLASSES

    names = ", ".join(f"{c.name} ({c.spec}, scale {c.scale[0]:g}-{c.scale[1]:g} d)"
                      for c in CLASSES)
    names += "; by name only: " + ", ".join(f"{c.name} ({c.spec})" for c in OPTIONAL_CLASSES)
    p = sub.add_parser(
        "simulate", help="write a simulated survey (or one long series) with its truth",
        description="Simulate sources of a season-long robotic-telescope campaign, each in a "
        "variability class drawn from a known kernel, with night-time cadence, error bars "
        "growing with faintness and outliers, and write them as a survey HDF5 file whose "
        "per-object metadata hold the truth. With --long N, write one densely sampled "
        f"series instead (.npz, .csv or .h5). Classes: {names}.",
    )
    p.add_argument("out", metavar="OUT", help="survey .h5 file (or, with --long, .npz/.csv/.h5)")
    p.add_argument("--objects", type=_count, default=1000, metavar="N",
                   help="sources (default: %(default)s)")
    p.add_argument("--points", type=_count, nargs=2, default=(150, 400), metavar=("LOW", "HIGH"),
                   help="range of observations per source (default: 150 400)")
    p.add_argument("--classes", default=None, metavar="NAMES",
                   help="comma-separated classes (default: flickering,wandering,random_walk "
                   "in their usual proportions; pulsating only when named)")
    p.add_argument("--days", type=float, default=150.0, help="season length (default: 150)")
    p.add_argument("--outliers", type=float, default=0.01, metavar="FRACTION",
                   help="fraction of points turned into 5-15 sigma outliers (default: 0.01)")
    p.add_argument("--clear-fraction", type=float, default=0.75,
                   help="fraction of clear nights (default: 0.75)")
    p.add_argument("--night-hours", type=float, default=7.0,
                   help="observing window per night in hours (default: 7)")
    p.add_argument("--seed", type=int, default=0, help="seed (default: 0)")
    p.add_argument("--overwrite", action="store_true", help="replace OUT if it exists")
    g = p.add_argument_group("one long series (instead of a survey)")
    g.add_argument("--long", type=_count, default=None, metavar="N",
                   help="write one Matern-3/2 series of N points")
    g.add_argument("--amplitude", type=float, default=0.2, help="--long: true amplitude")
    g.add_argument("--scale", type=float, default=1.0, help="--long: true scale in days")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..demo.files import simulate_series_file, simulate_survey_file

    cadence = dict(days=args.days, clear_fraction=args.clear_fraction,
                   night_hours=args.night_hours, seed=args.seed, overwrite=args.overwrite)
    if args.long is not None:
        out = simulate_series_file(args.out, args.long, amplitude=args.amplitude,
                                   scale=args.scale, **cadence)
    else:
        out = simulate_survey_file(args.out, objects=args.objects, points=tuple(args.points),
                                   classes=args.classes, outlier_fraction=args.outliers,
                                   **cadence)
    print(out.format())
    return 0
