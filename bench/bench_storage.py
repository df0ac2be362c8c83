"""Storage benchmark: a 1e8-point prediction grid from a 1e7-point series, and I/O ratios.

Usage::

    python bench/bench_storage.py            # n = 1e7 points, grid of 1e8 (a few minutes)
    python bench/bench_storage.py --quick    # n = 1e6, grid of 1e7

Part 1 (memory): a child process writes a Matérn-3/2 series to a series file;
another child reads it in chunks, builds the Kalman posterior and predicts a
uniform grid into HDF5 with ``predict_to_hdf5``. Each child reports its peak
RSS from ``resource.getrusage`` (Linux: kilobytes), next to a child that only
imports longwave and reads the series, so the figures share one machine state.

Part 2 (ratios, side by side in one run, because the machine is shared and
noisy): chunked-to-HDF5 prediction vs in-memory prediction; batch reads of a
survey file vs one raw read of its datasets; result-store appends with and
without fsync vs appending to a list; CSV conversion vs a bare csv.reader pass.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

BUDGET_GB = 1.5

WRITE_CHILD = textwrap.dedent("""
    import json, sys, time
    import numpy as np
    from longwave.kernels import Matern32
    from longwave.simulate import sample_prior
    from longwave.storage import write_series
    path, n = sys.argv[1], int(sys.argv[2])
    rng = np.random.default_rng(7)
    t = 2.46e6 + np.cumsum(rng.exponential(1.0, n))
    f = sample_prior(Matern32(amplitude=1.0, scale=30.0), t, rng=rng)
    err = rng.uniform(0.05, 0.2, n)
    t0 = time.perf_counter()
    write_series(path, t, f + err * rng.standard_normal(n), err)
    print(json.dumps({"write_s": time.perf_counter() - t0}))
""")

PREDICT_CHILD = textwrap.dedent("""
    import json, resource, sys, time
    t_start = time.perf_counter()
    import longwave as lw
    from longwave.kernels import Matern32
    from longwave.storage import open_series, predict_to_hdf5
    series_path, out_path, n_grid, mode = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
    def peak_mb():
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    out = {}
    t0 = time.perf_counter()
    with open_series(series_path) as sd:
        series = sd.to_series()
    out["read_s"] = time.perf_counter() - t0
    out["after_read_mb"] = peak_mb()
    if mode == "predict":
        model = lw.Model(Matern32(amplitude=1.0, scale=30.0), excess_noise=0.01)
        t0 = time.perf_counter()
        post = lw.posterior(model, series)
        out["posterior_s"] = time.perf_counter() - t0
        out["after_posterior_mb"] = peak_mb()
        lo, hi = float(series.t[0]), float(series.t[-1])
        t0 = time.perf_counter()
        predict_to_hdf5(post, (lo, hi, n_grid), out_path, chunk=1 << 20)
        out["predict_s"] = time.perf_counter() - t0
    out["peak_mb"] = peak_mb()
    out["total_s"] = time.perf_counter() - t_start
    print(json.dumps(out))
