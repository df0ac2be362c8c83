"""Kalman speed and memory: Matérn-1/2, 3/2, 5/2 from n = 1e4 to 1e7, side by side.

Usage::

    python bench/bench_kalman.py                 # n = 1e4 .. 1e7 (a few minutes)
    python bench/bench_kalman.py --quick         # n up to 1e6
    python bench/bench_kalman.py --json out.json # also write every figure as JSON

For each kernel and n, with all four parameters free (amplitude, scale, mean,
excess noise), times per point of: the log marginal likelihood, likelihood
plus gradient, and the posterior at n query times (a new posterior and its
n predictions; n more predictions from it: a lean posterior (d >= 2) runs its
compiled block pass again, a stored one (d = 1) keeps its smoothed states
from its second prediction on; and, as ``resmooth``, n more predictions
from a posterior made with ``keep=False``, which re-smooths every time; as ``onepass``,
a new posterior and its n predictions built in one sequential pass, where the default
builds one of 1e5 points or more in two halves on two threads; and, as ``reused``, a new
posterior whose n predictions go into output arrays made once and passed as
``predict(tq, out=...)``, as a pipeline predicting series after series or a long
grid chunk by chunk does). ``posterior`` includes the first touch of its fresh
output arrays (16 bytes a query), which the system time of its best run shows:
on virtual machines that cost depends on what the process freed before, not on
the code (``methods/fresh.py``). Measured in the same run,
round-robin, best of ``--repeat`` samples, a call shorter than 20 ms repeated
within its sample (the machine is shared, so only the best of several runs
and ratios taken within one run mean much):

- the hand-tuned Matérn-3/2 filter of ``bench/baseline_matern32.py`` on the
  same series (the reference of the ratios);
- the general Kalman loops (run-time state dimension), which the engine falls
  back to when the specialised ones do not apply;
- Exact (dense Cholesky) at n = 2000 and 5000;
- scikit-learn's GaussianProcessRegressor (``optimizer=None``, its
  ``log_marginal_likelihood``) at n = 5000, Matérn-3/2.

Peak memory of a likelihood pass is measured in a fresh subprocess per case,
relative to the input arrays (t, y, err: 24 bytes a point): the rise of the
resident set (``VmHWM`` after resetting it through ``/proc/self/clear_refs``,
falling back to ``ru_maxrss``) and the peak of numpy allocations
(``tracemalloc``; numba's own allocations are invisible to it).
"""

from __future__ import annotations

import argparse
import gc
import json
import math
import os
import resource
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from baseline_matern32 import matern32_loglik, new_work  # noqa: E402

from longwave import Model, Series, log_marginal_likelihood, posterior  # noqa: E402
from longwave._loops import kalman as general_loops  # noqa: E402
from longwave.kernels import Matern12, Matern32, Matern52  # noqa: E402
from longwave.methods import Exact, Kalman  # noqa: E402
from longwave.methods.kalman import KalmanPosterior  # noqa: E402

KERNELS = {
    "matern12": (Matern12, 0.5),
    "matern32": (Matern32, 1.5),
    "matern52": (Matern52, 2.5),
}
AMPLITUDE, SCALE, MEAN, EXCESS = 1.2, 20.0, 0.1, 0.05
# Known figures of a hand-tuned loop on this machine (ns per point, likelihood) and targets.
HAND_TUNED = {"matern12": 8.0, "matern32": 12.0, "matern52": 18.0}
TARGETS = {
    "likelihood": "<= 1.5x the hand-tuned figure at n = 1e6",
    "gradient": "likelihood + gradient <= 4x the likelihood",
    "prediction": "prediction <= 2.5x the likelihood",
    "scaling": "n = 1e7 costs <= 11x n = 1e6",
    "memory": "peak of a likelihood pass <= 2x the input arrays",
}


