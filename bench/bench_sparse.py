"""Benchmark of the sparse methods: speed split, BLAS ratio, memory, thread waiting.

Run ``python bench/bench_sparse.py`` (a few minutes) or ``--quick`` (about
half a minute). Every figure is measured in fresh subprocesses and reported
as ratios side by side from one run, because the machine is shared:

1. speed: VFE log marginal likelihood + gradient at n = 1e6 (1e5 quick) for
   m = 64, 256, 1024, with support windows (the default) and without
   (``windows=False``: every block in full, as for a kernel without finite
   support), each with the time spent in kernel-block evaluation (numba);
   throughput as the ratio
   ``time(numpy A.T @ A over the same (chunk, m) blocks) / time(evaluation)``;
   FITC beside it;
2. memory: peak traced allocations (tracemalloc) and peak RSS
   (``resource.getrusage``) of one VFE evaluation at n = 1e5, 1e6, 1e7 from
   a generated source (no data array exists, so any growth is the method's);
3. threads: the same evaluation with passive thread waiting (the
   ``longwave._config`` defaults) and with spinning waits.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

SPIN_ENV = {"OMP_WAIT_POLICY": "ACTIVE", "OPENBLAS_THREAD_TIMEOUT": "28", "KMP_BLOCKTIME": "200"}


class SyntheticReader:
    """Deterministic data for points lo:hi, generated on demand (picklable, no storage)."""

    def __init__(self, n, span=None):
        self.n = n
        self.span = span or n / 50.0  # 50 points per unit time; Matérn scale 20 units

    def __call__(self, lo, hi):
        import numpy as np

        idx = np.arange(lo, hi, dtype=np.float64)
        t = idx * (self.span / self.n) + 0.3 * np.sin(idx * 12.9898) * (self.span / self.n)
        y = np.sin(t / 15.0) + 0.3 * np.sin(idx * 78.233)
        err = 0.2 + 0.1 * (np.cos(idx * 3.7) ** 2)
        return t, y, err


def _problem(n, m):
    import longwave as lw
    from longwave.kernels import Matern32
    from longwave.methods import ChunkedSeries

    source = ChunkedSeries.from_reader(SyntheticReader(n), n)
    model = lw.Model(Matern32(amplitude=0.8, scale=20.0), mean=0.05, excess_noise=0.05)
    return source, model


class _BlockTimer:
    """Times the block evaluator's numba calls inside real evaluations (bench only)."""

    def __init__(self, blocks):
        self.blocks, self.seconds = blocks, 0.0

    def _timed(self, name, *args, **kwargs):
        t0 = time.perf_counter()
        out = getattr(self.blocks, name)(*args, **kwargs)
        self.seconds += time.perf_counter() - t0
        return out

    def block(self, *args, **kwargs):
        return self._timed("block", *args, **kwargs)

    def contract(self, *args, **kwargs):
        return self._timed("contract", *args, **kwargs)

    def square(self, *args, **kwargs):
        return self._timed("square", *args, **kwargs)

    def contract_square(self, *args, **kwargs):
        return self._timed("contract_square", *args, **kwargs)


def child_speed(n, m, repeats, with_fitc):
    # longwave first: it sets the thread-waiting variables before numpy loads BLAS
    import longwave  # noqa: F401, I001
    import numpy as np

    from longwave._config import settings
    from longwave.methods import FITC, VFE, sparse
    from longwave.methods.sparse_windows import size

    source, model = _problem(n, m)
    chunk = settings().sparse_chunk(m)
    z = np.asarray(VFE(inducing=m, placement="uniform").placed(model, source).inducing)
    timers = []
    real_setup = sparse.SparseMethod._setup

    def timed_setup(self, model_, z_):  # wrap the block evaluator of every evaluation
        st = real_setup(self, model_, z_)
        timers.append(_BlockTimer(st.blocks))
        return type(st)(**{**st.__dict__, "blocks": timers[-1]})

    sparse.SparseMethod._setup = timed_setup

    def best(method):
        method.evaluate(model, source, gradient=True)  # compile and warm up
        runs = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            method.evaluate(model, source, gradient=True)
            runs.append((time.perf_counter() - t0, timers[-1].seconds))
        return min(runs)

    a = np.random.default_rng(0).standard_normal((chunk, m))

    def reference():  # numpy A.T @ A over the same (chunk, m) shapes, the whole series
        runs = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            for _ in source.ranges(chunk):
                a.T @ a
            runs.append(time.perf_counter() - t0)
        return min(runs)

    out = {"n": n, "m": m, "chunk": chunk}
    out["syrk_s"] = reference()
    out["vfe_s"], out["blocks_s"] = best(VFE(inducing=z))
    out["vfe_full_s"], out["blocks_full_s"] = best(VFE(inducing=z, windows=False))
    setup = real_setup(VFE(inducing=z), model, z)
    out["raw"] = bool(setup.raw)
    widths = [size(setup.windows.find(source.read(lo, hi)[0]), m)
              for lo, hi in source.ranges(chunk)]
    out["window_mean"] = float(np.mean(widths))
    if with_fitc:
        out["fitc_s"], _ = best(FITC(inducing=z))
        out["fitc_full_s"], _ = best(FITC(inducing=z, windows=False))
    return out


