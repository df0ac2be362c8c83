"""Choose an approximation with the benchmark runner before fitting a large set.

Scenario (our own): a spotted star whose light curve repeats with its
rotation period while the spots slowly evolve, modelled as a Matern-3/2
process times a periodic kernel. The periodic kernel's state-space form is a
truncated series, so Kalman is no longer exact and the choice is between
dense Exact inference (exact, O(n^3)), Kalman on the truncated form, and
inducing-point methods. The runner
fits an Exact reference on a stretch it can afford, scores each setting
against it, and recommends the cheapest one within the tolerance.

Run: ``python examples/choose_method.py [OUT_DIR]`` (about 20 s).
"""

import sys
import tempfile
from pathlib import Path

import numpy as np

import longwave as lw
from longwave.benchmark import parse_methods, run_benchmark
from longwave.benchmark.report import write_report
from longwave.demo.cadence import night_cadence
from longwave.kernels import Matern32, Periodic
from longwave.simulate import simulate_series


def main(out_dir: Path) -> None:
    rng = np.random.default_rng(5)
    t = night_cadence(600, years=0.4, season_fraction=1.0, rng=rng)
    err = rng.uniform(0.01, 0.02, t.size)
    # In a product only one amplitude is free: the periodic factor's is fixed at 1.
    unit = lw.Param(1.0, fixed=True)
    truth = lw.Model(Matern32(amplitude=0.2, scale=20.0)
                     * Periodic(amplitude=unit, period=3.1, scale=1.0),
                     mean=12.0, excess_noise=0.005)
    series, _ = simulate_series(truth, t, err, rng=rng)
    start = lw.Model(Matern32(amplitude=float(np.std(series.y)), scale=10.0)
                     * Periodic(amplitude=unit, period=3.1, scale=1.5),
                     mean=float(np.mean(series.y)),
                     excess_noise=0.01)
    settings = parse_methods(["exact", "kalman", "vfe:m=16,64", "fitc:m=64"])
    result = run_benchmark(series, start, settings, reference_max_n=600, fit=False, scaling_steps=2,
                           seed=0, progress=print)
    files = write_report(result, out_dir, title=f"rotating source: {series.n} points")
    print(files["summary"].read_text())
    rec = result.recommendation
    print(f"recommended: {rec.choice or 'none'}; plots: {files['accuracy_plot']}")
    assert rec.choice, rec.warning


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp()))
