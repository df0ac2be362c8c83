"""The same models as the specification language, written as a TOML file.

Either one string in the specification language::

    kernel = "matern32(scale=20 in [1, 500]) + matern12"

or the terms of a sum spelled out as tables (a ``product`` lists factors)::

    [[term]]
    kernel = "matern32"
    amplitude = 1.0                                 # a number: starting value
    scale = { value = 20.0, bounds = [1.0, 500.0] }

    [[term]]
    product = [
      { kernel = "matern52", scale = { value = 40.0, fixed = true } },
      { kernel = "matern12", scale = { value = "auto", bounds = [50.0, inf] } },
    ]

    [noise]            # or at the top: noise = "none"
    value = "auto"
    bounds = [1e-4, 1.0]

    [mean]
    value = 0.0
    fixed = true

A parameter is a number, ``"auto"``, or a table with ``value`` (number or
``"auto"``), ``bounds`` (two numbers; ``inf`` and ``-inf`` leave a side
open) and ``fixed`` (bool). Both forms turn into the same
:class:`~longwave.survey.spec.ModelSpec`, checked by the same parser: each
table is rewritten in the specification language and parsed, so the rules
(and error messages, with a caret) are the same in both.
"""

from __future__ import annotations

import math
import re
import tomllib
from pathlib import Path

from .spec import ModelSpec, SpecError, _number_text, parse_spec

_PARAM_KEYS = {"value", "bounds", "fixed"}


class ModelFileError(ValueError):
    """A model file that does not describe a model; the message names the key."""


def _fail(path, where: str, problem: str, example: str):
    raise ModelFileError(f"{path}: {where}: {problem}\nfor example:\n    {example}")


def _param_text(path, where: str, value) -> str:
    """A TOML parameter (number, "auto" or table) in the specification language."""
    if isinstance(value, bool):
        _fail(path, where, f"must be a number, \"auto\" or a table, got {value!r}",
              "scale = { value = 20.0, bounds = [1.0, 500.0], fixed = false }")
    if isinstance(value, (int, float)):
        return _number_text(float(value))
    if value == "auto":
        return "auto"
    if not isinstance(value, dict):
        _fail(path, where, f"must be a number, \"auto\" or a table, got {value!r}",
              "scale = 20.0")
    unknown = sorted(set(value) - _PARAM_KEYS)
    if unknown:
        _fail(path, where, f"unknown key(s) {unknown}; a parameter table takes "
              f"{sorted(_PARAM_KEYS)}", "scale = { value = 20.0, bounds = [1.0, 500.0] }")
    fixed = value.get("fixed", False)
    if not isinstance(fixed, bool):
        _fail(path, f"{where}.fixed", f"must be true or false, got {fixed!r}",
              "scale = { value = 3.0, fixed = true }")
    text = ("fixed " if fixed else "") + _param_text(path, f"{where}.value",
                                                     value.get("value", "auto"))
    if "bounds" in value:
        b = value["bounds"]
        if (not isinstance(b, list) or len(b) != 2
                or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in b)):
            _fail(path, f"{where}.bounds", f"must be two numbers [lower, upper], got {b!r}",
                  "scale = { value = 20.0, bounds = [1.0, inf] }")
        lo, hi = (float(x) for x in b)
        lo_text = "-inf" if lo == -math.inf else _number_text(lo)
        text += f" in [{lo_text}, {_number_text(hi)}]"
    return text


def _kernel_text(path, where: str, table) -> str:
    if not isinstance(table, dict):
        _fail(path, where, f"must be a table, got {table!r}", '{ kernel = "matern32" }')
    if "product" in table:
        if set(table) != {"product"}:
            _fail(path, where, "a product term holds only the key 'product'",
                  'product = [{ kernel = "matern52" }, { kernel = "matern12" }]')
        factors = table["product"]
        if not isinstance(factors, list) or len(factors) < 2:
            _fail(path, f"{where}.product", "must list two or more factor tables",
                  'product = [{ kernel = "matern52" }, { kernel = "matern12" }]')
        return "(" + " * ".join(_kernel_text(path, f"{where}.product[{i}]", f)
                                for i, f in enumerate(factors)) + ")"
    name = table.get("kernel")
    if not isinstance(name, str):
        _fail(path, where, "needs kernel = \"<name>\" (or product = [...])",
              '[[term]]\n    kernel = "matern32"')
    args = [f"{k}={_param_text(path, f'{where}.{k}', v)}" for k, v in table.items()
            if k != "kernel"]
    return f"{name}({', '.join(args)})" if args else name


def spec_from_toml(data: dict, path="model file") -> ModelSpec:
    """A :class:`ModelSpec` from a parsed TOML document (see the module docstring)."""
    allowed = {"kernel", "term", "noise", "mean"}
    unknown = sorted(set(data) - allowed)
    if unknown:
        _fail(path, "top level", f"unknown key(s) {unknown}; allowed: {sorted(allowed)}",
              'kernel = "matern32 + matern12"')
    if ("kernel" in data) == ("term" in data):
        _fail(path, "top level", "give either kernel = \"...\" or [[term]] tables, "
              "exactly one of them", 'kernel = "matern32 + matern12"')
    if "kernel" in data:
        if not isinstance(data["kernel"], str):
            _fail(path, "kernel", "must be a string in the specification language",
                  'kernel = "matern32(scale=20 in [1, 500])"')
        expression = data["kernel"]
    else:
        terms = data["term"]
        if not isinstance(terms, list) or not terms:
            _fail(path, "term", "must be one or more [[term]] tables",
                  '[[term]]\n    kernel = "matern32"')
        expression = " + ".join(_kernel_text(path, f"term[{i}]", t) for i, t in enumerate(terms))
    options = []
    if "mean" in data:
        options.append(f"mean={_param_text(path, 'mean', data['mean'])}")
    if "noise" in data:
        noise = data["noise"]
        options.append("noise=none" if noise == "none"
                       else f"noise={_param_text(path, 'noise', noise)}")
    if options and re.search(r"\bwith\b", expression):
        _fail(path, "top level", "mean or noise is given both inside kernel = \"... with "
              "...\" and as a key; keep one", 'kernel = "matern32"\n    noise = "none"')
    text = expression + (" with " + ", ".join(options) if options else "")
    try:
        return parse_spec(text)
    except SpecError as exc:
        raise ModelFileError(f"{path}: the model it describes reads\n{exc}") from exc


def load_model_file(path) -> ModelSpec:
    """Read a model from a TOML file.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    ModelSpec

    Raises
    ------
    ModelFileError
        Naming the file and the offending key, with an example of a good one;
        TOML syntax errors keep tomllib's line and column.
    """
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise FileNotFoundError(f"model file {path} does not exist") from None
    except tomllib.TOMLDecodeError as exc:
        raise ModelFileError(f"{path}: not valid TOML: {exc}") from exc
    return spec_from_toml(data, path)
