"""Fit one long series and stream its posterior on a fine grid to HDF5.

Scenario (our own): the robotic telescope's priority target, observed about
900 times a night on the clear nights of one season (100,000 points). We
fit a Matern-3/2 model with the O(n) Kalman method, then write the posterior
mean and standard deviation on a grid of one million times (a point every
13 seconds) chunk by chunk, so the grid never sits in memory at once.

Run: ``python examples/fit_long_series.py [OUT_DIR]`` (about 10 s).
"""

import sys
import tempfile
import time
from pathlib import Path

import h5py
import numpy as np

import longwave as lw
from longwave.demo import simulate_long_series
from longwave.kernels import Matern32
from longwave.methods import Kalman
from longwave.storage import predict_to_hdf5, read_grid


def main(out_dir: Path) -> None:
    data = simulate_long_series(100_000, amplitude=0.2, scale=1.0, seed=11)
    series = lw.Series(data.t, data.y, data.err)

    # Starting values from the data, not from the truth.
    start = lw.Model(Matern32(amplitude=float(np.std(series.y)), scale=5.0),
                     mean=float(np.mean(series.y)), excess_noise=0.01)
    t0 = time.perf_counter()
    result = lw.fit(start, series, method=Kalman())
    print(f"fitted {series.n} points in {time.perf_counter() - t0:.1f} s, "
          f"converged: {result.converged}")
    for name, value in result.params.items():
        true = {"matern32.amplitude": data.truth["amplitude"],
                "matern32.scale": data.truth["scale"]}.get(name, data.truth.get(name))
        print(f"  {name:<20} fitted {value:<10.4g} true {true:.4g}")

    post = lw.posterior(result.model, series, method=Kalman())
    path = out_dir / "prediction.h5"
    grid = (series.t[0], series.t[-1], 1_000_000)  # start, stop, n: generated chunk by chunk
    t0 = time.perf_counter()
    written = predict_to_hdf5(post, grid, path, chunk=250_000, overwrite=True)
    print(f"wrote {written} grid points in {time.perf_counter() - t0:.1f} s -> {path}")

    # Reopen: the grid is stored as its attributes, the mean and std as datasets.
    with h5py.File(path, "r") as f:
        times = read_grid(f)
        mid = len(times) // 2
        print(f"grid {times.start:.3f} .. {times.stop:.3f}, n={len(times)}; at the middle: "
              f"mean {f['mean'][mid]:.4f}, std {f['std'][mid]:.4f}")
        assert np.all(np.isfinite(f["std"][:1000]))


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp()))
