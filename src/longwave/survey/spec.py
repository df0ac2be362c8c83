"""The model specification language of the command line (and of model files).

A specification names the kernel as sums and products of kernel names, each
with optional initial values, bounds and fixed flags, and then optionally the
excess noise and the mean after ``with``::

    matern32(scale=20 in [1, 500]) + matern12(amplitude=0.1, scale=fixed 3)
    matern52 * matern12(scale=auto in [100, inf]) with noise=none, mean=fixed 0
    (matern32 + matern12) * matern52(scale=fixed 400) with noise=0.02 in [1e-4, 1]

Grammar (hand-written tokenizer and recursive-descent parser; nothing is
evaluated)::

    model    := sum ['with' option (',' option)*]
    sum      := product ('+' product)*
    product  := atom ('*' atom)*
    atom     := NAME ['(' [arg (',' arg)*] ')'] | '(' sum ')'
    arg      := NAME '=' param
    option   := 'noise' '=' ('none' | param) | 'mean' '=' param
    param    := ['fixed'] (NUMBER | 'auto') ['in' '[' limit ',' limit ']']
    limit    := NUMBER | 'inf' | '-inf'          (inf leaves that side open)

A parameter left out, or written ``auto``, takes its initial value from the
data of each object (see :mod:`longwave.survey.initial`). ``+`` binds less
tightly than ``*``. Kernel names are the ``default_label`` of the kernel
classes that :mod:`longwave.kernels` exports (see :func:`kernel_registry`),
so a kernel added there is usable here without touching this module.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field

from .initial import AUTO_PARAMS

# ---------------------------------------------------------------------------
# What a specification denotes
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class ParamSpec:
    """One hyperparameter as written: initial value, bounds, fixed flag.

    Attributes
    ----------
    value : float or None
        Initial (or fixed) value; ``None`` means "from the data" (``auto``).
    lower, upper : float or None
        Bounds in natural units; ``None`` leaves a side open.
    fixed : bool
        Keep the value during fitting.
    """

    value: float | None = None
    lower: float | None = None
    upper: float | None = None
    fixed: bool = False

    @property
    def bounds(self) -> tuple:
        return (self.lower, self.upper)

    @property
    def has_bounds(self) -> bool:
        return self.lower is not None or self.upper is not None


@dataclass(frozen=True)
class Term:
    """One kernel of the specification, with the parameters written for it."""

    kernel: str
    params: tuple[tuple[str, ParamSpec], ...] = ()

    def param(self, name: str) -> ParamSpec:
        return dict(self.params).get(name, ParamSpec())


@dataclass(frozen=True)
class Combination:
    """A sum (``op="+"``) or product (``op="*"``) of two or more parts."""

    op: str
    parts: tuple


@dataclass(frozen=True)
class ModelSpec:
    """A parsed model: kernel expression, mean and excess noise.

    Attributes
    ----------
    kernel : Term or Combination
    mean : ParamSpec
        Default: from the data, fitted.
    noise : ParamSpec or None
        Excess white noise; ``None`` (written ``noise=none``) means the error
        bars are taken as complete. Default: from the data, fitted.

    Examples
    --------
    >>> spec = parse_spec("matern32(scale=20 in [1, 500]) with noise=none")
    >>> spec.text
    'matern32(scale=20 in [1, 500]) with mean=auto, noise=none'
    >>> parse_spec(spec.text) == spec
    True
    """

    kernel: Term | Combination
    mean: ParamSpec = field(default_factory=ParamSpec)
    noise: ParamSpec | None = field(default_factory=ParamSpec)

    def terms(self) -> list[Term]:
        """The kernels in parameter order (left to right)."""
        out: list[Term] = []
        _collect(self.kernel, out)
        return out

    @property
    def text(self) -> str:
        """Canonical text: parses back to an equal specification."""
        noise = "none" if self.noise is None else _param_text(self.noise)
        return f"{_expr_text(self.kernel, top=True)} with mean={_param_text(self.mean)}, " \
               f"noise={noise}"


def _collect(node, out):
    if isinstance(node, Term):
        out.append(node)
    else:
        for part in node.parts:
            _collect(part, out)


def _number_text(x: float) -> str:
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return repr(int(x)) if float(x).is_integer() and abs(x) < 1e15 else repr(float(x))


def _param_text(p: ParamSpec) -> str:
    out = ("fixed " if p.fixed else "") + ("auto" if p.value is None else _number_text(p.value))
    if p.has_bounds:
        lo = "-inf" if p.lower is None else _number_text(p.lower)
        hi = "inf" if p.upper is None else _number_text(p.upper)
        out += f" in [{lo}, {hi}]"
    return out


def _expr_text(node, top=False) -> str:
    if isinstance(node, Term):
        if not node.params:
            return node.kernel
        inner = ", ".join(f"{n}={_param_text(p)}" for n, p in node.params)
        return f"{node.kernel}({inner})"
    text = f" {node.op} ".join(_expr_text(p) for p in node.parts)
    # A sum inside a product needs its parentheses back.
    return text if top or node.op == "*" else f"({text})"


# ---------------------------------------------------------------------------
# Kernel names: the one place they map to classes
# ---------------------------------------------------------------------------


def kernel_registry() -> dict[str, type]:
    """Kernel classes by specification name, read from :mod:`longwave.kernels`.

    Every concrete :class:`~longwave.kernels.Primitive` subclass exported in
    ``longwave.kernels.__all__`` appears under its ``default_label``, so new
    kernels (periodic, oscillators) are picked up when they are exported.

    Examples
    --------
    >>> kernel_registry()["matern32"].__name__
    'Matern32'
    """
    from .. import kernels

    out = {}
    for export in getattr(kernels, "__all__", ()):
        cls = getattr(kernels, export, None)
        if (isinstance(cls, type) and issubclass(cls, kernels.Primitive)
                and cls is not kernels.Primitive and cls.param_names_local):
            out[cls.default_label.lower()] = cls
    return out


# ---------------------------------------------------------------------------
# Errors that point at the offending character
# ---------------------------------------------------------------------------


class SpecError(ValueError):
    """A specification that does not parse; the message shows where and a fix.

    Attributes
    ----------
    text : str
        The specification as given.
    column : int
        0-based column of the offending character.
    """

    def __init__(self, problem: str, text: str, column: int, example: str = ""):
        self.problem, self.text, self.column = problem, text, column
        lines = [f"bad model specification: {problem}", f"    {text}",
                 "    " + " " * column + "^"]
        if example:
            lines.append(f"for example: {example}")
        super().__init__("\n".join(lines))


# ---------------------------------------------------------------------------
# Tokenizer
# ---------------------------------------------------------------------------

_TOKEN = re.compile(
    r"\s*(?:(?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)"
    r"|(?P<name>[A-Za-z_][A-Za-z0-9_]*)"
    r"|(?P<punct>[()\[\],=+*\-]))"
)


@dataclass(frozen=True)
class _Token:
    kind: str  # "number", "name", "punct" or "end"
    text: str
    column: int


def tokenize(text: str) -> list[_Token]:
    """Split a specification into tokens, each with its column."""
    tokens, pos = [], 0
    while pos < len(text):
        if text[pos:].strip() == "":
            break
        match = _TOKEN.match(text, pos)
        if match is None or match.lastgroup is None:
            column = pos + len(text[pos:]) - len(text[pos:].lstrip())
            raise SpecError(f"unexpected character {text[column]!r}", text, column,
                            "matern32(scale=20 in [1, 500]) + matern12")
        kind = match.lastgroup
        tokens.append(_Token(kind, match.group(kind), match.start(kind)))
        pos = match.end()
    tokens.append(_Token("end", "", len(text)))
    return tokens


# ---------------------------------------------------------------------------
# Parser
# ---------------------------------------------------------------------------


class _Parser:
    def __init__(self, text: str):
        self.text = text
        self.tokens = tokenize(text)
        self.i = 0
        self.registry = kernel_registry()

    # --- helpers ---------------------------------------------------------
    @property
    def tok(self) -> _Token:
        return self.tokens[self.i]

    def fail(self, problem: str, token: _Token | None = None, example: str = ""):
        token = token or self.tok
        raise SpecError(problem, self.text, token.column, example)

    def found(self) -> str:
        return "the end" if self.tok.kind == "end" else repr(self.tok.text)

    def accept(self, text: str) -> _Token | None:
        if self.tok.text == text and self.tok.kind in ("punct", "name"):
            tok = self.tok
            self.i += 1
            return tok
        return None

    def expect(self, text: str, after: str, example: str = "") -> _Token:
        tok = self.accept(text)
        if tok is None:
            self.fail(f"expected {text!r} {after}, found {self.found()}", example=example)
        return tok

    # --- grammar ---------------------------------------------------------
    def model(self) -> ModelSpec:
        if self.tok.kind == "end":
            self.fail("the specification is empty; name at least one kernel",
                      example="matern32")
        kernel = self.sum()
        options: dict = {}
        if self.accept("with"):
            self.option(options)
            while self.accept(","):
                self.option(options)
        if self.tok.kind != "end":
            self.fail(f"expected '+', '*' or 'with' after a kernel, found {self.found()}",
                      example="matern32 + matern12 with noise=none")
        return ModelSpec(kernel, mean=options.get("mean", ParamSpec()),
                         noise=options.get("noise", ParamSpec()))

    def sum(self):
        parts = [self.product()]
        while self.accept("+"):
            parts.append(self.product())
        return parts[0] if len(parts) == 1 else Combination("+", tuple(_flatten("+", parts)))

    def product(self):
        parts = [self.atom()]
        while self.accept("*"):
            parts.append(self.atom())
        return parts[0] if len(parts) == 1 else Combination("*", tuple(_flatten("*", parts)))

    def atom(self):
        if self.accept("("):
            inner = self.sum()
            self.expect(")", "to close the parenthesis", "(matern32 + matern12) * matern52")
            return inner
        tok = self.tok
        if tok.kind != "name":
            self.fail(f"expected a kernel name, found {self.found()}",
                      example="matern32 + matern12")
        cls = self.registry.get(tok.text.lower())
        if cls is None:
            close = difflib.get_close_matches(tok.text.lower(), self.registry, n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            self.fail(f"unknown kernel {tok.text!r}{hint}; known kernels: "
                      + ", ".join(sorted(self.registry)), example="matern32(scale=20)")
        self.i += 1
        params: dict[str, ParamSpec] = {}
        if self.accept("("):
            if not self.accept(")"):
                self.arg(cls, tok.text.lower(), params)
                while self.accept(","):
                    self.arg(cls, tok.text.lower(), params)
                self.expect(")", "to close the parameter list",
                            f"{tok.text.lower()}(scale=20, amplitude=1)")
        name = tok.text.lower()
        for local in cls.param_names_local:
            if local not in params and local not in AUTO_PARAMS:
                self.fail(f"kernel {name!r} needs a value for {local!r}: the data give no "
                          "starting value for it", tok,
                          f"{name}(" + ", ".join(f"{n}=1.0" for n in cls.param_names_local
                                                 if n not in AUTO_PARAMS) + ")")
        ordered = tuple((n, params[n]) for n in cls.param_names_local if n in params)
        return Term(name, ordered)

    def arg(self, cls, kernel: str, params: dict):
        tok = self.tok
        if tok.kind != "name":
            self.fail(f"expected a parameter name of {kernel!r} "
                      f"({', '.join(cls.param_names_local)}), found {self.found()}",
                      example=f"{kernel}(scale=20)")
        if tok.text not in cls.param_names_local:
            close = difflib.get_close_matches(tok.text, cls.param_names_local, n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            self.fail(f"kernel {kernel!r} has no parameter {tok.text!r}{hint}; its "
                      f"parameters are {', '.join(cls.param_names_local)}",
                      example=f"{kernel}({cls.param_names_local[-1]}=20)")
        if tok.text in params:
            self.fail(f"parameter {tok.text!r} given twice for {kernel!r}")
        self.i += 1
        self.expect("=", f"after {tok.text!r}", f"{kernel}({tok.text}=20)")
        params[tok.text] = self.param(positive=True)

    def option(self, options: dict):
        tok = self.tok
        if tok.text not in ("noise", "mean"):
            self.fail(f"expected 'noise' or 'mean' after 'with', found {self.found()}",
                      example="matern32 with noise=0.01, mean=fixed 0")
        if tok.text in options:
            self.fail(f"{tok.text!r} given twice")
        self.i += 1
        self.expect("=", f"after {tok.text!r}", f"matern32 with {tok.text}=auto")
        if tok.text == "noise" and self.accept("none"):
            options["noise"] = None
            return
        options[tok.text] = self.param(positive=tok.text == "noise")

    def number(self, what: str) -> tuple[float, _Token]:
        start = self.tok
        sign = -1.0 if self.accept("-") else 1.0
        tok = self.tok
        if tok.kind == "number":
            self.i += 1
            return sign * float(tok.text), start
        if tok.text == "inf":
            self.i += 1
            return sign * math.inf, start
        self.fail(f"expected {what}, found {self.found()}")

    def param(self, positive: bool) -> ParamSpec:
        fixed = self.accept("fixed") is not None
        start = self.tok
        if self.accept("auto"):
            value = None
        else:
            value, start = self.number("a number or 'auto'")
            if math.isinf(value):
                self.fail("a parameter's value must be finite", start)
            if positive and value <= 0:
                self.fail(f"this parameter must be positive, got {_number_text(value)} "
                          "(it is fitted as its logarithm)", start, "scale=20")
        lower = upper = None
        if self.accept("in"):
            bracket = self.expect("[", "to open the bounds", "scale=20 in [1, 500]")
            lo, lo_tok = self.number("a lower bound (a number or -inf)")
            self.expect(",", "between the bounds", "scale=20 in [1, 500]")
            hi, _ = self.number("an upper bound (a number or inf)")
            self.expect("]", "to close the bounds", "scale=20 in [1, 500]")
            lower = None if math.isinf(lo) and lo < 0 else lo
            upper = None if math.isinf(hi) and hi > 0 else hi
            if (lower is not None and math.isinf(lower)) or (upper is not None
                                                             and math.isinf(upper)):
                self.fail("bounds must read [lower, upper]; lower cannot be inf", bracket)
            if lower is not None and upper is not None and lower >= upper:
                self.fail(f"lower bound {_number_text(lo)} is not below upper bound "
                          f"{_number_text(hi)}", bracket, "scale=20 in [1, 500]")
            if positive and lower is not None and lower <= 0:
                self.fail(f"this parameter is positive, so its lower bound must be > 0, got "
                          f"{_number_text(lo)}; use a small positive bound", lo_tok,
                          "scale=20 in [1e-3, inf]")
            if value is not None and ((lower is not None and value < lower)
                                      or (upper is not None and value > upper)):
                self.fail(f"value {_number_text(value)} lies outside its bounds", start)
        return ParamSpec(value, lower, upper, fixed)


def _flatten(op: str, parts: list) -> list:
    # a + (b + c) is one sum of three, as longwave.kernels stores it.
    out = []
    for part in parts:
        out.extend(part.parts if isinstance(part, Combination) and part.op == op else [part])
    return out


def parse_spec(text: str) -> ModelSpec:
    """Parse a model specification (see the module docstring for the syntax).

    Parameters
    ----------
    text : str

    Returns
    -------
    ModelSpec

    Raises
    ------
    SpecError
        With the specification and a caret under the offending character.

    Examples
    --------
    >>> parse_spec("matern32 + matern12(scale=fixed 3)").terms()[1].param("scale")
    ParamSpec(value=3.0, lower=None, upper=None, fixed=True)
    """
    if not isinstance(text, str):
        raise TypeError(f"a model specification is a string, got {type(text).__name__}; "
                        "for example parse_spec('matern32 + matern12')")
    return _Parser(text).model()


def parse_option(name: str, text: str) -> ParamSpec | None:
    """Parse the value of a ``noise`` or ``mean`` option on its own (``param`` in the grammar).

    Used by the command line's ``--noise`` and ``--mean``, which override the
    specification's ``with`` clause.

    Examples
    --------
    >>> parse_option("noise", "fixed 0.05")
    ParamSpec(value=0.05, lower=None, upper=None, fixed=True)
    >>> parse_option("noise", "none") is None
    True
    """
    if name not in ("noise", "mean"):
        raise ValueError(f"option name must be 'noise' or 'mean', got {name!r}")
    parser = _Parser(text)
    if parser.tok.kind == "end":
        parser.fail(f"{name} needs a value", example="auto, none, 0.01, fixed 0, "
                    "0.01 in [1e-4, 1]" if name == "noise" else "auto, fixed 0, 2 in [-5, 5]")
    if name == "noise" and parser.accept("none"):
        value = None
    else:
        value = parser.param(positive=name == "noise")
    if parser.tok.kind != "end":
        parser.fail(f"unexpected {parser.found()} after the {name} value",
                    example="0.01 in [1e-4, 1]")
    return value
