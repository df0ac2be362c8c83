"""Kernel (covariance function) base classes, sums and products.

Every kernel in longwave is stationary: ``k(t1, t2) = k(tau)`` with
``tau = |t1 - t2|``. A kernel is an immutable specification holding its
hyperparameters as :class:`~longwave.params.Param` objects; ``with_params``
returns a new kernel, so fitting never mutates what the user built.

To add a kernel, subclass :class:`Primitive` (see DEVELOPERS.md):

* ``param_names`` : the names of its hyperparameters, in order;
* ``default_label`` : the prefix of those names in a model;
* ``_value(tau, *values)`` : ``k(tau)`` for an array ``tau >= 0``;
* ``_grad(tau, *values)`` : derivatives with respect to ``log(value)`` of
  each hyperparameter, stacked on a new first axis;
* optionally ``_state_space(*values)`` returning a
  :class:`~longwave.kernels.statespace.StateSpace`.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..params import Param, as_param
from .product_ss import product_state_space
from .statespace import StateSpace, stack_blocks

# Relative covariance error below which a state-space form counts as exact.
EXACT_FORM_TOLERANCE = 1e-9
# Relative size below which a covariance (or its derivative) counts as zero
# when sparse methods skip far inducing times: 1e-17 is under double-precision
# round-off of any entry of size k(0) (common practice: drop terms below eps).
SUPPORT_REL = 1e-17


class Kernel:
    """A stationary covariance function; see the module docstring."""

    def params(self) -> list[Param]:
        """All hyperparameters (free and fixed), with full names, in order."""
        raise NotImplementedError

    def with_params(self, params: list[Param]) -> Kernel:
        """A copy with the hyperparameters replaced (same order as :meth:`params`)."""
        raise NotImplementedError

    def leaves(self) -> list[Primitive]:
        """The primitive kernels this kernel is built from, in parameter order."""
        raise NotImplementedError

    @property
    def param_names(self) -> list[str]:
        return [p.name for p in self.params()]

    @property
    def n_params(self) -> int:
        return len(self.params())

    def value(self, tau) -> np.ndarray:
        """``k(tau)`` for an array of lags (any shape, ``tau >= 0``)."""
        raise NotImplementedError

    def grad(self, tau) -> np.ndarray:
        """Derivatives of ``k(tau)`` with respect to each hyperparameter's log.

        Returns
        -------
        ndarray of shape (p,) + tau.shape
        """
        raise NotImplementedError

    def variance(self) -> float:
        """``k(0)``: the prior variance of the process."""
        return float(self.value(np.zeros(1))[0])

    def __call__(self, t1, t2=None) -> np.ndarray:
        """Dense covariance matrix between two sets of times.

        Parameters
        ----------
        t1 : array_like of shape (n1,)
        t2 : array_like of shape (n2,), optional
            Defaults to ``t1``.

        Returns
        -------
        ndarray of shape (n1, n2)
        """
        t1 = np.asarray(t1, dtype=float)
        t2 = t1 if t2 is None else np.asarray(t2, dtype=float)
        return self.value(np.abs(t1[:, None] - t2[None, :]))

    @property
    def has_state_space(self) -> bool:
        """Whether :meth:`state_space` gives a state-space form.

        Exact, or approximate with a reported bound (:meth:`covariance_error_bound`).
        """
        return all(leaf.has_state_space for leaf in self.leaves())

    @property
    def has_exact_state_space(self) -> bool:
        """Whether the state-space form is exact, so Kalman inference is exact.

        True when :meth:`covariance_error_bound` is at most
        ``EXACT_FORM_TOLERANCE`` (1e-9) of the prior variance: round-off level
        for the double-precision filter.
        """
        if not self.has_state_space:
            return False
        return self.covariance_error_bound() <= EXACT_FORM_TOLERANCE * self.variance()

    def covariance_error_bound(self) -> float:
        """Bound on ``max_tau |k_ss(tau) - k(tau)|`` of the state-space form.

        Zero for exact forms; approximate forms (Periodic, SquaredExp) report
        their own, sums add them, products combine them as in :class:`Product`.
        """
        return 0.0

    def support_radius(self, rel: float = SUPPORT_REL) -> float:
        """Lag beyond which ``|k|`` and ``|dk/dlog(theta)|`` stay below ``rel * k(0)``.

        Sparse methods skip inducing times farther than this from a chunk of
        data (``sparse_windows``): their cross-covariances are zero to
        round-off. ``inf`` (the default for kernels that do not decay, such as
        periodic ones) means every inducing time matters everywhere.
        """
        return math.inf

    def state_space(self) -> StateSpace:
        raise NotImplementedError(
            f"{type(self).__name__} has no state-space form; use an inference method "
            "that needs only the dense covariance (Exact, VFE, FITC)"
        )

    def __add__(self, other):
        if not isinstance(other, Kernel):
            return NotImplemented
        return Sum([self, other])

    def __mul__(self, other):
        if not isinstance(other, Kernel):
            return NotImplemented
        return Product([self, other])


class Primitive(Kernel):
    """A kernel with its own hyperparameters (not built from others)."""

    param_names_local: tuple[str, ...] = ()
    default_label: str = "kernel"
    has_state_space_form: bool = False

    def __init__(self, *, label: str | None = None, **values):
        unknown = set(values) - set(self.param_names_local)
        if unknown:
            raise TypeError(
                f"{type(self).__name__} got unknown hyperparameter(s) {sorted(unknown)}; "
                f"its hyperparameters are {list(self.param_names_local)}"
            )
        missing = [n for n in self.param_names_local if n not in values]
        if missing:
            raise TypeError(
                f"{type(self).__name__} needs hyperparameter(s) {missing}; for example "
                f"{type(self).__name__}(" + ", ".join(f"{n}=1.0" for n in missing) + ")"
            )
        self.label = label or self.default_label
        self._params = [
            as_param(values[n], f"{self.label}.{n}") for n in self.param_names_local
        ]

    def params(self) -> list[Param]:
        return list(self._params)

    def leaves(self) -> list[Primitive]:
        return [self]

    @property
    def has_state_space(self) -> bool:
        return self.has_state_space_form

    def _values(self) -> tuple[float, ...]:
        return tuple(p.value for p in self._params)

    def with_params(self, params: list[Param]) -> Primitive:
        if len(params) != len(self._params):
            raise ValueError(f"expected {len(self._params)} parameters, got {len(params)}")
        new = object.__new__(type(self))
        new.__dict__.update(self.__dict__)
        new._params = [replace(p, name=old.name) for p, old in zip(params, self._params)]
        return new

    def relabel(self, label: str) -> Primitive:
        new = object.__new__(type(self))
        new.__dict__.update(self.__dict__)
        new.label = label
        new._params = [
            replace(p, name=f"{label}.{local}")
            for p, local in zip(self._params, self.param_names_local)
        ]
        return new

    def value(self, tau) -> np.ndarray:
        return self._value(np.asarray(tau, dtype=float), *self._values())

    def grad(self, tau) -> np.ndarray:
        return self._grad(np.asarray(tau, dtype=float), *self._values())

    def state_space(self) -> StateSpace:
        if not self.has_state_space_form:
            return super().state_space()
        return self._state_space(*self._values())

    def __repr__(self) -> str:
        pairs = zip(self.param_names_local, self._params)
        inner = ", ".join(f"{n}={p.value:.6g}" for n, p in pairs)
        return f"{type(self).__name__}({inner})"

    # subclasses implement these
    def _value(self, tau, *values):
        raise NotImplementedError

    def _grad(self, tau, *values):
        raise NotImplementedError

    def _state_space(self, *values):
        raise NotImplementedError


def decay_root(rel: float, power: float, factor: float = 1.0) -> float:
    """Largest root ``x`` of ``(1 + factor * x)^power * exp(-x) = rel``, for ``rel < 1``.

    Beyond it the left side decreases (``x > power``) and stays below ``rel``.
    Fixed-point iteration ``x = log(1/rel) + power * log(1 + factor * x)``,
    which contracts there; a few steps reach double precision.
    """
    x = math.log(1.0 / rel)
    for _ in range(50):
        x = math.log(1.0 / rel) + power * math.log1p(factor * x)
    return x


def _unique_labels(leaves: list[Primitive]) -> list[Primitive]:
    """Relabel repeated leaf labels as label, label_2, label_3, ... (first stays)."""
    seen: dict[str, int] = {}
    out = []
    for leaf in leaves:
        count = seen.get(leaf.label, 0) + 1
        seen[leaf.label] = count
        out.append(leaf if count == 1 else leaf.relabel(f"{leaf.label}_{count}"))
    return out


class _Composite(Kernel):
    """Shared machinery of sums and products: a flat list of parts."""

    def __init__(self, parts):
        flat = []
        for part in parts:
            if not isinstance(part, Kernel):
                raise TypeError(f"expected kernels, got {type(part).__name__}")
            # (a + b) + c is stored as one sum of three; same for products.
            flat.extend(part.parts if type(part) is type(self) else [part])
        relabelled = _unique_labels([leaf for part in flat for leaf in part.leaves()])
        self.parts = []
        i = 0
        for part in flat:
            k = len(part.leaves())
            self.parts.append(_rebuild(part, relabelled[i : i + k]))
            i += k

    def leaves(self) -> list[Primitive]:
        return [leaf for part in self.parts for leaf in part.leaves()]

    def params(self) -> list[Param]:
        return [p for part in self.parts for p in part.params()]

    def with_params(self, params):
        params = list(params)
        new_parts, i = [], 0
        for part in self.parts:
            k = part.n_params
            new_parts.append(part.with_params(params[i : i + k]))
            i += k
        new = object.__new__(type(self))
        new.parts = new_parts
        return new

    def __repr__(self) -> str:
        return "(" + self._symbol.join(repr(p) for p in self.parts) + ")"


def _rebuild(part: Kernel, leaves: list[Primitive]) -> Kernel:
    if isinstance(part, Primitive):
        return leaves[0]
    new = object.__new__(type(part))
    new.parts, i = [], 0
    for sub in part.parts:
        k = len(sub.leaves())
        new.parts.append(_rebuild(sub, leaves[i : i + k]))
        i += k
    return new


class Sum(_Composite):
    """Sum of independent kernels: ``k(tau) = sum_i k_i(tau)``."""

    _symbol = " + "

    def value(self, tau):
        return sum(part.value(tau) for part in self.parts)

    def grad(self, tau):
        return np.concatenate([part.grad(tau) for part in self.parts], axis=0)

    def state_space(self) -> StateSpace:
        if not self.has_state_space:
            return super().state_space()
        return stack_blocks([part.state_space() for part in self.parts])

    def support_radius(self, rel: float = SUPPORT_REL) -> float:
        # beyond the largest radius every part is below rel * k_i(0) <= rel * k(0)
        # (the variances of the parts are positive and add up)
        return max(part.support_radius(rel) for part in self.parts)

    def covariance_error_bound(self) -> float:
        # |sum k_i' - sum k_i| <= sum |k_i' - k_i|
        return float(sum(part.covariance_error_bound() for part in self.parts))


class Product(_Composite):
    """Product of kernels: ``k(tau) = prod_i k_i(tau)``.

    When every factor has a state-space form, so does the product: the
    Kronecker product of the factors' states (see ``kernels/product_ss.py``).
    """

    _symbol = " * "

    @property
    def has_state_space(self) -> bool:
        return all(part.has_state_space for part in self.parts)

    def state_space(self) -> StateSpace:
        if not self.has_state_space:
            return super().state_space()
        return product_state_space([part.state_space() for part in self.parts])

    def support_radius(self, rel: float = SUPPORT_REL) -> float:
        # |k_j(tau)| <= k_j(0) for every stationary factor, so one factor below
        # rel * k_j(0) puts the product (and each derivative) below rel * k(0)
        return min(part.support_radius(rel) for part in self.parts)

    def covariance_error_bound(self) -> float:
        # |a'b' - ab| <= |a| |b' - b| + |b'| |a' - a|, with |k| <= k(0), folded left to right
        bound, var = 0.0, 1.0
        for part in self.parts:
            e, v = part.covariance_error_bound(), part.variance()
            bound = abs(var) * e + (abs(v) + e) * bound
            var = var * v
        return float(bound)

    def value(self, tau):
        out = self.parts[0].value(tau)
        for part in self.parts[1:]:
            out = out * part.value(tau)
        return out

    def grad(self, tau):
        values = [part.value(tau) for part in self.parts]
        blocks = []
        for i, part in enumerate(self.parts):
            others = np.ones_like(values[0])
            for j, v in enumerate(values):
                if j != i:
                    others = others * v
            blocks.append(part.grad(tau) * others)
        return np.concatenate(blocks, axis=0)
