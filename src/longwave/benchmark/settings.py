"""Method settings to compare, written as short strings.

Grammar (one string per method; values separated by commas, options by colons)::

    NAME[:OPTION=VALUE[,VALUE...]][:OPTION=VALUE[,VALUE...]]...

``vfe:m=64,128,256`` gives three settings; ``fitc:m=64,128:placement=uniform,kmeans``
gives the four combinations. Options are the keyword arguments of the method's
constructor, so any method, present or future, is configured the same way;
``m`` is shorthand for ``inducing``. Names map to objects in
:func:`longwave.methods.resolve` only.

Options prefixed ``kernel.`` configure the model's kernels instead (see
:mod:`.kernel_options`): ``kalman:kernel.order=4,8,12`` compares state-space
orders of kernels whose form is an approximation.
"""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass, field

from ..methods import Method, resolve
from .kernel_options import PREFIX as KERNEL_PREFIX

#: Short option names accepted in setting strings, and the keyword they stand for.
ALIASES = {"m": "inducing"}

_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_KEY = re.compile(r"^(kernel\.)?[A-Za-z][A-Za-z0-9_]*$")

_EXAMPLE = "for example 'exact', 'kalman' or 'vfe:m=64,128,256:placement=uniform'"


@dataclass(frozen=True)
class Candidate:
    """One method at one setting.

    Attributes
    ----------
    label : str
        Canonical single-setting string, such as ``"vfe:m=64"``; re-parses to itself.
    name : str
        Method name as given (lower case).
    options : dict of str to int, float, bool or str
        Constructor keyword arguments, after aliases were expanded.
    method : Method
        The configured method object.
    kernel_options : dict
        Options for the model's kernels (``kernel.`` prefix removed).
    """

    label: str
    name: str
    options: dict
    method: Method
    kernel_options: dict = field(default_factory=dict)


def _convert(text: str):
    """Setting value from its text: int, then float, then bool, else the string."""
    for cast in (int, float):
        try:
            return cast(text)
        except ValueError:
            pass
    if text.lower() in ("true", "false"):
        return text.lower() == "true"
    return text


def _parse_one(spec: str) -> tuple[str, list[tuple[str, str, list]]]:
    if not isinstance(spec, str) or not spec.strip():
        raise ValueError(f"a method setting must be a non-empty string, got {spec!r}; {_EXAMPLE}")
    name, *chunks = spec.strip().split(":")
    if not _NAME.match(name):
        raise ValueError(
            f"malformed method setting {spec!r}: it must start with a method name, got "
            f"{name!r}; {_EXAMPLE}"
        )
    options, seen = [], set()
    for chunk in chunks:
        key, sep, values = chunk.partition("=")
        if not sep or not _KEY.match(key) or not values:
            raise ValueError(
                f"malformed method setting {spec!r}: each option must read KEY=VALUE[,VALUE...], "
                f"got {chunk!r}; {_EXAMPLE}"
            )
        parts = values.split(",")
        if any(not p.strip() for p in parts):
            raise ValueError(
                f"malformed method setting {spec!r}: empty value in {chunk!r}; separate values "
                "by single commas, as in m=64,128"
            )
        keyword = ALIASES.get(key, key)
        if keyword in seen:
            raise ValueError(
                f"malformed method setting {spec!r}: option {key!r} given twice; list all its "
                "values in one option, as in m=64,128"
            )
        seen.add(keyword)
        options.append((key, keyword, [_convert(p.strip()) for p in parts]))
    return name.lower(), options


def parse_methods(specs) -> list[Candidate]:
    """Expand setting strings into configured methods.

    Parameters
    ----------
    specs : str or sequence of str
        Setting strings (see the module docstring). A single string may hold
        several, separated by spaces.

    Returns
    -------
    list of Candidate
        In the order given, combinations in row-major order of the options.

    Raises
    ------
    ValueError
        On a malformed string, an unknown method or option, a value the method
        rejects, or a setting listed twice.

    Examples
    --------
    >>> [c.label for c in parse_methods("exact kalman exact:max_n=800,1600")]
    ['exact', 'kalman', 'exact:max_n=800', 'exact:max_n=1600']
    """
    if isinstance(specs, str):
        specs = specs.split()
    out: list[Candidate] = []
    labels = set()
    for spec in specs:
        name, options = _parse_one(spec)
        grids = [values for _, _, values in options]
        for combo in itertools.product(*grids):
            chosen = {kw: v for (_, kw, _), v in zip(options, combo)}
            kwargs = {k: v for k, v in chosen.items() if not k.startswith(KERNEL_PREFIX)}
            kernel_opts = {k[len(KERNEL_PREFIX):]: v for k, v in chosen.items()
                           if k.startswith(KERNEL_PREFIX)}
            label = ":".join([name] + [f"{k}={v}" for (k, _, _), v in zip(options, combo)])
            try:
                method = resolve(name, **kwargs)
            except (TypeError, ValueError) as exc:
                raise ValueError(f"method setting {label!r}: {exc}") from exc
            if label in labels:
                raise ValueError(f"method setting {label!r} is listed twice; list each once")
            labels.add(label)
            out.append(Candidate(label=label, name=name, options=kwargs, method=method,
                                 kernel_options=kernel_opts))
    if not out:
        raise ValueError(f"no method settings given; {_EXAMPLE}")
    return out
