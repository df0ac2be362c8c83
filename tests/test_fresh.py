"""Arrays from ``methods/fresh.py``: the layout promised, ordinary arrays otherwise."""

import numpy as np
import pytest

from longwave.methods.fresh import fresh_rows


@pytest.mark.parametrize(
    "rows, size", [(2, 10), (3, 1000), (2, 2**18), (3, 500_000), (1, 2**19 + 3)])
def test_fresh_rows_shape_layout_and_independence(rows, size):
    a = fresh_rows(rows, size)
    assert a.shape == (rows, size) and a.dtype == np.float64 and a.flags.c_contiguous
    if a.nbytes >= 4 * 2**20:  # numpy's threshold for huge pages: aligned to 2 MiB
        assert a.ctypes.data % (2 * 2**20) == 0
    # every row writable on its own, and a second call shares no memory
    a[:] = np.arange(rows)[:, None]
    b = fresh_rows(rows, size)
    b[:] = -1.0
    assert not np.shares_memory(a, b)
    np.testing.assert_array_equal(a[:, -1], np.arange(rows))
