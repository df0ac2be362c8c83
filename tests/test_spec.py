"""Model specification language and TOML model files (longwave.survey.spec, .modelfile).

Sources of the expected values: the grammar in the spec module's docstring
(our own design), the parameter naming of longwave.Model, and the
starting-value rules documented in longwave.survey.initial.
"""

from __future__ import annotations

import math

import pytest

from longwave.kernels import Matern12, Matern32, Matern52, Product, Sum
from longwave.survey import (
    DataScales,
    ParamSpec,
    SpecError,
    build_model,
    kernel_registry,
    load_model_file,
    param_names,
    parse_spec,
)
from longwave.survey.modelfile import ModelFileError

ROUND_TRIP = [
    "matern32",
    "matern32(scale=20 in [1, 500]) + matern12(amplitude=0.1, scale=fixed 3)",
    "matern52 * matern12(scale=auto in [100, inf]) with noise=none, mean=fixed 0",
    "(matern32 + matern12) * matern52(scale=fixed 400) with noise=0.02 in [1e-4, 1]",
    "matern32(amplitude=2.5e-3, scale=.5) with mean=-3.25 in [-10, inf]",
]


@pytest.mark.parametrize("text", ROUND_TRIP)
def test_canonical_text_parses_back_to_the_same_spec(text):
    # The canonical text is what result files store and resume compares.
    spec = parse_spec(text)
    assert parse_spec(spec.text) == spec


def test_values_bounds_and_fixed_flags_are_read():
    spec = parse_spec("matern32(scale=20 in [1, 500]) + matern12(amplitude=0.1, scale=fixed 3)"
                      " with noise=fixed 0.05, mean=2 in [-1, 5]")
    first, second = spec.terms()
    assert first.kernel == "matern32"
    assert first.param("scale") == ParamSpec(20.0, 1.0, 500.0, False)
    assert first.param("amplitude") == ParamSpec()  # left out: from the data
    assert second.param("amplitude") == ParamSpec(0.1)
    assert second.param("scale") == ParamSpec(3.0, fixed=True)
    assert spec.noise == ParamSpec(0.05, fixed=True)
    assert spec.mean == ParamSpec(2.0, -1.0, 5.0)


def test_inf_opens_a_bound_and_noise_none_drops_the_excess_noise():
    spec = parse_spec("matern12(scale=auto in [100, inf]) with noise=none, mean=auto in [-inf, 3]")
    assert spec.terms()[0].param("scale").bounds == (100.0, None)
    assert spec.mean.bounds == (None, 3.0)
    assert spec.noise is None


def test_precedence_product_binds_tighter_than_sum():
    # Common practice in arithmetic notation: a + b * c == a + (b * c).
    spec = parse_spec("matern12 + matern32 * matern52")
    assert spec.kernel.op == "+"
    assert spec.kernel.parts[1].op == "*"
    grouped = parse_spec("(matern12 + matern32) * matern52")
    assert grouped.kernel.op == "*" and grouped.kernel.parts[0].op == "+"


def test_nested_sums_flatten_like_kernel_sums():
    # longwave.kernels stores (a + b) + c as one Sum of three parts.
    assert len(parse_spec("matern12 + (matern32 + matern52)").kernel.parts) == 3


def _caret_column(exc: SpecError) -> int:
    lines = str(exc).splitlines()
    return lines[2].index("^") - 4


ERRORS = [
    # (specification, column of the caret, words the message must contain)
    ("matern31(scale=2)", 0, "did you mean 'matern32'"),
    ("matern32(scale 20)", 15, "expected '='"),
    ("matern32(scale=-1)", 15, "must be positive"),
    ("matern32(scale=2 in [5, 1])", 20, "not below upper bound"),
    ("matern32 + ", 11, "expected a kernel name"),
    ("matern32(scael=3)", 9, "did you mean 'scale'"),
    ("matern32 with nois=1", 14, "expected 'noise' or 'mean'"),
    ("matern32 $ 3", 9, "unexpected character '$'"),
    ("", 0, "empty"),
    ("matern32(scale=20 in [0, 5])", 22, "lower bound must be > 0"),
    ("matern32(scale=2, scale=3)", 18, "given twice"),
    ("matern32(scale=600 in [1, 500])", 15, "outside its bounds"),
    ("matern32 matern12", 9, "expected '+', '*' or 'with'"),
    ("(matern32 + matern12", 20, "to close the parenthesis"),
    ("matern32(scale=inf)", 15, "finite"),
    ("matern32(scale=20 in [1 500])", 24, "between the bounds"),
]


@pytest.mark.parametrize("text, column, words", ERRORS)
def test_errors_point_at_the_offending_character(text, column, words):
    with pytest.raises(SpecError) as info:
        parse_spec(text)
    assert info.value.column == column
    assert _caret_column(info.value) == column
    assert words in str(info.value)
    assert str(info.value).splitlines()[1] == "    " + text


def test_error_shows_a_good_example_beside_the_bad_one():
    with pytest.raises(SpecError) as info:
        parse_spec("matern32(scale 20)")
    assert "for example: matern32(scale=20)" in str(info.value)


def test_parameter_without_a_data_default_must_be_written():
    # A period cannot be guessed from the data (see AUTO_PARAMS in initial.py).
    registry = kernel_registry()
    needy = [name for name, cls in registry.items()
             if any(p not in ("amplitude", "scale") for p in cls.param_names_local)]
    if not needy:
        pytest.skip("no exported kernel has a parameter without a data default")
    with pytest.raises(SpecError, match="needs a value for"):
        parse_spec(needy[0])


