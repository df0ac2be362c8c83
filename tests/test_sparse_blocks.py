"""Compiled block loops (``_loops/blocks.py``) against plain-numpy twins.

Sources: each primitive against the kernel's own numpy ``value``/``grad``
(Rasmussen & Williams 2006, eqs. 4.17 and 4.9; MacKay 1998, eq. 47) and the lag derivative against
central differences (common practice); the flat sum-of-products form of
composite kernels against the kernels' own ``value``/``grad``.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import central_difference

from longwave._loops import blocks as loops
from longwave.kernels import Cosine, Matern12, Matern32, Matern52, Periodic, SquaredExp
from longwave.methods.sparse_form import CompiledBlocks, NumpyBlocks, block_evaluator, flat_form


def twin_block(kernel, z, t, colscale):
    """Numpy twin of ``cross_block``."""
    return kernel.value(np.abs(z[:, None] - t[None, :])) * colscale


def twin_contract(kernel, z, t, adjoint):
    """Numpy twin of ``contract_block``: parameter and z gradients of sum(adjoint * K)."""
    grad = np.einsum("pac,ac->p", kernel.grad(np.abs(z[:, None] - t[None, :])), adjoint)
    gz = central_difference(lambda zz: np.sum(adjoint * kernel(zz, t)), z, step=1e-6)
    return grad, gz


KERNELS = {
    "m12": lambda: Matern12(amplitude=1.3, scale=2.0),
    "m32": lambda: Matern32(amplitude=0.7, scale=0.9),
    "m52": lambda: Matern52(amplitude=1.1, scale=3.0),
    "se": lambda: SquaredExp(amplitude=0.9, scale=1.7),
    "periodic": lambda: Periodic(amplitude=1.2, period=2.3, scale=0.8),
    "cosine": lambda: Cosine(amplitude=0.7, period=3.1),
    "quasi_periodic": lambda: Periodic(amplitude=1.0, period=2.3, scale=0.8)
    * Matern32(amplitude=1.0, scale=9.0),
    "se_times_m12": lambda: SquaredExp(amplitude=0.9, scale=1.7) * Matern12(amplitude=1.0,
                                                                            scale=6.0),
    "sum": lambda: Matern32(amplitude=1.0, scale=2.0) + Matern52(amplitude=0.3, scale=0.5),
    "prod_of_sums": lambda: (Matern32(amplitude=1.0, scale=2.0)
                             + Matern12(amplitude=0.4, scale=1.0))
    * (Matern52(amplitude=0.8, scale=5.0) + Matern12(amplitude=0.2, scale=9.0)),
}


@pytest.mark.parametrize("case", sorted(KERNELS))
def test_blocks_equal_numpy_twins(case, rng):
    kernel = KERNELS[case]()
    ev = block_evaluator(kernel)
    assert isinstance(ev, CompiledBlocks)
    z = np.sort(rng.uniform(0, 10, 9))
    t = rng.uniform(-1, 11, 40)
    scale = rng.uniform(0.5, 2.0, t.size)
    np.testing.assert_allclose(ev.block(z, t, scale), twin_block(kernel, z, t, scale),
                               rtol=1e-13, atol=1e-15)
    np.testing.assert_allclose(ev.square(z), kernel(z), rtol=1e-13, atol=1e-15)
    adjoint = rng.standard_normal((z.size, t.size))
    grad, gz = np.zeros(kernel.n_params), np.zeros(z.size)
    ev.contract(z, t, adjoint, True, grad, gz)
    ref_grad, ref_gz = twin_contract(kernel, z, t, adjoint)
    np.testing.assert_allclose(grad, ref_grad, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(gz, ref_gz, rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("case", sorted(KERNELS))
def test_square_contraction_equals_numpy_twin(case, rng):
    kernel = KERNELS[case]()
    z = np.sort(rng.uniform(0, 10, 8))
    adj = rng.standard_normal((8, 8))
    adj = adj + adj.T
    grad, gz = np.zeros(kernel.n_params), np.zeros(8)
    block_evaluator(kernel).contract_square(z, adj, True, grad, gz)
    ref = np.einsum("pab,ab->p", kernel.grad(np.abs(z[:, None] - z[None, :])), adj)
    ref_gz = central_difference(lambda zz: np.sum(adj * kernel(zz)), z, step=1e-6)
    np.testing.assert_allclose(grad, ref, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(gz, ref_gz, rtol=1e-6, atol=1e-7)


PRIMITIVES = {
    "m12": (lambda: Matern12(amplitude=1.4, scale=2.5), [1.4, 2.5]),
    "m32": (lambda: Matern32(amplitude=1.4, scale=2.5), [1.4, 2.5]),
    "m52": (lambda: Matern52(amplitude=1.4, scale=2.5), [1.4, 2.5]),
    "se": (lambda: SquaredExp(amplitude=1.4, scale=2.5), [1.4, 2.5]),
    "periodic": (lambda: Periodic(amplitude=1.4, period=2.5, scale=0.7), [1.4, 2.5, 0.7]),
    "cosine": (lambda: Cosine(amplitude=1.4, period=2.5), [1.4, 2.5]),
}


@pytest.mark.parametrize("case", sorted(PRIMITIVES))
def test_primitive_lag_derivative_equals_central_differences(case):
    make, values = PRIMITIVES[case]
    kernel = make()
    cls = type(kernel)
    par = np.zeros(loops.MAX_PARAMS)
    par[:len(values)] = values
    out = np.empty(2 + loops.MAX_PARAMS)
    for tau in (0.3, 1.0, 4.0):
        loops.primitive(cls.loop_code, tau, par, out, True)
        numeric = central_difference(lambda x: kernel.value(x), np.array([tau]), 1e-6)[0, 0]
        assert out[0] == pytest.approx(float(kernel.value(tau)), rel=1e-14)
        assert out[1] == pytest.approx(float(numeric), rel=1e-7)
        np.testing.assert_allclose(out[2:2 + len(values)], kernel.grad(np.array(tau)),
                                   rtol=1e-12, atol=1e-15)


def test_flat_form_expands_a_product_of_sums():
    # (a + b) * (c + d) = ac + ad + bc + bd: four terms of two factors, shared parameter slots
    form = flat_form(KERNELS["prod_of_sums"]())
    assert form.term_start.tolist() == [0, 2, 4, 6, 8]
    assert form.slots[:, 0].tolist() == [0, 4, 0, 6, 2, 4, 2, 6]


def test_kernel_without_code_uses_the_numpy_fallback(rng):
    class Plain(Matern32):  # same maths, no compiled form
        loop_code = loops.CODE_NONE

    kernel = Plain(amplitude=1.0, scale=2.0) + Matern12(amplitude=0.5, scale=1.0)
    ev = block_evaluator(kernel)
    assert isinstance(ev, NumpyBlocks)
    z, t = np.linspace(0, 5, 6), rng.uniform(0, 5, 30)
    np.testing.assert_allclose(ev.block(z, t, np.ones(30)), kernel(z, t), rtol=1e-14)
    with pytest.raises(ValueError, match="loop_code"):
        ev.contract(z, t, np.ones((6, 30)), True, np.zeros(4), np.zeros(6))


def test_triangular_products_equal_numpy(rng):
    # numpy twins of sparse_stats.whiten / unwhiten (BLAS trmm in place)
    from longwave.methods.sparse_stats import unwhiten, whiten

    linv = np.asfortranarray(np.tril(rng.standard_normal((7, 7))))
    k = rng.standard_normal((7, 30))
    np.testing.assert_allclose(whiten(linv, k.copy()), linv @ k, rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(unwhiten(linv, k.copy()), linv.T @ k, rtol=1e-13, atol=1e-13)


def test_accumulators_add_field_by_field():
    # the map-reduce relies on Accumulator.add being a plain sum (sparse_stats)
    from longwave.methods.sparse_stats import new_accumulator

    a, b = new_accumulator("fitc_value", 3), new_accumulator("fitc_value", 3)
    a.mat += 1.0
    b.mat += 2.0
    a.n, b.n, b.sum_rr = 4, 5, 1.5
    a.add(b)
    assert a.n == 9 and a.sum_rr == 1.5 and np.all(a.mat == 3.0) and a.grad is None


def test_far_blocks_hold_no_subnormal_numbers(rng):
    # source: IEEE 754 subnormal range below numpy.finfo(float).tiny; a block spanning
    # thousands of length scales, whitened, must hold none (they slow BLAS severalfold)
    from longwave import Model
    from longwave.methods import VFE
    from longwave.methods.sparse_stats import whiten

    model = Model(Matern32(amplitude=1.0, scale=1.0))
    z = np.linspace(0, 5000, 64)
    t = rng.uniform(0, 5000, 4000)
    setup = VFE(inducing=z)._setup(model, z)
    block = setup.blocks.block(z, t, np.ones(t.size))
    tiny = np.finfo(float).tiny
    for arr in (block, setup.linv, whiten(setup.linv, block.copy())):
        assert not np.any((arr != 0) & (np.abs(arr) < tiny))
    # decays below exp(-300) are exact zeros, and nothing above it is lost
    far = np.abs(z[:, None] - t[None, :]) * np.sqrt(3) > loops.DECAY_CUTOFF
    assert np.all(block[far] == 0)
    np.testing.assert_allclose(block[~far], model.kernel(z, t)[~far], rtol=1e-13)
