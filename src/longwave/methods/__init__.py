"""Inference methods behind one interface: Exact, Kalman (and sparse ones)."""

from .base import Evaluation, Method, Posterior, Prediction
from .exact import Exact
from .kalman import Kalman

# The one place where a method's name maps to its class (rule: strings map to
# objects in one place only). Sparse methods register themselves here too.
REGISTRY: dict[str, type] = {"exact": Exact, "kalman": Kalman}


def resolve(method) -> Method:
    """Return a :class:`Method` for a method object or its name.

    Examples
    --------
    >>> resolve("kalman")
    Kalman()
    """
    if isinstance(method, Method):
        return method
    if isinstance(method, str) and method.lower() in REGISTRY:
        return REGISTRY[method.lower()]()
    raise ValueError(
        f"unknown inference method {method!r}; choose one of {sorted(REGISTRY)} "
        "or pass a method object such as longwave.methods.Kalman()"
    )


__all__ = ["Evaluation", "Exact", "Kalman", "Method", "Posterior", "Prediction", "resolve"]
