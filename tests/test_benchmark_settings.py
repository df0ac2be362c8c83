"""Setting strings of the benchmark runner: expansion, canonical labels, errors.

Sources: the grammar in longwave.benchmark.settings; error wording follows
the project's style rule (state the rule, the value received and the fix).
"""

import pytest

from longwave.benchmark import parse_methods
from longwave.methods import Exact, Kalman


def test_grid_expands_in_row_major_order_with_canonical_labels():
    cands = parse_methods(["kalman", "exact:max_n=800,1600:jitter=0,1e-9"])
    assert [c.label for c in cands] == [
        "kalman",
        "exact:max_n=800:jitter=0",
        "exact:max_n=800:jitter=1e-09",
        "exact:max_n=1600:jitter=0",
        "exact:max_n=1600:jitter=1e-09",
    ]
    assert isinstance(cands[0].method, Kalman)
    assert isinstance(cands[3].method, Exact)
    assert cands[3].method.describe() == {"name": "exact", "max_n": 1600, "jitter": 0.0}
    assert cands[2].options == {"max_n": 800, "jitter": 1e-9}


def test_a_label_parses_back_to_the_same_setting():
    first = parse_methods("exact:max_n=1200:jitter=1e-08")[0]
    again = parse_methods(first.label)[0]
    assert again.label == first.label
    assert again.method.describe() == first.method.describe()


def test_one_string_may_hold_several_space_separated_settings():
    assert [c.label for c in parse_methods("exact  kalman")] == ["exact", "kalman"]


def test_m_is_shorthand_for_inducing():
    # Exact takes no inducing points, so the error shows the expanded keyword.
    with pytest.raises(ValueError, match=r"does not take options \['inducing'\]"):
        parse_methods("exact:m=64")


@pytest.mark.parametrize(
    "spec, message",
    [
        ("vfe:m", "each option must read KEY=VALUE"),
        ("exact:max_n=", "each option must read KEY=VALUE"),
        (":max_n=3", "must start with a method name"),
        ("3exact", "must start with a method name"),
        ("exact:max_n=1,,2", "empty value"),
        ("exact:max_n=100:max_n=200", "given twice"),
        ("nosuch", "unknown inference method 'nosuch'"),
        ("exact:colour=blue", "its options are"),
        ("exact:max_n=-3", "max_n must be a positive integer"),
    ],
)
def test_malformed_or_impossible_settings_are_named_in_the_error(spec, message):
    with pytest.raises(ValueError, match=message) as info:
        parse_methods(spec)
    assert spec.split(":")[0] in str(info.value) or "method name" in str(info.value)


def test_a_setting_listed_twice_is_rejected():
    with pytest.raises(ValueError, match="listed twice"):
        parse_methods("exact kalman exact")


def test_no_settings_is_an_error():
    with pytest.raises(ValueError, match="no method settings given"):
        parse_methods([])


def test_kernel_options_are_kept_apart_from_method_options():
    cands = parse_methods("kalman:kernel.order=4,8")
    assert [c.label for c in cands] == ["kalman:kernel.order=4", "kalman:kernel.order=8"]
    assert cands[0].options == {} and cands[0].kernel_options == {"order": 4}


def test_kernel_options_rebuild_only_the_kernels_that_take_them():
    # Source: the SquaredExp docstring (its error bound falls with the order).
    from longwave import Model
    from longwave.benchmark.kernel_options import apply_kernel_options
    from longwave.kernels import Matern32, SquaredExp

    model = Model(Matern32(amplitude=1.0, scale=3.0) + SquaredExp(amplitude=0.5, scale=9.0),
                  excess_noise=0.1)
    low = apply_kernel_options(model, {"order": 3})
    high = apply_kernel_options(model, {"order": 10})
    assert low.names == model.names and low.values() == model.values()
    assert [k.order for k in low.kernel.leaves()] == [2, 3]  # Matérn-3/2 untouched
    assert high.kernel.covariance_error_bound() < low.kernel.covariance_error_bound()
    with pytest.raises(ValueError, match="no kernel of .* takes the option 'order'"):
        apply_kernel_options(Model(Matern32(amplitude=1.0, scale=3.0)), {"order": 4}, "x")
    with pytest.raises(ValueError, match="order must be a whole number"):
        apply_kernel_options(model, {"order": 99}, "kalman:kernel.order=99")