def test_registry_reads_the_kernels_package():
    registry = kernel_registry()
    assert registry["matern12"] is Matern12
    assert registry["matern32"] is Matern32
    assert registry["matern52"] is Matern52
    assert "sum" not in registry and "primitive" not in registry


def test_spec_must_be_a_string():
    with pytest.raises(TypeError, match="is a string"):
        parse_spec(3.0)


# --- building models ------------------------------------------------------------


def test_build_names_follow_the_model_convention():
    names = param_names(parse_spec("matern32 + matern32(scale=fixed 5)"))
    assert names == ["matern32.amplitude", "matern32.scale", "matern32_2.amplitude",
                     "matern32_2.scale", "mean", "excess_noise"]
    assert param_names(parse_spec("matern32 with noise=none")) == [
        "matern32.amplitude", "matern32.scale", "mean"]


def test_build_starting_values_from_the_data_scales():
    # Rules from longwave.survey.initial's docstring.
    scales = DataScales(mean=3.0, std=2.0, step=0.5, span=200.0, white=0.4, err2=0.09)
    model = build_model(parse_spec("matern32 + matern12"), scales)
    assert isinstance(model.kernel, Sum)
    v = model.values()
    # Two terms share the variance: each std * sqrt(1/2).
    assert v["matern32.amplitude"] == pytest.approx(2.0 / math.sqrt(2))
    # Log-spaced at 1/3 and 2/3 of [step, span].
    assert v["matern32.scale"] == pytest.approx(0.5 * 400.0 ** (1 / 3))
    assert v["matern12.scale"] == pytest.approx(0.5 * 400.0 ** (2 / 3))
    assert v["mean"] == 3.0
    assert v["excess_noise"] == pytest.approx(math.sqrt(0.16 - 0.09))
    assert model.params[1].bounds == (0.05, 2000.0)


def test_build_single_scale_starts_at_the_geometric_mean():
    scales = DataScales(mean=0.0, std=1.0, step=1.0, span=100.0, white=0.5, err2=0.0)
    model = build_model(parse_spec("matern32"), scales)
    assert model.values()["matern32.scale"] == pytest.approx(10.0)


def test_build_products_keep_one_free_amplitude():
    model = build_model(parse_spec("matern32 * matern12"), DataScales.unit())
    assert isinstance(model.kernel, Product)
    amp2 = model.params[2]
    assert amp2.name == "matern12.amplitude" and amp2.fixed and amp2.value == 1.0
    assert not model.params[0].fixed


def test_build_written_values_win_and_auto_respects_written_bounds():
    spec = parse_spec("matern32(amplitude=0.3, scale=auto in [50, 80])")
    model = build_model(spec, DataScales.unit())  # data scale would start at 10
    v = model.values()
    assert v["matern32.amplitude"] == 0.3
    assert v["matern32.scale"] == pytest.approx(math.sqrt(50 * 80))
    assert model.params[1].bounds == (50.0, 80.0)


# --- TOML model files -----------------------------------------------------------


def test_toml_tables_give_the_same_spec_as_the_string(tmp_path):
    path = tmp_path / "model.toml"
    path.write_text(
        '[[term]]\nkernel = "matern32"\nscale = { value = 20.0, bounds = [1.0, 500.0] }\n\n'
        '[[term]]\nproduct = [\n'
        '  { kernel = "matern52", scale = { value = 40.0, fixed = true } },\n'
        '  { kernel = "matern12", scale = { value = "auto", bounds = [50.0, inf] } },\n]\n\n'
        '[noise]\nvalue = "auto"\nbounds = [1e-4, 1.0]\n\n[mean]\nvalue = 0.0\nfixed = true\n'
    )
    expected = parse_spec(
        "matern32(scale=20 in [1, 500]) + matern52(scale=fixed 40) * "
        "matern12(scale=auto in [50, inf]) with noise=auto in [1e-4, 1], mean=fixed 0")
    assert load_model_file(path) == expected


def test_toml_kernel_string_form(tmp_path):
    path = tmp_path / "model.toml"
    path.write_text('kernel = "matern32 + matern12"\nnoise = "none"\n')
    assert load_model_file(path) == parse_spec("matern32 + matern12 with noise=none")


@pytest.mark.parametrize("body, words", [
    ('kernel = "matern31"\n', "did you mean 'matern32'"),
    ('[[term]]\nkernel = "matern32"\nscale = { value = 2, bound = [1, 3] }\n', "bound"),
    ('[[term]]\nkernel = "matern32"\nscale = true\n', "term[0].scale"),
    ('colour = "red"\nkernel = "matern32"\n', "unknown key"),
    ('kernel = "matern32 with noise=none"\nnoise = "none"\n', "keep one"),
    ('[[term]]\nkernel = "matern32"\nscale = { value = 2, bounds = [1] }\n', "two numbers"),
    ('kernel = "matern32"\n[[term]]\nkernel = "matern12"\n', "exactly one"),
    ('kernel = \n', "not valid TOML"),
])
def test_toml_errors_name_the_key(tmp_path, body, words):
    path = tmp_path / "bad.toml"
    path.write_text(body)
    with pytest.raises(ModelFileError) as info:
        load_model_file(path)
    assert words in str(info.value)
    assert str(path) in str(info.value)


def test_missing_model_file(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist"):
        load_model_file(tmp_path / "absent.toml")
