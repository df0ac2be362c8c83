"""Result store: rows, resume, predictions, JSON attributes (layout: docs/layouts.md).

Correctness source: the ObjectResult records appended are the reference
(round trip, common practice); raw h5py checks the documented layout.
"""

from __future__ import annotations

import dataclasses
import json

import h5py
import numpy as np
import pytest

from longwave.storage import STATUSES, ObjectResult, ResultStore, ResultTable

PARAMS = ["matern32.amplitude", "matern32.scale", "mean"]


def _result(i, rng):
    status = STATUSES[i % len(STATUSES)]
    params = {} if status == "bad_input" else {
        "matern32.amplitude": float(rng.uniform(0.1, 2)), "matern32.scale": float(i + 1.5)}
    return ObjectResult(
        id=f"obj-{i}", status=status, method="kalman", n=10 + i, params=params,
        log_marginal_likelihood=float(rng.normal()), bound_gap=float("nan"),
        n_evaluations=i * 3, converged=i % 2 == 0, message=f"message {i} ünïcode",
        runtime=0.01 * i, reduced_chi2=1.0 + 0.1 * i, n_clipped=i % 4,
    )


def test_round_trip_every_field(tmp_path, rng):
    path = tmp_path / "r.h5"
    results = [_result(i, rng) for i in range(23)]
    config = {"method": "kalman", "clip": 5.0, "nested": {"a": [1, 2]}}
    with ResultStore(path, PARAMS, config, model={"kernel": "matern32"}, flush_every=5) as st:
        for r in results:
            st.append(r)
    table = ResultStore.read(path)
    assert isinstance(table, ResultTable) and len(table) == 23 and table.merged
    assert table.config == config and table.model == {"kernel": "matern32"}
    for i, r in enumerate(results):
        got = table.row(i)
        for f in dataclasses.fields(ObjectResult):
            a, b = getattr(got, f.name), getattr(r, f.name)
            assert a == b or (isinstance(a, float) and np.isnan(a) and np.isnan(b)), f.name
    assert np.isnan(table.params["mean"]).all()
    assert table.id.dtype.kind == "U" and table.n.dtype == np.int64


def test_table_has_a_column_for_every_record_field():
    # Guard for the shared contract: a field added to ObjectResult must be readable.
    table_fields = {f.name for f in dataclasses.fields(ResultTable)}
    assert {f.name for f in dataclasses.fields(ObjectResult)} <= table_fields


def test_layout_status_codes_and_json_attributes(tmp_path, rng):
    path = tmp_path / "r.h5"
    with ResultStore(path, PARAMS, {"k": 1}) as st:
        st.append(ObjectResult(id="a", status="failed", message="boom"))
    with h5py.File(path, "r") as f:
        codes = json.loads(f.attrs["status_codes"])
        assert codes == {s: i for i, s in enumerate(STATUSES)}
        assert f["results/status"].dtype == np.int8
        assert f["results/status"][0] == codes["failed"]
        assert json.loads(f.attrs["config"]) == {"k": 1}
        assert list(f["results/params"]) == sorted(PARAMS)
        assert f.attrs["longwave_version"]


def test_resume_skips_done_and_refuses_duplicates(tmp_path, rng):
    path = tmp_path / "r.h5"
    with ResultStore(path, PARAMS, {"k": 1}, flush_every=4) as st:
        for i in range(10):
            st.append(_result(i, rng))
    with pytest.raises(FileExistsError, match="resume=True"):
        ResultStore(path, PARAMS, {"k": 1})
    with ResultStore(path, PARAMS, {"k": 1}, resume=True) as st:
        assert st.done_ids() == {f"obj-{i}" for i in range(10)}
        with pytest.raises(ValueError, match="'obj-3' is already in"):
            st.append(_result(3, rng))
        for i in range(10, 15):
            st.append(_result(i, rng))
    table = ResultStore.read(path)
    assert sorted(table.id.tolist()) == sorted(f"obj-{i}" for i in range(15))


def test_resume_with_different_config_or_params_is_refused(tmp_path):
    path = tmp_path / "r.h5"
    with ResultStore(path, PARAMS, {"k": 1, "m": 2}):
        pass
    with pytest.raises(ValueError, match=r"keys differing: \['k'\]"):
        ResultStore(path, PARAMS, {"k": 9, "m": 2}, resume=True)
    with pytest.raises(ValueError, match="param_names must match"):
        ResultStore(path, ["other"], {"k": 1, "m": 2}, resume=True)


def test_unknown_parameter_lists_valid_names(tmp_path):
    with ResultStore(tmp_path / "r.h5", PARAMS) as st:
        with pytest.raises(ValueError, match=r"must be one of \[.*matern32.scale.*\], got \['x'\]"):
            st.append(ObjectResult(id="a", status="ok", params={"x": 1.0}))


def test_second_writer_is_refused(tmp_path):
    with ResultStore(tmp_path / "r.h5", PARAMS):
        with pytest.raises(RuntimeError, match="another process"):
            ResultStore(tmp_path / "r.h5", PARAMS, resume=True)


def test_predictions_round_trip_across_flushes(tmp_path, rng):
    path = tmp_path / "r.h5"
    grids = {}
    with ResultStore(path, PARAMS, flush_every=2) as st:
        for i in range(5):
            k = int(rng.integers(0, 30))
            grids[f"obj-{i}"] = (np.linspace(0, 1, k), rng.normal(size=k), rng.uniform(size=k))
            st.append_prediction(f"obj-{i}", *grids[f"obj-{i}"])
            st.append(_result(i, rng))
        # Readable before the merge, from the journal.
        np.testing.assert_array_equal(ResultStore.read_prediction(path, "obj-1")[1],
                                      grids["obj-1"][1])
    for key, arrays in grids.items():
        for got, want in zip(ResultStore.read_prediction(path, key), arrays):
            np.testing.assert_array_equal(got, want)
    with pytest.raises(KeyError, match="obj-99"):
        ResultStore.read_prediction(path, "obj-99")


def test_flush_makes_rows_readable_before_close(tmp_path, rng):
    path = tmp_path / "r.h5"
    with ResultStore(path, PARAMS, flush_every=1000) as st:
        st.append(_result(0, rng))
        assert len(ResultStore.read(path)) == 0
        st.flush()
        table = ResultStore.read(path)
        assert table.id.tolist() == ["obj-0"] and not table.merged


def test_resume_accepts_the_same_config_with_nan(tmp_path):
    # JSON keeps NaN; equal configs must compare equal even though NaN != NaN.
    path = tmp_path / "r.h5"
    config = {"clip": float("nan"), "restarts": 2}
    with ResultStore(path, PARAMS, config) as st:
        st.append(ObjectResult(id="a", status="ok"))
    with ResultStore(path, PARAMS, dict(config), resume=True) as st:
        assert st.done_ids() == {"a"}
