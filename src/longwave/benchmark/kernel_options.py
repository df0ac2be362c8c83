"""Kernel options in a setting string: ``kalman:kernel.order=4,8`` and the like.

Some kernels take construction options that are not hyperparameters, such as
the order of an approximate state-space form. A setting option prefixed
``kernel.`` is applied to every kernel of the model whose constructor takes
that keyword; the model is otherwise unchanged (same hyperparameters, labels,
bounds and priors). The runner never needs to know which kernels take what:
the constructors' signatures say.
"""

from __future__ import annotations

import inspect

from ..kernels import Primitive
from ..model import Model

PREFIX = "kernel."


def _keywords(cls) -> set[str]:
    """Keyword-only construction options of a kernel class (not its hyperparameters)."""
    params = inspect.signature(cls.__init__).parameters.values()
    return {p.name for p in params if p.kind is p.KEYWORD_ONLY and p.name != "label"}


def _rebuild_leaf(leaf: Primitive, options: dict) -> Primitive:
    own = _keywords(type(leaf))
    wanted = {k: v for k, v in options.items() if k in own}
    if not wanted:
        return leaf
    kept = {k: getattr(leaf, k) for k in own - set(wanted) if hasattr(leaf, k)}
    values = dict(zip(leaf.param_names_local, leaf.params()))
    return type(leaf)(label=leaf.label, **kept, **wanted, **values)


def _rebuild(kernel, options: dict):
    if isinstance(kernel, Primitive):
        return _rebuild_leaf(kernel, options)
    return type(kernel)([_rebuild(part, options) for part in kernel.parts])


def accepted_options(kernel) -> dict[str, list[str]]:
    """Construction options the kernel's primitives take, with the classes taking each."""
    out: dict[str, list[str]] = {}
    for leaf in kernel.leaves():
        for key in sorted(_keywords(type(leaf))):
            out.setdefault(key, [])
            if type(leaf).__name__ not in out[key]:
                out[key].append(type(leaf).__name__)
    return out


def apply_kernel_options(model: Model, options: dict, label: str = "") -> Model:
    """The model with ``options`` applied to every kernel that takes them.

    Raises
    ------
    ValueError
        If no kernel of the model takes one of the options, or a kernel rejects
        a value; the message lists what the model's kernels do take.
    """
    if not options:
        return model
    accepted = accepted_options(model.kernel)
    for key in options:
        if key not in accepted:
            offer = ", ".join(f"{k} ({', '.join(v)})" for k, v in accepted.items()) or "none"
            raise ValueError(
                f"method setting {label!r}: no kernel of {model.kernel!r} takes the option "
                f"{key!r}; its kernels take: {offer}"
            )
    try:
        kernel = _rebuild(model.kernel, options)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"method setting {label!r}: {exc}") from exc
    return Model(kernel, mean=model.mean, excess_noise=model.excess_noise)
