"""``longwave inspect RESULTS.h5``: summarise a result file, show one object, plot its fit.

Thin: calls :func:`longwave.demo.inspect.summarise_results`,
:func:`~longwave.demo.inspect.object_row` and :func:`~longwave.demo.inspect.plot_object`.

Examples::

    longwave inspect results.h5
    longwave inspect results.h5 --object src000042 --survey survey.h5 --plot fit.png
"""

from __future__ import annotations


def register(sub) -> None:
    p = sub.add_parser(
        "inspect", help="summarise a result file; show and plot one object's fit",
        description="Print a result file's summary: counts by status and method, median "
        "hyperparameters with their 16th-84th percentile range, fit-time statistics and the "
        "stored configuration. With --object, print that object's record; with --plot, also "
        "draw its posterior from the grid stored in the file or, when there is none (or with "
        "--refit), by fitting it again from --survey with the stored settings.",
    )
    p.add_argument("results", metavar="RESULTS.h5", help="result file of a survey or fit run")
    p.add_argument("--object", metavar="ID", default=None, help="one object to show")
    p.add_argument("--plot", metavar="OUT.png", default=None,
                   help="draw the object's data and posterior into this PNG (needs --object)")
    p.add_argument("--survey", metavar="SURVEY.h5", default=None,
                   help="survey file the results came from: data points, truth, refits")
    p.add_argument("--refit", action="store_true",
                   help="fit the object again even when a grid is stored (needs --survey)")
    p.add_argument("--magnitudes", action="store_true",
                   help="values are magnitudes: draw smaller values upwards")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..demo import inspect as view

    if (args.plot or args.refit) and not args.object:
        raise ValueError("--plot and --refit draw one object; name it with --object ID")
    if args.object is None:
        summary = view.summarise_results(args.results)
        print(summary.to_json() if args.json else summary.format())
        return 0
    try:
        row = view.object_row(args.results, args.object)
    except KeyError as exc:
        raise ValueError(exc.args[0]) from None
    truth = view.survey_object(args.survey, args.object)[1] if args.survey else {}
    print(view.format_row(row, truth))
    if args.plot:
        shown = view.plot_object(args.results, args.object, args.plot, survey=args.survey,
                                 refit=args.refit, magnitudes=args.magnitudes)
        print(f"plot ({shown.source} posterior): {shown.plot}")
    return 0