""")


def _child(code, *args):
    proc = subprocess.run([sys.executable, "-c", code, *map(str, args)], capture_output=True,
                          text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"benchmark child failed:\n{proc.stderr}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def part_memory(tmp, n, n_grid):
    series_path, out_path = tmp / "long.h5", tmp / "grid.h5"
    w = _child(WRITE_CHILD, series_path, n)
    base = _child(PREDICT_CHILD, series_path, out_path, n_grid, "read-only")
    run = _child(PREDICT_CHILD, series_path, out_path, n_grid, "predict")
    d = 2
    print(f"\n== 1. {n:.0e}-point Matern-3/2 series -> {n_grid:.0e}-point grid ==")
    print(f"series file written in {w['write_s']:.1f} s "
          f"({series_path.stat().st_size / 1e6:.0f} MB on disk)")
    print(f"read in chunks:      {run['read_s']:7.1f} s   peak so far "
          f"{run['after_read_mb']:7.0f} MB   (read-only child: {base['peak_mb']:.0f} MB)")
    print(f"Kalman posterior:    {run['posterior_s']:7.1f} s   peak so far "
          f"{run['after_posterior_mb']:7.0f} MB")
    print(f"predict_to_hdf5:     {run['predict_s']:7.1f} s   ({n_grid / run['predict_s'] / 1e6:.2f}"
          f" M points/s; output {out_path.stat().st_size / 1e9:.2f} GB)")
    print(f"peak RSS {run['peak_mb']:.0f} MB = {run['peak_mb'] / 1024 / BUDGET_GB:.2f} x the "
          f"{BUDGET_GB} GB budget; posterior state {n * (d + d * d) * 8 / 1e6:.0f} MB "
          f"(full filter+smoother storage would be {2 * n * (d + d * d) * 8 / 1e6:.0f} MB)")
    series_path.unlink()
    out_path.unlink()
    return run


def _best(func, repeat=3):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - t0)
    return best


def part_ratios(tmp):
    import h5py
    import numpy as np

    import longwave as lw
    from longwave.kernels import Matern32
    from longwave.storage import (
        ObjectResult,
        ResultStore,
        SurveyFile,
        predict_to_hdf5,
        survey_from_csv,
        write_survey,
    )

    rng = np.random.default_rng(3)
    print("\n== 2. side-by-side ratios (best of 3) ==")
    n = 200_000
    t = np.cumsum(rng.exponential(1.0, n))
    series = lw.Series(t, np.sin(t / 20) + 0.1 * rng.standard_normal(n), np.full(n, 0.1))
    post = lw.posterior(lw.Model(Matern32(amplitude=1.0, scale=20.0)), series)
    grid = (t[0], t[-1], 2_000_000)
    post.predict(t[:10])
    mem = _best(lambda: post.predict(np.linspace(*grid)))
    counter = iter(range(100))
    disk = _best(lambda: predict_to_hdf5(post, grid, tmp / f"g{next(counter)}.h5"))
    print(f"predict 2e6 points: to HDF5 in 1 Mi chunks / in memory = {disk / mem:.2f}"
          f"  ({disk:.2f} s vs {mem:.2f} s)")

    m = 20_000
    lengths = rng.integers(20, 200, m)
    ids = [f"obj{i:06d}" for i in range(m)]
    times = [np.sort(rng.uniform(0, 1000, k)) for k in lengths]
    write_survey(tmp / "s.h5", ids, times, [rng.normal(size=k) for k in lengths],
                 [np.full(k, 0.1) for k in lengths])

    def batches():
        with SurveyFile(tmp / "s.h5") as sf:
            for _ in sf.iter_batches(64):
                pass

    def raw():
        with h5py.File(tmp / "s.h5") as f:
            for name in ("time", "value", "error", "offsets", "ids"):
                f[name][...]

    tb, tr = _best(batches), _best(raw)
    print(f"survey of {m} objects ({lengths.sum() / 1e6:.1f} M points): iter_batches(64) / one raw "
          f"read = {tb / tr:.2f}  ({tb:.2f} s vs {tr:.2f} s)")

    rows = [ObjectResult(id=f"o{i}", status="ok", method="kalman", n=100,
                         params={"a": 1.0, "b": 2.0}, message="converged") for i in range(5000)]

    store_names = iter(range(100))

    def store(durable):
        path = tmp / f"r{next(store_names)}.h5"
        with ResultStore(path, ["a", "b"], {"x": 1}, durable=durable) as st:
            for r in rows:
                st.append(r)

    t_list = _best(lambda: [].extend(rows))
    t_sync, t_nosync = _best(lambda: store(True)), _best(lambda: store(False))
    print(f"5000 results, flush every 100: fsync / no fsync = {t_sync / t_nosync:.2f}; "
          f"no fsync / list append = {t_nosync / max(t_list, 1e-9):.0f}  "
          f"({t_sync:.2f} s, {t_nosync:.2f} s, {t_list * 1e3:.2f} ms)")

    with open(tmp / "long.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["objid", "mjd", "mag", "magerr"])
        for i in range(2000):
            for tt in times[i]:
                w.writerow([ids[i], repr(float(tt)), "17.25", "0.05"])
    n_rows = int(lengths[:2000].sum())

    def bare():
        with open(tmp / "long.csv", newline="") as fh:
            for _ in csv.reader(fh):
                pass

    counter2 = iter(range(100))
    tc = _best(lambda: survey_from_csv(tmp / "long.csv", tmp / f"c{next(counter2)}.h5"))
    tbare = _best(bare)
    print(f"CSV long table ({n_rows / 1e3:.0f} k rows) -> survey / bare csv.reader pass = "
          f"{tc / tbare:.2f}  ({n_rows / tc / 1e6:.2f} M rows/s)")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="n = 1e6, grid = 1e7")
    parser.add_argument("--skip-memory", action="store_true", help="only the ratio part")
    args = parser.parse_args(argv)
    n, n_grid = (10**6, 10**7) if args.quick else (10**7, 10**8)
    print(f"cpus: {os.cpu_count()}; load average {os.getloadavg()[0]:.1f} (shared machine: "
          "absolute times are noisy, ratios less so)")
    with tempfile.TemporaryDirectory(prefix="lw-bench-") as tmp:
        tmp = Path(tmp)
        if not args.skip_memory:
            run = part_memory(tmp, n, n_grid)
            ok = run["peak_mb"] / 1024 < BUDGET_GB
            print(f"memory budget: {'met' if ok else 'EXCEEDED'}")
        part_ratios(tmp)


if __name__ == "__main__":
    main()
