"""Per-object pipeline (longwave.survey.pipeline, .validate): fit_object and fit_batch.

Reference values come from the library's own front functions (longwave.fit,
longwave.posterior) run on the same data with the same starting model, and
from data simulated with known hyperparameters (longwave.simulate).
"""

from __future__ import annotations

import numpy as np
import pytest

import longwave as lw
from longwave.kernels import Matern32
from longwave.simulate import simulate_series
from longwave.storage import ObjectData
from longwave.survey import (
    DataScales,
    PipelineConfig,
    build_model,
    choose_method,
    fit_batch,
    fit_object,
    parse_spec,
)
from longwave.survey import PredictionGrid as Grid

SPEC = parse_spec("matern32")


def _simulated(seed, n=400, scale=15.0, amplitude=1.0, noise=0.1, err=0.1):
    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0, 500, n))
    truth = lw.Model(Matern32(amplitude=amplitude, scale=scale), mean=0.5, excess_noise=noise)
    series, _ = simulate_series(truth, t, err=err, rng=rng)
    return series


def test_fit_object_equals_fit_with_the_same_start():
    s = _simulated(1)
    out = fit_object(s.t, s.y, s.err, model_spec=SPEC, id="a").result
    start = build_model(SPEC, DataScales.from_arrays(s.t, s.y, s.err))
    ref = lw.fit(start, s, "kalman")
    assert out.status == "ok" and out.method == "kalman" and out.id == "a"
    assert out.params == pytest.approx(ref.params, rel=1e-12)
    assert out.log_marginal_likelihood == pytest.approx(ref.log_marginal_likelihood, rel=1e-12)
    assert out.n == s.n and out.n_clipped == 0 and out.converged


def test_fit_object_recovers_simulated_hyperparameters():
    # 400 points over ~33 scales: scale and amplitude are known to about 20%
    # at one sigma (common practice: check recovery within a loose factor).
    s = _simulated(2, n=400, scale=15.0, amplitude=1.0)
    p = fit_object(s.t, s.y, s.err, model_spec=SPEC).result.params
    assert 15.0 / 1.6 < p["matern32.scale"] < 15.0 * 1.6
    assert 1 / 1.6 < p["matern32.amplitude"] < 1.6


def test_reduced_chi2_matches_its_definition():
    s = _simulated(3)
    out = fit_object(s.t, s.y, s.err, model_spec=SPEC).result
    model = build_model(SPEC, DataScales.from_arrays(s.t, s.y, s.err)).with_params(
        [lw.Param(v, positive=(k != "mean")) for k, v in out.params.items()])
    mean = lw.posterior(model, s).predict(s.t).mean
    noise = s.err**2 + out.params["excess_noise"] ** 2
    expected = np.sum((s.y - mean) ** 2 / noise) / (s.n - 4)
    assert out.reduced_chi2 == pytest.approx(expected, rel=1e-10)


def test_clipping_removes_injected_outliers_only():
    s = _simulated(4)
    y = s.y.copy()
    bad = [17, 200, 333]
    y[bad] += np.array([3.0, -4.0, 5.0])  # 30-50 sigma of the point noise
    clipped = fit_object(s.t, y, s.err, model_spec=SPEC, clip=5.0).result
    clean = fit_object(np.delete(s.t, bad), np.delete(y, bad), np.delete(s.err, bad),
                       model_spec=SPEC).result
    assert clipped.n_clipped == 3 and clipped.n == s.n - 3
    # The clipped fit ends on the same data as the clean fit (different start).
    assert clipped.params["matern32.scale"] == pytest.approx(
        clean.params["matern32.scale"], rel=1e-3)
    unclipped = fit_object(s.t, y, s.err, model_spec=SPEC).result
    assert unclipped.params["excess_noise"] > 1.5 * clipped.params["excess_noise"]


def test_grid_prediction_equals_the_posterior():
    s = _simulated(5)
    out = fit_object(s.t, s.y, s.err, model_spec=SPEC, grid=Grid(step=2.5))
    pred = out.prediction
    assert pred.t[0] == s.t[0] and pred.t[-1] <= s.t[-1] < pred.t[-1] + 2.5
    assert np.allclose(np.diff(pred.t), 2.5)
    start = build_model(SPEC, DataScales.from_arrays(s.t, s.y, s.err))
    ref_model = lw.fit(start, s).model
    ref = lw.posterior(ref_model, s).predict(pred.t)
    assert np.allclose(pred.mean, ref.mean, rtol=1e-9, atol=1e-12)
    assert np.allclose(pred.std, ref.std, rtol=1e-9, atol=1e-12)


def test_grid_count_and_oversized_grid_is_skipped_not_fatal():
    s = _simulated(6, n=50)
    out = fit_object(s.t, s.y, s.err, model_spec=SPEC, grid=Grid(count=7))
    assert out.prediction.t.size == 7
    huge = fit_object(s.t, s.y, s.err, model_spec=SPEC, grid=Grid(step=1e-3, max_points=1000))
    assert huge.prediction is None and huge.result.status == "ok"
    assert "prediction skipped" in huge.result.message


MALFORMED = [
    # (t, y, err, words of the reason)
    ([0.0, 1.0, np.nan, 3.0], [1.0, 2.0, 3.0, 4.0], 0.1, "t has 1 non-finite"),
    ([0.0, 1.0, 2.0, 3.0], [1.0, np.nan, 3.0, np.inf], 0.1, "y has 2 non-finite"),
    ([0.0, 1.0, 2.0, 3.0], [1.0, 2.0, 0.0, 4.0], [0.1, 0.0, 0.1, 0.1], "err has 1 value(s) <= 0"),
    ([5.0], [1.0], [0.1], "only 1 point(s)"),
    ([], [], None, "only 0 point(s)"),
    ([1.0, 1.0, 1.0], [1.0, 2.0, 3.0], 0.1, "share the time"),
    ([1.0, 2.0, 3.0], [4.0, 4.0, 4.0], 0.1, "no variability"),
    ([1.0, 2.0, 3.0], [1.0, 2.0], 0.1, "differ in length"),
    ([[1.0, 2.0], [3.0, 4.0]], [1.0, 2.0], None, "one-dimensional"),
    (["a", "b", "c"], [1.0, 2.0, 3.0], None, "not numeric"),
]


