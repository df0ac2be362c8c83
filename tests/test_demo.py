"""``longwave demo`` end to end at a reduced size, and what its survey recovers.

One real subprocess runs the demo (150 sources, a 3,000-point long series,
the embedded local cluster); the tests reopen everything it wrote and check
the fitted hyperparameters against the simulated truth, read straight from
the result and survey files (not through the demo's own recovery code).
"""

from __future__ import annotations

import csv
import json
import os
import subprocess
import sys

import numpy as np
import pytest

from longwave.demo.campaign import read_truth
from longwave.storage import ResultStore, SurveyFile

OBJECTS = 150
LONG_POINTS = 3000
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    proc = subprocess.run(
        [sys.executable, "-m", "longwave", "demo", "--out", str(out), "--objects", str(OBJECTS),
         "--long-points", str(LONG_POINTS), "--quiet"],
        capture_output=True, text=True, timeout=400, cwd=out,
        env={**os.environ, "PYTHONWARNINGS": "ignore"})
    assert proc.returncode == 0, proc.stderr[-3000:]
    return out, proc.stdout


def _fitted(out, spec, truth):
    """Fitted amplitude, scale and LML of ``spec`` in the truth's object order."""
    table = ResultStore.read(out / f"results_{spec}.h5")
    row = {s: i for i, s in enumerate(table.id.tolist())}
    idx = np.array([row[s] for s in truth["id"]])
    ok = np.isin(table.status[idx], ("ok", "not_converged"))
    get = lambda a: np.where(ok, a[idx], np.nan)  # noqa: E731
    return (get(table.params[f"{spec}.amplitude"]), get(table.params[f"{spec}.scale"]),
            get(table.log_marginal_likelihood))


def test_demo_prints_where_everything_is(demo):
    out, stdout = demo
    for name in ("campaign.h5", "results_matern32.h5", "results_matern12.h5", "report.txt",
                 "report.json", "recovered.csv", "objects.png", "recovered.png",
                 "accuracy_vs_time.png"):
        assert name in stdout, f"{name} not listed in the demo's output"
    report = json.loads((out / "report.json").read_text())
    for role, path in report["files"].items():
        assert os.path.exists(path), f"{role}: {path} listed but missing"
    assert report["sizes"]["objects"] == OBJECTS
    assert report["total_seconds"] > 0


def test_demo_outputs_reopen(demo):
    out, _ = demo
    with SurveyFile(out / "campaign.h5") as sf:
        assert len(sf) == OBJECTS and sf.has_err
        assert {"class", "kernel", "true_scale", "true_amplitude"} <= set(sf.meta_names)
        first = sf.ids[0]
    for spec in ("matern32", "matern12"):
        table = ResultStore.read(out / f"results_{spec}.h5")
        assert len(table) == OBJECTS and table.merged
        # Every source was drawn from a GP with an error bar per point, so each
        # fit should run; "failed" or "bad_input" would be a pipeline fault.
        assert not np.isin(table.status, ("failed", "bad_input")).any()
        assert table.config["model"].startswith(spec) and table.config["clip"] == 5.0
        t, mean, std = ResultStore.read_prediction(out / f"results_{spec}.h5", first)
        assert t.size == mean.size == std.size == 300 and np.all(std > 0)
    with open(out / "recovered.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == OBJECTS and {"true_scale", "fitted_scale"} <= set(rows[0])
    bench = json.loads((out / "benchmark" / "report.json").read_text())
    # Kalman is exact for a Matern-3/2 kernel (the benchmark's reference policy),
    # and 128 inducing points cannot follow 150 one-day correlation lengths.
    assert bench["recommendation"]["choice"] == "kalman"
    with np.load(out / "long_series.npz") as long:
        assert long["t"].size == LONG_POINTS
    for png in ("objects.png", "recovered.png", "benchmark/accuracy_vs_time.png"):
        data = (out / png).read_bytes()
        assert data[:8] == PNG_SIGNATURE and len(data) < 400_000


def test_demo_recovers_matern32_hyperparameters(demo):
    """Median ln(fitted / true) within ±0.3 for well-sampled Matérn-3/2 sources.

    Justification. A series spanning ``N = span / scale`` correlation lengths
    holds about N independent stretches; a scale estimated from them carries
    a finite-span bias of order 1/N (as the variance estimated from N samples
    does) and a scatter of order 1/sqrt(N). We keep sources with N >= 5
    (bias at most about 0.2 in ln) whose true amplitude is at least their
    median error bar (variability detectable at all). The class median over
    K sources has a standard error of about 1.25 sigma / sqrt(K); with the
    per-object sigma of 0.15-0.25 seen in the full demo and K of about 40 in
    this reduced run, that is 0.03-0.05. Bias plus three standard errors
    stays within 0.3.
    """
    out, _ = demo
    truth = read_truth(out / "campaign.h5")
    amp, scale, _ = _fitted(out, "matern32", truth)
    with SurveyFile(out / "campaign.h5") as sf:
        objects = [o for b in sf.iter_batches(256) for o in b]
    med_err = np.array([np.median(o.err) for o in objects])
    span = np.array([np.ptp(o.t) for o in objects])
    good = (truth["kernel"] == "matern32") & (span / truth["scale"] >= 5) \
        & (truth["amplitude"] >= med_err) & np.isfinite(scale)
    for name in ("flickering", "wandering"):
        sel = good & (truth["class"] == name)
        assert sel.sum() >= 25, f"{name}: only {sel.sum()} well-sampled sources"
        for label, fitted in (("scale", scale), ("amplitude", amp)):
            ratio = np.median(np.log(fitted[sel] / truth[label][sel]))
            assert abs(ratio) <= 0.3, f"{name}: median ln({label} ratio) = {ratio:+.3f}"


def test_demo_prefers_the_true_kernel_for_matern32_sources(demo):
    """The Matérn-3/2 fit wins on log marginal likelihood for at least 75 % of its sources.

    Source: the full demo (1,000 sources) measured 91 % and 97 % for the two
    Matérn-3/2 classes; with about 110 sources here the binomial standard
    error is about 3 %, so 75 % is more than four standard errors below.
    """
    out, _ = demo
    truth = read_truth(out / "campaign.h5")
    lml32 = _fitted(out, "matern32", truth)[2]
    lml12 = _fitted(out, "matern12", truth)[2]
    sel = (truth["kernel"] == "matern32") & np.isfinite(lml32) & np.isfinite(lml12)
    won = np.mean(lml32[sel] > lml12[sel])
    assert won >= 0.75, f"matern32 preferred for only {100 * won:.0f} % of its sources"
