"""Which approximation to pick: the benchmark runner on two synthetic series.

Usage::

    python bench/bench_choose.py                 # n = 20000 per scenario (a few minutes)
    python bench/bench_choose.py --quick         # n = 4000
    python bench/bench_choose.py --scaling 1e6   # also scaling mode up to n = 1e6

Scenario A: Matérn-3/2 (correlation length 30, hundreds of them in the span)
plus excess noise. The kernel has an exact state-space form, so Kalman is the
reference on every point and the runner should pick it; Exact is capped at
2000 points and refused. Scenario B: squared exponential with a long
correlation length (300); its state-space form is only an approximation, so
the reference is Exact on the longest affordable stretch and sparse settings
compete with the approximate Kalman form. Reports (JSON,
PNG, text) go to ``--out``; each scenario's table compares every setting side
by side in one run, because the machine is shared and noisy.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

from longwave import Model
from longwave.benchmark import Tolerance, parse_methods, run_benchmark
from longwave.benchmark.entry import scaling_to_dir
from longwave.benchmark.report import summary_text, write_report
from longwave.kernels import Matern32, SquaredExp
from longwave.simulate import simulate_series


def _series(kernel, n, seed):
    rng = np.random.default_rng(seed)
    # Night-cadence-like sampling: bursts of points with daily gaps and 5 % seasonal holes.
    t = np.cumsum(rng.exponential(1.0, n) * np.where(rng.random(n) < 0.05, 20.0, 1.0))
    series, _ = simulate_series(Model(kernel, excess_noise=0.03), 2.46e6 + t, err=0.1, rng=rng)
    return series


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="n = 4000 instead of 20000")
    parser.add_argument("--out", type=Path, default=None, help="report folder (default: temp)")
    parser.add_argument("--scaling", type=float, default=0.0, help="also scaling mode to this n")
    parser.add_argument("--tolerance", type=float, default=0.01)
    args = parser.parse_args(argv)
    n = 4000 if args.quick else 20_000
    out = args.out or Path(tempfile.mkdtemp(prefix="bench_choose_"))
    tol = Tolerance.from_nats(args.tolerance)
    scenarios = {
        # Short correlation length: hundreds of them in the span, hopeless for few inducing points.
        "A_matern32": (Matern32(amplitude=1.0, scale=30.0),
                       Model(Matern32(amplitude=0.5, scale=10.0), excess_noise=0.01),
                       "exact:max_n=2000 kalman vfe:m=64,256 fitc:m=128"),
        # Long correlation length: a few dozen in the span, where sparse settings can compete.
        "B_squared_exp": (SquaredExp(amplitude=1.0, scale=300.0),
                          Model(SquaredExp(amplitude=0.5, scale=100.0), excess_noise=0.01),
                          "exact kalman vfe:m=32,64,128 fitc:m=64"),
    }
    for name, (kernel, start, methods) in scenarios.items():
        series = _series(kernel, n, seed=11)
        print(f"== scenario {name}: n = {series.n}", flush=True)
        result = run_benchmark(series, start, parse_methods(methods), tolerance=tol,
                               reference_max_n=min(2000, n), seed=1,
                               progress=lambda line: print("  " + line, file=sys.stderr))
        files = write_report(result, out / name, title=f"scenario {name}")
        print(summary_text(result, f"scenario {name}"))
        print(f"report: {files['json']}\n")
    if args.scaling:
        outcome = scaling_to_dir(out / "scaling", methods=["kalman", "exact", "vfe:m=64"],
                                 max_n=int(args.scaling),
                                 progress=lambda line: print("  " + line, file=sys.stderr))
        print(outcome.text)
    print(f"all reports under {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