@pytest.mark.parametrize("t, y, err, words", MALFORMED)
def test_malformed_objects_are_recorded_with_their_reason(t, y, err, words):
    out = fit_object(t, y, err, model_spec=SPEC, id="broken")
    assert out.result.status == "bad_input"
    assert words in out.result.message
    assert out.result.id == "broken" and out.prediction is None


def test_unsorted_with_duplicates_is_fitted_as_sorted():
    s = _simulated(7, n=120)
    rng = np.random.default_rng(7)
    t, y, err = s.t.copy(), s.y.copy(), s.err.copy()
    t[10] = t[11]  # a repeated time
    order = rng.permutation(t.size)
    shuffled = fit_object(t[order], y[order], err[order], model_spec=SPEC).result
    ordered = fit_object(t, y, err, model_spec=SPEC).result
    assert shuffled.status == "ok"
    assert "not sorted" in shuffled.message and "1 repeated time" in shuffled.message
    assert shuffled.params == pytest.approx(ordered.params, rel=1e-9)


def test_an_impossible_fit_is_failed_not_raised():
    # No error bars and no excess noise: the covariance is singular (methods.base).
    out = fit_object([0.0, 1.0, 2.0, 3.0], [0.0, 1.0, 0.5, 0.2],
                     model_spec="matern32 with noise=none").result
    assert out.status == "failed"
    assert "no error bars" in out.message and "ValueError" in out.message


@pytest.mark.parametrize("kwargs, error", [
    ({"clip": -1.0}, "clip must be a positive"),
    ({"method": "fastest"}, "unknown inference method"),
    ({"model_spec": "matern99"}, "unknown kernel"),
])
def test_bad_settings_raise(kwargs, error):
    args = {"model_spec": SPEC, **kwargs}
    with pytest.raises(ValueError, match=error):
        fit_object([0.0, 1.0, 2.0], [1.0, 0.0, 2.0], 0.1, **args)


def test_unknown_keyword_is_rejected():
    with pytest.raises(TypeError):
        fit_object([0.0, 1.0, 2.0], [1.0, 0.0, 2.0], model_spec=SPEC, sigma_clip=3)


@pytest.mark.parametrize("text, n, expected", [
    ("matern32 + matern12", 100_000, "kalman"),   # exact state-space form, any n
    ("periodic(period=3)", 500, "exact"),         # approximate form, small n
    ("squared_exp", 1500, "exact"),
])
def test_auto_method_choice(text, n, expected):
    model = build_model(parse_spec(text), DataScales.unit())
    assert choose_method(model, n).name == expected


def test_auto_choice_is_recorded_per_object():
    s = _simulated(8, n=60)
    out = fit_object(s.t, s.y, s.err, model_spec="squared_exp").result
    assert out.method == "exact"


@pytest.mark.parametrize("kwargs, error", [
    ({}, "exactly one of step and count"),
    ({"step": 1.0, "count": 5}, "exactly one"),
    ({"step": 0.0}, "positive and finite"),
    ({"count": 1}, "whole number >= 2"),
])
def test_grid_settings_are_checked(kwargs, error):
    with pytest.raises(ValueError, match=error):
        Grid(**kwargs)


def test_fit_batch_equals_fit_object_per_object():
    objects = []
    for k in range(3):
        s = _simulated(10 + k, n=80)
        objects.append(ObjectData(id=f"o{k}", t=s.t, y=s.y, err=s.err))
    objects.append(ObjectData(id="bad", t=np.array([1.0]), y=np.array([2.0]), err=None))
    config = PipelineConfig(model=SPEC, clip=6.0, grid=Grid(count=5))
    batch = fit_batch(objects, config)
    assert [f.result.id for f in batch] == ["o0", "o1", "o2", "bad"]
    for obj, got in zip(objects, batch):
        ref = fit_object(obj.t, obj.y, obj.err, model_spec=SPEC, clip=6.0, grid=Grid(count=5),
                         id=obj.id)
        assert got.result.status == ref.result.status
        assert got.result.params == pytest.approx(ref.result.params, rel=1e-12)
    assert batch[-1].result.status == "bad_input"


def test_config_description_is_json_and_names_the_model():
    import json

    config = PipelineConfig(model=parse_spec("matern32 with noise=none"), grid=Grid(step=0.5))
    described = json.loads(json.dumps(config.describe()))
    assert described["model"] == "matern32 with mean=auto, noise=none"
    assert described["grid"]["step"] == 0.5


def test_auto_goes_sparse_for_long_series_without_an_exact_form():
    # Above AUTO_EXACT_MAX_N without an exact state-space form: VFE, whose
    # certified bounds give the recorded gap (longwave.methods.sparse).
    rng = np.random.default_rng(12)
    t = np.sort(rng.uniform(0, 200, 2100))
    y = np.sin(t / 7) + 0.1 * rng.standard_normal(t.size)
    out = fit_object(t, y, 0.1, model_spec="squared_exp", inducing=16).result
    assert out.method == "vfe" and out.status in ("ok", "not_converged")
    assert np.isfinite(out.bound_gap) and out.bound_gap >= 0
