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
