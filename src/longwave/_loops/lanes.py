"""Four-wide float64 arithmetic for the gradient loops, as numba intrinsics.

The forward-sensitivity gradient runs the same straight-line code for every
differentiated parameter. Holding four parameters ("lanes") in one
``UniTuple(float64, 4)`` and doing each operation on all four with one LLVM
vector instruction cuts the instruction count of that code about fourfold.
numba does not vectorise these short, fixed-length loops by itself (its
superword vectoriser is off by default), hence these few explicit
operations. A lane value is an ordinary 4-tuple, so plain tuple literals
``(a, b, c, d)`` also build one.

Functions (all elementwise on 4-tuples of float64):

- ``vsplat(x)``: ``(x, x, x, x)``;
- ``vadd(a, b)``, ``vsub(a, b)``, ``vmul(a, b)``, ``vfma(a, b, c) = a * b + c``
  (fused, one rounding);
- ``vmax0(a)``: ``max(a, 0)``;
- ``vload(arr, i)``: ``arr[i:i + 4]`` of a C-contiguous float64 array;
  ``vstore(arr, i, v)`` writes it back. No bounds checks.
"""

from __future__ import annotations

from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic

WIDTH = 4
VEC = types.UniTuple(types.float64, WIDTH)
_LLVEC = ir.VectorType(ir.DoubleType(), WIDTH)
_I32 = ir.IntType(32)


def _to_vector(builder, tup):
    vec = ir.Constant(_LLVEC, ir.Undefined)
    for i in range(WIDTH):
        vec = builder.insert_element(vec, builder.extract_value(tup, i), ir.Constant(_I32, i))
    return vec


def _to_tuple(context, builder, vec):
    tup = ir.Constant(context.get_value_type(VEC), ir.Undefined)
    for i in range(WIDTH):
        tup = builder.insert_value(tup, builder.extract_element(vec, ir.Constant(_I32, i)), i)
    return tup


def _is_vec(ty):
    return isinstance(ty, types.UniTuple) and ty.count == WIDTH and ty.dtype == types.float64


def _binary(op):
    def typer(typingctx, a, b):
        if not (_is_vec(a) and _is_vec(b)):
            return None

        def codegen(context, builder, sig, args):
            x, y = (_to_vector(builder, v) for v in args)
            return _to_tuple(context, builder, getattr(builder, op)(x, y))

        return VEC(VEC, VEC), codegen

    return typer


vadd = intrinsic(_binary("fadd"))
vsub = intrinsic(_binary("fsub"))
vmul = intrinsic(_binary("fmul"))


@intrinsic
def vfma(typingctx, a, b, c):
    if not (_is_vec(a) and _is_vec(b) and _is_vec(c)):
        return None

    def codegen(context, builder, sig, args):
        x, y, z = (_to_vector(builder, v) for v in args)
        fnty = ir.FunctionType(_LLVEC, [_LLVEC, _LLVEC, _LLVEC])
        fma = cgutils.get_or_insert_function(builder.module, fnty, f"llvm.fma.v{WIDTH}f64")
        return _to_tuple(context, builder, builder.call(fma, [x, y, z]))

    return VEC(VEC, VEC, VEC), codegen


def _unary(build):
    def typer(typingctx, a):
        if not _is_vec(a):
            return None

        def codegen(context, builder, sig, args):
            x = _to_vector(builder, args[0])
            zero = ir.Constant(_LLVEC, [0.0] * WIDTH)
            return _to_tuple(context, builder, build(builder, x, zero))

        return VEC(VEC), codegen

    return typer


def _max0(builder, x, zero):
    # NaN stays NaN (unordered compare keeps x)
    negative = builder.fcmp_ordered("<", x, zero)
    return builder.select(negative, zero, x)


vmax0 = intrinsic(_unary(_max0))


@intrinsic
def vsplat(typingctx, x):
    if not isinstance(x, types.Float):
        return None

    def codegen(context, builder, sig, args):
        val = context.cast(builder, args[0], sig.args[0], types.float64)
        tup = ir.Constant(context.get_value_type(VEC), ir.Undefined)
        for i in range(WIDTH):
            tup = builder.insert_value(tup, val, i)
        return tup

    return VEC(x), codegen


def _array_ok(arr):
    return isinstance(arr, types.Array) and arr.dtype == types.float64 and arr.layout == "C"


def _element_pointer(context, builder, arr_ty, arr, index):
    ary = context.make_array(arr_ty)(context, builder, arr)
    ptr = builder.gep(ary.data, [index])
    return builder.bitcast(ptr, _LLVEC.as_pointer())


@intrinsic
def vload(typingctx, arr, index):
    if not (_array_ok(arr) and arr.ndim == 1 and isinstance(index, types.Integer)):
        return None

    def codegen(context, builder, sig, args):
        idx = context.cast(builder, args[1], sig.args[1], types.intp)
        ptr = _element_pointer(context, builder, sig.args[0], args[0], idx)
        vec = builder.load(ptr, align=8)
        return _to_tuple(context, builder, vec)

    return VEC(arr, index), codegen


@intrinsic
def vstore(typingctx, arr, index, value):
    if not (_array_ok(arr) and arr.ndim == 1 and isinstance(index, types.Integer)
            and _is_vec(value)):
        return None

    def codegen(context, builder, sig, args):
        idx = context.cast(builder, args[1], sig.args[1], types.intp)
        ptr = _element_pointer(context, builder, sig.args[0], args[0], idx)
        builder.store(_to_vector(builder, args[2]), ptr, align=8)
        return context.get_dummy_value()

    return types.none(arr, index, value), codegen