def child_memory(n, m):
    import longwave  # noqa: F401, I001  (before numpy, as above)
    import numpy as np
    import resource
    import tracemalloc

    from longwave.methods import VFE

    source, model = _problem(n, m)
    z = np.linspace(0, source._reader.span, m)
    method = VFE(inducing=z)
    method.evaluate(model, _problem(1000, m)[0], gradient=True)  # compile outside the count
    tracemalloc.start()
    t0 = time.perf_counter()
    method.evaluate(model, source, gradient=True)
    seconds = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    rss_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return {"n": n, "m": m, "traced_peak_mb": peak / 2**20, "max_rss_mb": rss_kb / 1024,
            "seconds": seconds}


def run_child(args, env_extra=None):
    env = dict(os.environ)
    env.update(env_extra or {})
    cmd = [sys.executable, __file__, "--child", json.dumps(args)]
    res = subprocess.run(cmd, env=env, capture_output=True, text=True, check=False)
    if res.returncode != 0:
        raise RuntimeError(f"benchmark child {args} failed:\n{res.stderr}")
    return json.loads(res.stdout.strip().splitlines()[-1])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes, about half a minute")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    opts = parser.parse_args(argv)
    if opts.child:
        job = json.loads(opts.child)
        kind = job.pop("kind")
        result = child_speed(**job) if kind == "speed" else child_memory(**job)
        print(json.dumps(result))
        return
    n = 100_000 if opts.quick else 1_000_000
    ms = (64, 256) if opts.quick else (64, 256, 1024)
    print(f"# sparse benchmark ({'quick' if opts.quick else 'full'}); machine shared: read ratios")
    print("\n## speed: VFE lml + gradient (and FITC), seconds per evaluation")
    print("default = support windows + raw accumulation where Kuu is well conditioned;")
    print("full = windows=False (every block evaluated and whitened: what a kernel with")
    print("no finite support, such as a periodic one, costs). ratio = A.T@A time / VFE time,")
    print("A.T@A over the same (chunk, m) shapes for the whole series, in the same run.")
    print(f"{'n':>9} {'m':>5} {'window':>6} {'raw':>4} {'VFE s':>7} {'blocks':>7} "
          f"{'A.T@A s':>8} {'ratio':>6} {'full s':>7} {'blocks':>7} {'ratio':>6} "
          f"{'FITC s':>7} {'F/V':>5} {'FITCfull':>8} {'F/V':>5}")
    for m in ms:
        r = run_child({"kind": "speed", "n": n, "m": m, "repeats": 2, "with_fitc": m <= 256})
        fitc, fitc_full = r.get("fitc_s", float("nan")), r.get("fitc_full_s", float("nan"))
        print(f"{r['n']:>9} {r['m']:>5} {r['window_mean']:>6.1f} {str(r['raw'])[0]:>4} "
              f"{r['vfe_s']:>7.3f} {r['blocks_s']:>7.3f} {r['syrk_s']:>8.3f} "
              f"{r['syrk_s'] / r['vfe_s']:>6.2f} {r['vfe_full_s']:>7.3f} "
              f"{r['blocks_full_s']:>7.3f} {r['syrk_s'] / r['vfe_full_s']:>6.2f} "
              f"{fitc:>7.3f} {fitc / r['vfe_s']:>5.2f} {fitc_full:>8.3f} "
              f"{fitc_full / r['vfe_full_s']:>5.2f}")
    print("\n## memory: one VFE evaluation (m=256) from a generated source")
    print(f"{'n':>9} {'traced peak MB':>15} {'max RSS MB':>11} {'seconds':>8}")
    for nn in ((100_000, 1_000_000) if opts.quick else (100_000, 1_000_000, 10_000_000)):
        r = run_child({"kind": "memory", "n": nn, "m": 256})
        print(f"{r['n']:>9} {r['traced_peak_mb']:>15.1f} {r['max_rss_mb']:>11.1f} "
              f"{r['seconds']:>8.2f}")
    print("\n## threads: passive waiting (longwave._config) vs spinning, VFE m=256")
    nt = 50_000 if opts.quick else 200_000
    job = {"kind": "speed", "n": nt, "m": 256, "repeats": 3, "with_fitc": False}
    passive = run_child(job)
    spin = run_child(job, SPIN_ENV)
    print(f"n={nt}: passive {passive['vfe_s']:.3f} s, spinning {spin['vfe_s']:.3f} s, "
          f"spinning/passive = {spin['vfe_s'] / passive['vfe_s']:.2f}")


if __name__ == "__main__":
    main()
