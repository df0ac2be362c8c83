"""Hyperparameters (``params.py``): values, coordinates, bounds, priors and bad input."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from conftest import central_difference
from scipy.stats import norm

from longwave import LogNormal, Normal, Param, fixed
from longwave.params import as_param


# --- coordinates -----------------------------------------------------------------
@pytest.mark.parametrize("positive, value, coordinate", [
    (True, 2.0, math.log(2.0)),
    (None, 0.5, math.log(0.5)),   # unattached: counts as positive
    (False, -3.0, -3.0),
    (False, 0.0, 0.0),
])
def test_coordinate_round_trip(positive, value, coordinate):
    p = Param(value, positive=positive)
    assert p.coordinate == pytest.approx(coordinate, rel=1e-15)
    assert p.with_coordinate(p.coordinate).value == pytest.approx(value, rel=1e-15)
    moved = p.with_coordinate(coordinate + 1.0)
    expected = value * math.e if positive is not False else value + 1.0
    assert moved.value == pytest.approx(expected, rel=1e-15)
    assert p.value == value  # immutable: with_coordinate returns a new object


def test_coordinate_bounds():
    assert Param(1.0, bounds=(0.1, 10.0), positive=True).coordinate_bounds() == pytest.approx(
        (math.log(0.1), math.log(10.0)))
    assert Param(1.0, bounds=(None, 10.0), positive=True).coordinate_bounds()[0] is None
    assert Param(0.0, bounds=(-2, None), positive=False).coordinate_bounds() == (-2.0, None)


def test_value_becomes_float_and_param_is_frozen():
    p = Param(3)
    assert isinstance(p.value, float) and p.value == 3.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        p.value = 4.0


def test_fixed_shorthand():
    assert fixed(2.5) == Param(2.5, fixed=True)
    assert fixed(-1.0).fixed  # a location value is fine until it fills a positive slot


def test_as_param_names_and_sets_positivity():
    p = as_param(1.5, "kernel.scale")
    assert (p.value, p.name, p.positive, p.fixed) == (1.5, "kernel.scale", True, False)
    m = as_param(Param(-0.5, fixed=True), "mean", positive=False)
    assert (m.value, m.name, m.positive, m.fixed) == (-0.5, "mean", False, True)
    assert as_param(np.float32(2.0), "a").value == 2.0
    assert as_param(np.int64(2), "a").value == 2.0


# --- bad input ----------------------------------------------------------------
@pytest.mark.parametrize("make, words", [
    (lambda: Param(float("nan")), ["must be finite", "nan"]),
    (lambda: Param(float("inf"), positive=False), ["must be finite", "inf"]),
    (lambda: Param(-1.0, positive=True), ["must be positive", "-1.0", "logarithm"]),
    (lambda: Param(0.0, positive=True), ["must be positive", "0.0"]),
    (lambda: Param(1.0, bounds=(2.0, 1.0)), ["lower bound 2.0", "not below upper bound 1.0"]),
    (lambda: Param(1.0, bounds=(1.0, 1.0)), ["not below upper bound"]),
    (lambda: Param(1.0, bounds=(0.0, 2.0), positive=True), ["lower bound must be positive", "0.0"]),
    (lambda: Param(5.0, bounds=(0.1, 2.0)), ["value 5.0", "outside its bounds", "(0.1, 2.0)"]),
    (lambda: Param(-5.0, bounds=(-2.0, 2.0), positive=False), ["value -5.0", "outside"]),
    (lambda: as_param(-2.0, "matern32.scale"), ["'matern32.scale'", "must be positive"]),
    (lambda: as_param(Param(-2.0), "excess_noise"), ["'excess_noise'", "must be positive"]),
    (lambda: as_param(Param(1.0, bounds=(-1.0, 2.0)), "k.scale"),
     ["'k.scale'", "lower bound must be positive"]),
], ids=["nan", "inf", "negative", "zero", "bounds-reversed", "bounds-equal",
        "bound-not-positive", "above-bounds", "below-bounds", "named-negative",
        "named-param-negative", "named-bound-not-positive"])
def test_bad_values_raise_clear_errors(make, words):
    with pytest.raises(ValueError) as info:
        make()
    for word in words:
        assert word in str(info.value)


@pytest.mark.parametrize("spec, shown", [(True, "bool"), ("1.0", "str"), (None, "NoneType"),
                                         ([1.0], "list")])
def test_as_param_rejects_non_numbers_with_an_example(spec, shown):
    with pytest.raises(TypeError) as info:
        as_param(spec, "matern32.scale")
    for word in ["'matern32.scale'", "must be a number or a longwave.Param", shown,
                 "matern32.scale=1.5"]:
        assert word in str(info.value)


@pytest.mark.parametrize("make, words", [
    (lambda: LogNormal(median=0.0, width=1.0), ["median", "positive", "0.0"]),
    (lambda: LogNormal(median=1.0, width=-1.0), ["width", "positive", "-1.0"]),
    (lambda: LogNormal(median=float("inf"), width=1.0), ["median", "finite"]),
    (lambda: Normal(loc=0.0, scale=0.0), ["scale", "positive"]),
    (lambda: Normal(loc=0.0, scale=float("nan")), ["scale", "finite"]),
])
def test_bad_priors_raise(make, words):
    with pytest.raises(ValueError) as info:
        make()
    for word in words:
        assert word in str(info.value)


# --- priors ----------------------------------------------------------------------
@pytest.mark.parametrize("coordinate", [-1.5, 0.0, 0.7, 3.0])
def test_lognormal_is_a_normal_density_in_log_value(coordinate):
    # source: scipy.stats.norm.logpdf of log(value) ~ N(log(median), width^2)
    prior = LogNormal(median=2.0, width=0.4)
    value, slope = prior.logpdf(coordinate)
    assert value == pytest.approx(norm(math.log(2.0), 0.4).logpdf(coordinate), rel=1e-13)
    numeric = central_difference(lambda x: prior.logpdf(x[0])[0], [coordinate])[0]
    assert slope == pytest.approx(numeric, rel=1e-8, abs=1e-10)


@pytest.mark.parametrize("coordinate", [-4.0, -1.0, 0.0, 2.5])
def test_normal_prior_density(coordinate):
    # source: scipy.stats.norm.logpdf
    prior = Normal(loc=-1.0, scale=1.5)
    value, slope = prior.logpdf(coordinate)
    assert value == pytest.approx(norm(-1.0, 1.5).logpdf(coordinate), rel=1e-13)
    assert slope == pytest.approx(-(coordinate + 1.0) / 1.5**2, rel=1e-14, abs=1e-15)
