"""Inference methods behind one interface: Exact, Kalman (and sparse ones)."""

import inspect

from .base import Evaluation, Method, Posterior, Prediction
from .exact import Exact
from .kalman import Kalman
from .sparse import FITC, VFE, SparseMethod
from .sparse_data import ChunkedSeries
from .sparse_optimize import optimize_inducing

# The one place where a method's name maps to its class (rule: strings map to
# objects in one place only). Sparse methods register themselves here too.
REGISTRY: dict[str, type] = {"exact": Exact, "kalman": Kalman, "vfe": VFE, "fitc": FITC}


def resolve(method, **options) -> Method:
    """Return a :class:`Method` for a method object or its name.

    Parameters
    ----------
    method : Method or str
        A method object (returned as it is) or a name in ``REGISTRY``.
    **options
        Keyword arguments of the named method's constructor, for example
        ``resolve("exact", max_n=4000)``; not allowed with a method object.

    Examples
    --------
    >>> resolve("kalman")
    Kalman()
    >>> resolve("exact", max_n=4000)
    Exact(max_n=4000, jitter=0.0)
    """
    if isinstance(method, Method):
        if options:
            raise ValueError(
                f"options {sorted(options)} can only go with a method name, got the object "
                f"{method!r}; configure the object itself instead"
            )
        return method
    if isinstance(method, str) and method.lower() in REGISTRY:
        cls = REGISTRY[method.lower()]
        try:
            return cls(**options)
        except TypeError as exc:
            accepted = [p for p in inspect.signature(cls).parameters if p != "self"]
            raise ValueError(
                f"method {method!r} does not take options {sorted(options)} ({exc}); "
                f"its options are {accepted}"
            ) from exc
    raise ValueError(
        f"unknown inference method {method!r}; choose one of {sorted(REGISTRY)} "
        "or pass a method object such as longwave.methods.Kalman()"
    )


__all__ = [
    "ChunkedSeries", "Evaluation", "Exact", "FITC", "Kalman", "Method", "Posterior",
    "Prediction", "SparseMethod", "VFE", "optimize_inducing", "resolve",
]
