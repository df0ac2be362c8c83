"""``longwave demo``: run the built-in demonstration."""

from __future__ import annotations

from pathlib import Path


def register(sub) -> None:
    p = sub.add_parser("demo", help="simulate a long series, fit it and plot the result")
    p.add_argument("--out", default="longwave-demo", help="output folder (default: %(default)s)")
    p.add_argument("--n", type=int, default=100_000, help="points (default: %(default)s)")
    p.add_argument("--seed", type=int, default=7)
    p.add_argument("--no-plot", action="store_true", help="skip the PNG figure")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..demo import run_single_series_demo

    res = run_single_series_demo(Path(args.out), n=args.n, seed=args.seed,
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
