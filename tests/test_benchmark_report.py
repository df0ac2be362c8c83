"""Report files of the benchmark runner and scaling mode: written, valid, reopenable.

Sources: JSON per RFC 8259 (no NaN; Python's json with allow_nan=False);
the PNG signature per the PNG specification (ISO/IEC 15948, section 5.2).
"""

import json

import matplotlib.image
import numpy as np
import pytest

from longwave import Model
from longwave.benchmark import parse_methods, run_benchmark, run_scaling
from longwave.benchmark.report import write_report, write_scaling_report
from longwave.kernels import Matern32
from longwave.simulate import simulate_series

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _assert_png(path):
    assert path.read_bytes()[:8] == PNG_SIGNATURE
    image = matplotlib.image.imread(path)
    assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100


@pytest.fixture(scope="module")
def small_run():
    truth = Model(Matern32(amplitude=1.0, scale=30.0), excess_noise=0.05)
    t = np.cumsum(np.random.default_rng(8).exponential(1.0, 300))
    series, _ = simulate_series(truth, t, err=0.1, rng=9)
    return run_benchmark(series, truth, parse_methods("kalman exact vfe:m=8,32"), fit=False)


def test_report_files_exist_and_reopen(small_run, tmp_path):
    files = write_report(small_run, tmp_path / "out", title="simulated")
    assert set(files) == {"json", "summary", "accuracy_plot", "overlay_plot", "scaling_plot"}
    with open(files["json"], encoding="utf-8") as fh:
        report = json.load(fh)  # strict: a NaN would have failed writing
    assert report["recommendation"]["choice"] == small_run.recommendation.choice
    assert [m["label"] for m in report["methods"]] == ["kalman", "exact", "vfe:m=8", "vfe:m=32"]
    assert report["methods"][0]["fit_seconds"] is None  # fitting was off: NaN -> null
    rows = {m["label"]: m for m in report["methods"]}
    front = [rows[label] for label in report["pareto_front"]]
    costs = [r["fit_seconds"] or r["evaluate_seconds"] + r["predict_seconds"] for r in front]
    assert costs == sorted(costs)
    assert all(a["mean_kl"] > b["mean_kl"] for a, b in zip(front, front[1:]))
    assert front[-1]["mean_kl"] == min(r["mean_kl"] for r in rows.values())
    assert report["reference"]["label"] == "kalman"
    assert len(report["cautions"]) == 3
    for key in ("accuracy_plot", "overlay_plot", "scaling_plot"):
        _assert_png(files[key])
    text = files["summary"].read_text(encoding="utf-8")
    assert text.startswith("simulated") and "overconfident" in text
    assert "fall back to the prior" in text or "falls back to the prior" in text
    assert "conditional on the kernel" in text


def test_scaling_mode_fits_exponents_and_stops_exact_at_its_limit(tmp_path):
    cands = parse_methods("kalman exact:max_n=2000")
    result = run_scaling(cands, sizes=[1000, 2000, 4000, 8000], seed=2, time_budget=1000.0)
    kalman, exact = result.curves
    assert [p.n for p in kalman.points] == [1000, 2000, 4000, 8000]
    assert [p.n for p in exact.points] == [1000, 2000]
    assert exact.stopped.startswith("refused at n=4000")
    # Common practice: timings on a shared machine are noisy; only the order is checked.
    assert kalman.time_exponent < 1.8
    assert exact.time_exponent > 1.5
    assert exact.memory_exponent == pytest.approx(2.0, abs=0.3)  # n-by-n matrices
    files = write_scaling_report(result, tmp_path)
    with open(files["json"], encoding="utf-8") as fh:
        report = json.load(fh)
    assert report["curves"][1]["stopped"].startswith("refused")
    _assert_png(files["time_plot"])
    _assert_png(files["memory_plot"])


def test_optional_hdf5_report_holds_the_same_figures(small_run, tmp_path):
    import h5py

    from longwave.storage.benchmark_report import read_report_hdf5

    files = write_report(small_run, tmp_path, hdf5=True)
    with open(files["json"], encoding="utf-8") as fh:
        from_json = json.load(fh)
    from_h5 = read_report_hdf5(files["hdf5"])
    assert from_h5["recommendation"] == from_json["recommendation"]
    assert from_h5["methods"] == from_json["methods"]
    with h5py.File(files["hdf5"], "r") as f:
        assert f.attrs["longwave_format"] == "benchmark_report"
        labels = [s.decode() for s in f["methods/label"][:]]
        assert labels == [m["label"] for m in from_json["methods"]]
        kl = f["methods/mean_kl"][:]
        assert np.allclose(kl, [m["mean_kl"] for m in from_json["methods"]])
        assert np.all(np.isnan(f["methods/fit_seconds"][:]))  # null in JSON, NaN here
        assert "interpolation.nlpd" in f["methods"]