def make_series(n, seed=0):
    """Irregular times (exponential steps, offset 2.46e6, a few repeats and gaps)."""
    rng = np.random.default_rng(seed)
    dt = rng.exponential(1.0, n - 1)
    if n > 100:
        dt[rng.choice(n - 1, n // 100, replace=False)] = 0.0
        dt[rng.choice(n - 1, 3, replace=False)] = 1000.0 * SCALE
    t = 2.46e6 + np.concatenate([[0.0], np.cumsum(dt)])
    y = MEAN + np.sin(t / SCALE) + 0.3 * rng.standard_normal(n)
    err = rng.uniform(0.05, 0.3, n)
    return Series(t, y, err)


def make_model(name):
    cls, _ = KERNELS[name]
    return Model(cls(amplitude=AMPLITUDE, scale=SCALE), mean=MEAN, excess_noise=EXCESS)


def query_times(series, n):
    return np.linspace(series.t[0], series.t[-1], n)


# A sample of a short call repeats it until the sample lasts this long (as
# timeit does), with the garbage collector off: a collection just before a
# single call left that call 0.3-0.4 ms slower (caches cold after the
# collector's walk over every object), which at n <= 1e5 is most of the call.
MIN_SAMPLE_S = 0.02


def best_of(funcs, repeat):
    """Round-robin timing: run each function once per round, keep each one's best.

    Returns ``{name: seconds}`` per call of wall time, the same of CPU time of
    the process under ``name + "_cpu"`` (all threads; insensitive to other
    jobs taking the cores away, which wall time is not), and under
    ``name + "_sys"`` the system part of the CPU time in the sample of best
    wall time (page faults of fresh memory, mostly; the kernel may count it
    in whole ticks of 1-4 ms, so below that it is coarse). A call shorter
    than ``MIN_SAMPLE_S`` is repeated within its sample and the sample
    divided by the calls.
    """
    best = {name: math.inf for name in funcs}
    best.update({name + "_cpu": math.inf for name in funcs})
    calls = {}
    for name, fn in funcs.items():  # calibration: calls per sample
        t0 = time.perf_counter()
        fn()
        calls[name] = max(1, min(1000, int(MIN_SAMPLE_S / max(time.perf_counter() - t0, 1e-9))))
    for _ in range(repeat):
        for name, fn in funcs.items():
            k = calls[name]
            gc.collect()
            gc.disable()
            try:
                s0 = resource.getrusage(resource.RUSAGE_SELF).ru_stime
                c0 = time.process_time()
                t0 = time.perf_counter()
                for _ in range(k):
                    fn()
                wall = (time.perf_counter() - t0) / k
                cpu = (time.process_time() - c0) / k
                sys_time = (resource.getrusage(resource.RUSAGE_SELF).ru_stime - s0) / k
            finally:
                gc.enable()
            best[name + "_cpu"] = min(best[name + "_cpu"], cpu)
            if wall < best[name]:
                best[name] = wall
                best[name + "_sys"] = sys_time
    return best


def general_likelihood(model, series):
    """The general loops, called as the engine calls them when it falls back."""
    ss = model.kernel.state_space()
    resid = series.y - model.mean_value
    noise = model.noise_variance(series.err)
    trans = (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)
    return general_loops.filter_loglik(series.t, resid, noise, ss.H, ss.Pinf, trans)


def time_kalman(name, series, repeat, with_general=False):
    model = make_model(name)
    tq = query_times(series, series.n)
    holder = {"post": posterior(model, series, method=Kalman())}
    holder["post"].predict(tq[:1])  # its checkpoints are now known
    # the same without keeping smoothed states: every prediction re-smooths
    lean = KalmanPosterior(model, series, fast=True, keep=False)
    lean.predict(tq[:1])
    reused = np.zeros((2, tq.size))  # touched once here, then written by every "reused" run

    funcs = {
        "likelihood": lambda: log_marginal_likelihood(model, series, method=Kalman()),
        "gradient": lambda: log_marginal_likelihood(model, series, method=Kalman(),
                                                    gradient=True),
        # a new posterior and n predictions (its first prediction runs the backward pass);
        # from n = 1e5 on it is built in two halves on two threads (methods/kalman_split.py)
        "posterior": lambda: posterior(model, series, method=Kalman()).predict(tq),
        # the same into output arrays made once (predict's out=)
        "reused": lambda: posterior(model, series, method=Kalman()).predict(
            tq, out=(reused[0], reused[1])),
        # the same in one sequential pass, for the ratio of the two
        "onepass": lambda: KalmanPosterior(model, series, fast=True, split=False).predict(tq),
        # n more predictions from a posterior that has its checkpoints (from the
        # second one on, it keeps its smoothed states: best of runs is that case)
        "predict": lambda: holder["post"].predict(tq),
        # n more predictions from a posterior that re-smooths every time (keep=False)
        "resmooth": lambda: lean.predict(tq),
    }
    if name == "matern32":
        work = new_work()
        args = (series.t, series.y, series.err, MEAN, EXCESS**2, AMPLITUDE, SCALE, work)
        funcs["baseline"] = lambda: matern32_loglik(*args)
    if with_general:
        funcs["general"] = lambda: general_likelihood(model, series)
    out = best_of(funcs, repeat)
    halves = holder["post"].split_at is not None
    holder.clear()
    result = {k: v / series.n * 1e9 for k, v in out.items()}
    result["halves"] = halves  # whether the default posterior was built in two halves
    return result


def time_exact(name, series, repeat):
    model = make_model(name)
    tq = query_times(series, series.n)
    funcs = {
        "likelihood": lambda: log_marginal_likelihood(model, series, method=Exact()),
        "gradient": lambda: log_marginal_likelihood(model, series, method=Exact(),
                                                    gradient=True),
        "posterior": lambda: posterior(model, series, method=Exact()).predict(tq),
    }
    return {k: v / series.n * 1e9 for k, v in best_of(funcs, repeat).items()}


def time_sklearn(series, repeat):
    """scikit-learn's GaussianProcessRegressor, Matérn-3/2 with the same noise."""
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import ConstantKernel
    from sklearn.gaussian_process.kernels import Matern as SkMatern

    kernel = ConstantKernel(AMPLITUDE**2, "fixed") * SkMatern(SCALE, "fixed", nu=1.5)
    noise = series.err**2 + EXCESS**2
    X = (series.t - series.t[0])[:, None]
    resid = series.y - MEAN
    gpr = GaussianProcessRegressor(kernel, alpha=noise, optimizer=None, normalize_y=False)
    gpr.fit(X, resid)
    theta = gpr.kernel_.theta
    Xq = (query_times(series, series.n) - series.t[0])[:, None]
    value = float(gpr.log_marginal_likelihood(theta))
    free_kernel = ConstantKernel(AMPLITUDE**2) * SkMatern(SCALE, nu=1.5)
    gpr_grad = GaussianProcessRegressor(free_kernel, alpha=noise, optimizer=None).fit(X, resid)
    funcs = {
        "likelihood": lambda: gpr.log_marginal_likelihood(theta),
        "gradient": lambda: gpr_grad.log_marginal_likelihood(
            gpr_grad.kernel_.theta, eval_gradient=True),
        "posterior": lambda: GaussianProcessRegressor(
            kernel, alpha=noise, optimizer=None).fit(X, resid).predict(Xq, return_std=True),
    }
    out = {k: v / series.n * 1e9 for k, v in best_of(funcs, repeat).items()}
    ours = log_marginal_likelihood(make_model("matern32"), series, method=Kalman())
    out["lml_rel_diff"] = abs(value - ours) / abs(ours)
    return out


# --------------------------------------------------------------------------- memory
def _read_status(field):
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(field + ":"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return None


def memory_child(name, n, mode):
    """Run in a fresh process: peak memory of one likelihood pass, in bytes.

    ``mode``: ``lml``, ``grad`` (likelihood and gradient) or ``general`` (the
    general loops as the engine calls them, for comparison).
    """
    series = make_series(n)
    model = make_model(name)

    def run(s):
        if mode == "general":
            return general_likelihood(model, s)
        return log_marginal_likelihood(model, s, method=Kalman(), gradient=mode == "grad")

    run(make_series(1000))
    gc.collect()
    input_bytes = series.t.nbytes + series.y.nbytes + series.err.nbytes
    rss_before = _read_status("VmRSS")
    reset = False
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")  # resets VmHWM to the current resident set (Linux >= 4.0)
        reset = _read_status("VmHWM") is not None
    except OSError:
        pass
    maxrss_before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    tracemalloc.start()
    run(series)
    _, traced_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    if reset:
        rss_rise = _read_status("VmHWM") - rss_before
        how = "VmHWM"
    else:
        rss_rise = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 - maxrss_before
        how = "ru_maxrss"
    return {
        "input_bytes": input_bytes,
        "rss_rise_bytes": max(rss_rise, 0),
        "traced_peak_bytes": traced_peak,
        "rss_method": how,
    }


def measure_memory(name, n, mode="lml"):
    cmd = [sys.executable, __file__, "--memory-child", name, str(n), mode]
    env = dict(os.environ)
    out = subprocess.run(cmd, capture_output=True, text=True, env=env, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


# --------------------------------------------------------------------------- report
def fmt(x, width=9, digits=1):
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-".rjust(width)
    if abs(x) >= 1e5:
        return f"{x:{width}.3g}"
    return f"{x:{width}.{digits}f}"


COLUMNS = ("likelihood", "gradient", "posterior", "predict", "reused")


def print_table(results, sizes):
    head = (f"{'method':8s} {'kernel':8s} {'n':>8s} | {'lml':>8s} {'lml+grad':>8s} "
            f"{'post.':>8s} {'predict':>8s} {'reused':>8s} | {'lml':>7s} {'lml+grad':>8s} "
            f"{'post.':>7s} {'predict':>7s} {'reused':>7s} | {'grad/':>6s} {'post/':>6s} "
            f"{'pred/':>6s} {'reus/':>6s} {'lml/':>6s}")
    head2 = (f"{'':8s} {'':8s} {'':>8s} | {'wall ns/pt, best of runs':44s} | "
             f"{'CPU ns/pt (all threads), best':40s} | {'lml':>6s} {'lml':>6s} {'lml':>6s} "
             f"{'lml':>6s} {'base':>6s}")
    print("\nposterior = a new posterior and n predictions; predict = n more predictions")
    print("from a posterior that has its checkpoints; reused = posterior, into output arrays")
    print("made once (predict's out=); ratios of wall times (CPU in brackets in the targets")
    print("below); base = the hand-tuned Matérn-3/2 loop on the same series")
    print(head)
    print(head2)
    print("-" * len(head))

    def cells(r, keys, width):
        return " ".join(fmt(r.get(k), width) for k in keys)

    rows = []
    for name in KERNELS:
        for n in sizes:
            r = results["kalman"][name].get(str(n))
            if r is None:
                continue
            base = results["kalman"]["matern32"].get(str(n), {}).get("baseline")
            ratio = [r[c] / r["likelihood"] for c in COLUMNS[1:]]
            ratio.append(r["likelihood"] / base if base else None)
            rows.append(
                f"{'kalman':8s} {name:8s} {n:8d} | {cells(r, COLUMNS, 8)} | "
                f"{cells(r, [c + '_cpu' for c in COLUMNS], 7)} | "
                + " ".join(fmt(x, 6, 2) for x in ratio)
            )
    for n in sizes:
        r = results["kalman"]["matern32"].get(str(n))
        if r is None:
            continue
        rows.append(f"{'baseline':8s} {'matern32':8s} {n:8d} | {fmt(r['baseline'], 8)} "
                    f"{'':35s} | {fmt(r['baseline_cpu'], 7)}")
        if "general" in r:
            rows.append(f"{'general':8s} {'matern32':8s} {n:8d} | {fmt(r['general'], 8)} "
                        f"{'':35s} | {fmt(r['general_cpu'], 7)} {'':32s} | {'':27s} "
                        f"{fmt(r['general'] / r['baseline'], 6, 2)}")
    for n, r in sorted(results["exact"].items(), key=lambda kv: int(kv[0])):
        kr = results["kalman"]["matern32"].get(n, {})
        rows.append(
            f"{'exact':8s} {'matern32':8s} {int(n):8d} | {cells(r, COLUMNS[:3], 8)} {'':17s} | "
            f"{cells(r, [c + '_cpu' for c in COLUMNS[:3]], 7)} {'':15s} | "
            + (f"Kalman lml {r['likelihood'] / kr['likelihood']:.0f}x faster" if kr else "")
        )
    sk = results.get("sklearn")
    if sk:
        kr = results["kalman"]["matern32"].get(str(sk["n"]), {})
        rows.append(
            f"{'sklearn':8s} {'matern32':8s} {sk['n']:8d} | {cells(sk, COLUMNS[:3], 8)} {'':17s} | "
            f"{cells(sk, [c + '_cpu' for c in COLUMNS[:3]], 7)} {'':15s} | "
            + (f"Kalman lml {sk['likelihood'] / kr['likelihood']:.0f}x faster; " if kr else "")
            + f"same lml to {sk['lml_rel_diff']:.0e}"
        )
    print("\n".join(rows))


def _verdict(value, limit):
    return "met" if value <= limit else "NOT met"


def print_targets(results, sizes):
    print("\nTargets (wall [CPU])")
    k = results["kalman"]
    big = [n for n in sizes if n >= 100_000]
    if "1000000" in k["matern32"]:
        for name in KERNELS:
            r = k[name]["1000000"]
            limit = 1.5 * HAND_TUNED[name]
            print(f"  likelihood {name} n=1e6: {r['likelihood']:.1f} [{r['likelihood_cpu']:.1f}] "
                  f"ns/pt, limit {limit:.0f} (1.5 x {HAND_TUNED[name]:.0f}): "
                  f"{_verdict(r['likelihood'], limit)} [{_verdict(r['likelihood_cpu'], limit)}]")
        r = k["matern32"]["1000000"]
        print(f"  matern32 n=1e6 / baseline loop in this run: "
              f"{r['likelihood'] / r['baseline']:.2f}x "
              f"[{r['likelihood_cpu'] / r['baseline_cpu']:.2f}x]")
    notes = {"predict": " (from a built posterior)", "reused": " (into reused outputs)"}
    # The targets name n = 1e6 and 1e7; at 1e5 the fixed costs of a call
    # (Python, a second thread, the join of a split posterior) still show, so
    # its ratios are printed beside them as information.
    judged = [n for n in big if n >= 1_000_000]
    shown = [n for n in big if n < 1_000_000]

    def ratio(name, n, field, cpu=""):  # a figure over the likelihood, wall or CPU
        r = k[name][str(n)]
        return r[field + cpu] / r["likelihood" + cpu]

    for key, limit, field in (("gradient", 4.0, "gradient"), ("prediction", 2.5, "posterior"),
                              ("prediction", 2.5, "predict"), ("prediction", 2.5, "reused")):
        label = TARGETS[key] + notes.get(field, "")
        for name in KERNELS:
            info = "".join(f"; n={n}: {ratio(name, n, field):.2f}x "
                           f"[{ratio(name, n, field, '_cpu'):.2f}x]" for n in shown)
            if not judged:
                print(f"  {label}: {name}{info} (no n >= 1e6 in this run: not judged)")
                continue
            wall = max(ratio(name, n, field) for n in judged)
            cpu = max(ratio(name, n, field, "_cpu") for n in judged)
            print(f"  {label}: {name}, worst n>=1e6: {wall:.2f}x [{cpu:.2f}x]: "
                  f"{_verdict(wall, limit)} [{_verdict(cpu, limit)}]{info}")
    for name in KERNELS:
        for n in big:
            r = k[name][str(n)]
            how = "two halves" if r.get("halves") else "one pass (not split)"
            print(f"  {name} n={n}: new posterior + n predictions, {how} / one pass: "
                  f"{r['posterior'] / r['onepass']:.2f}x wall "
                  f"[{r['posterior_cpu'] / r['onepass_cpu']:.2f}x CPU]; system time of "
                  f"the best run: {r['posterior_sys'] * n / 1e6:.1f} ms, "
                  f"{r['reused_sys'] * n / 1e6:.1f} ms into reused outputs")
    if "10000000" in k["matern32"]:
        for name in KERNELS:
            for field in COLUMNS[:3] + COLUMNS[4:]:
                a = k[name]["10000000"][field] / k[name]["1000000"][field] * 10
                c = k[name]["10000000"][field + "_cpu"] / k[name]["1000000"][field + "_cpu"] * 10
                print(f"  {TARGETS['scaling']}: {name} {field}: {a:.1f}x [{c:.1f}x]: "
                      f"{_verdict(a, 11)} [{_verdict(c, 11)}]")
    for key, m in results["memory"].items():
        peak = 1 + m["rss_rise_bytes"] / m["input_bytes"]
        print(f"  {TARGETS['memory']}: {key}: resident rise {m['rss_rise_bytes'] / 1e6:.1f} MB "
              f"over {m['input_bytes'] / 1e6:.0f} MB of inputs = {peak:.2f}x inputs "
              f"({m['rss_method']}); numpy peak {m['traced_peak_bytes'] / 1e6:.2f} MB: "
              f"{_verdict(peak, 2)}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="n up to 1e6 (not 1e7)")
    parser.add_argument("--json", type=Path, default=None, help="write the figures here")
    parser.add_argument("--repeat", type=int, default=5, help="runs per figure (best kept)")
    parser.add_argument("--sizes", default="", help="comma-separated n (overrides the default)")
    parser.add_argument("--memory-child", nargs=3, metavar=("KERNEL", "N", "MODE"),
                        help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.memory_child:
        name, n, mode = args.memory_child
        print(json.dumps(memory_child(name, int(n), mode)))
        return 0

    sizes = [10_000, 100_000, 1_000_000] + ([] if args.quick else [10_000_000])
    if args.sizes:
        sizes = [int(float(x)) for x in args.sizes.split(",")]
    results = {"machine": {"cpus": os.cpu_count()}, "targets": TARGETS,
               "hand_tuned_ns": HAND_TUNED, "kalman": {k: {} for k in KERNELS},
               "exact": {}, "memory": {}}
    # Compile (or load from cache) everything once on a small series.
    for name in KERNELS:
        time_kalman(name, make_series(2000, seed=1), 1, with_general=True)
    for n in sizes + [2000, 5000]:
        series = make_series(n)
        for name in KERNELS:  # --repeat at every n: the ratios at 1e7 are as noisy as any
            res = time_kalman(name, series, args.repeat, with_general=(n == 1_000_000))
            results["kalman"][name][str(n)] = res
            print(f"kalman {name} n={n}: "
                  + ", ".join(f"{k} {v:.1f}" for k, v in res.items()
                              if not k.endswith(("_cpu", "_sys"))),
                  flush=True)
        if n in (2000, 5000):
            res = time_exact("matern32", series, max(2, args.repeat // 2))
            results["exact"][str(n)] = res
            print(f"exact matern32 n={n}: "
                  + ", ".join(f"{k} {v:.0f}" for k, v in res.items() if "_cpu" not in k),
                  flush=True)
        if n == 5000:
            res = time_sklearn(series, max(2, args.repeat // 2))
            res["n"] = n
            results["sklearn"] = res
            print("sklearn n=5000: "
                  + ", ".join(f"{k} {v:.3g}" for k, v in res.items() if "_cpu" not in k),
                  flush=True)
        del series
    mem_n = sizes[-1]
    for name in KERNELS:
        for mode in ("lml", "grad"):
            key = f"{name} n={mem_n:.0e} " + ("lml" if mode == "lml" else "lml+grad")
            results["memory"][key] = measure_memory(name, mem_n, mode)
    results["memory"][f"matern32 n={mem_n:.0e} general loops (for comparison)"] = (
        measure_memory("matern32", mem_n, "general"))
    print_table(results, sizes + [2000, 5000])
    print_targets(results, sizes)
    if args.json:
        args.json.write_text(json.dumps(results, indent=1))
        print(f"\nwrote {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
