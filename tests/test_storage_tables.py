"""Long tables (CSV, Parquet, FITS) streamed as objects, and conversion to survey files.

Correctness source: tables are written by reference writers (Python's csv
module, pyarrow.parquet, astropy.io.fits) from known arrays and must read
back to exactly those arrays (round trip, common practice). Floats are
written with ``repr`` so text round trips are exact.
"""

from __future__ import annotations

import csv
import gzip

import numpy as np
import pytest

from longwave.storage import (
    SurveyFile,
    iter_table,
    iter_table_batches,
    resolve_columns,
    survey_from_csv,
    survey_from_fits,
    survey_from_folder,
    survey_from_parquet,
    survey_from_table,
)


def _objects(rng, m=9):
    out = {}
    for i in range(m):
        k = int(rng.integers(1, 25))
        out[f"star{i:03d}"] = (np.sort(rng.uniform(58000, 59000, k)), rng.normal(17, 1, k),
                               rng.uniform(0.01, 0.3, k))
    return out


def _write_csv(path, objects, header=("objid", "mjd", "mag", "magerr"), opener=open):
    with opener(path, "wt", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for oid, cols in objects.items():
            for row in zip(*cols):
                w.writerow([oid, *map(repr, map(float, row))][: len(header)])


def _assert_same(got, objects, with_err=True):
    got = list(got)
    assert [o.id for o in got] == list(objects)
    for o in got:
        t, y, e = objects[o.id]
        np.testing.assert_array_equal(o.t, t)
        np.testing.assert_array_equal(o.y, y)
        if with_err:
            np.testing.assert_array_equal(o.err, e)
        else:
            assert o.err is None


@pytest.mark.parametrize("header", [
    ("objid", "mjd", "mag", "magerr"),
    ("ID", "Time", "Flux", "Sigma"),
    ("source_id", "t", "y", "err"),
    ("object", "jd", "value", "error"),
])
@pytest.mark.parametrize("chunk_rows", [1, 7, 65536])
def test_csv_spellings_and_chunk_boundaries(tmp_path, rng, header, chunk_rows):
    objects = _objects(rng)
    path = tmp_path / "long.csv"
    _write_csv(path, objects, header)
    _assert_same(iter_table(path, chunk_rows=chunk_rows), objects)


def test_gzipped_csv_and_no_error_column(tmp_path, rng):
    objects = _objects(rng)
    path = tmp_path / "long.csv.gz"
    _write_csv(path, objects, ("objid", "mjd", "mag"), opener=gzip.open)
    _assert_same(iter_table(path, chunk_rows=5), objects, with_err=False)
    survey_from_table(path, tmp_path / "s.h5")
    with SurveyFile(tmp_path / "s.h5") as sf:
        assert not sf.has_err and sf.get("star003").err is None


def test_explicit_columns_and_errors_naming_choices():
    names = ["obs", "mjd", "hjd", "mag", "e"]
    assert resolve_columns(names, {"id": "obs", "time": "hjd", "error": "e"}) == {
        "id": "obs", "time": "hjd", "value": "mag", "error": "e"}
    with pytest.raises(ValueError, match=r"several columns could be the time column "
                                         r"\['mjd', 'hjd'\].*columns=\{'time': 'mjd'\}"):
        resolve_columns(names, {"id": "obs"})
    with pytest.raises(ValueError, match="no id column among"):
        resolve_columns(names, {"time": "mjd"})
    with pytest.raises(ValueError, match="must be one of id, time, value, error, got"):
        resolve_columns(names, {"flux": "mag"})
    with pytest.raises(ValueError, match="'zz' given for value is not in the table"):
        resolve_columns(names, {"id": "obs", "time": "mjd", "value": "zz"})
    assert resolve_columns(["id", "t", "y", "err"], {"error": None})["error"] is None


def test_reappearing_id_names_object_and_line(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("id,t,y\na,1,2\na,2,3\nb,1,1\na,3,4\n")
    with pytest.raises(ValueError, match=r"t.csv, line 5: object 'a' reappears after other "
                                         r"objects.*sort the table by id"):
        list(iter_table(path, chunk_rows=2))
    with pytest.raises(ValueError, match="'a' reappears"):
        survey_from_csv(path, tmp_path / "s.h5")
    assert not (tmp_path / "s.h5").exists()


def test_streams_objects_before_reading_the_rest(tmp_path):
    # A bad line far down: the first objects arrive before the reader reaches it.
    lines = ["id,t,y"] + [f"o{i},{j},{j}" for i in range(50) for j in range(3)] + ["x,oops,1"]
    path = tmp_path / "t.csv"
    path.write_text("\n".join(lines) + "\n")
    it = iter_table(path, chunk_rows=10)
    first = next(it)
    assert first.id == "o0" and first.t.tolist() == [0.0, 1.0, 2.0]
    with pytest.raises(ValueError, match=r"line 152: column 't' must be numeric, got 'oops'"):
        list(it)


def test_blank_fields_are_missing_values_and_meta_columns(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("id,t,y,field,ra\na,1,,F1,10.5\na,2,3,F1,10.5\nb,1,1,F2,3\n")
    objs = list(iter_table(path, meta=["field", "ra"]))
    assert np.isnan(objs[0].y[0]) and objs[0].y[1] == 3.0
    assert objs[0].meta == {"field": "F1", "ra": 10.5} and objs[1].meta == {"field": "F2", "ra": 3}
    path.write_text("id,t,y,field\na,1,2,F1\na,2,3,F2\n")
    with pytest.raises(ValueError, match=r"line 3: meta column 'field' must be constant"):
        list(iter_table(path, meta=["field"]))


def test_batches_with_skip(tmp_path, rng):
    objects = _objects(rng, 11)
    path = tmp_path / "t.csv"
    _write_csv(path, objects)
    batches = list(iter_table_batches(path, batch_size=4, skip={"star001", "star007"},
                                      chunk_rows=3))
    assert [len(b) for b in batches] == [4, 4, 1]
    assert [o.id for b in batches for o in b] == [k for k in objects
                                                   if k not in ("star001", "star007")]


def test_csv_to_survey_round_trip(tmp_path, rng):
    objects = _objects(rng, 30)
    _write_csv(tmp_path / "t.csv", objects)
    assert survey_from_csv(tmp_path / "t.csv", tmp_path / "s.h5", chunk_rows=16) == 30
    with SurveyFile(tmp_path / "s.h5") as sf:
        _assert_same((sf[i] for i in range(len(sf))), objects)


def test_folder_of_csvs(tmp_path, rng):
    objects = _objects(rng, 6)
    folder = tmp_path / "lc"
    folder.mkdir()
    for oid, cols in objects.items():
        with open(folder / f"{oid}.csv", "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(["HJD", "flux", "flux_err"])
            w.writerows([list(map(repr, map(float, row))) for row in zip(*cols)])
    assert survey_from_folder(folder, tmp_path / "s.h5") == 6
    with SurveyFile(tmp_path / "s.h5") as sf:
        _assert_same((sf[i] for i in range(len(sf))), objects)
    with pytest.raises(ValueError, match=r"no files match '\*.txt'"):
        survey_from_folder(folder, tmp_path / "s2.h5", pattern="*.txt")


def test_parquet_by_record_batches(tmp_path, rng):
    pa = pytest.importorskip("pyarrow")
    pq = pytest.importorskip("pyarrow.parquet")
    objects = _objects(rng, 12)
    ids = np.concatenate([[k] * len(v[0]) for k, v in objects.items()])
    cols = [np.concatenate([v[j] for v in objects.values()]) for j in range(3)]
    table = pa.table({"object_id": ids, "mjd": cols[0], "flux": cols[1], "flux_err": cols[2]})
    path = tmp_path / "t.parquet"
    pq.write_table(table, path, row_group_size=10)
    _assert_same(iter_table(path, chunk_rows=6), objects)
    assert survey_from_parquet(path, tmp_path / "s.h5", chunk_rows=6) == 12
    with SurveyFile(tmp_path / "s.h5") as sf:
        _assert_same((sf[i] for i in range(len(sf))), objects)
    bad = pa.table({"id": np.array([3, 3, 4, 3]), "t": np.arange(4.0), "y": np.zeros(4)})
    pq.write_table(bad, tmp_path / "bad.parquet")
    with pytest.raises(ValueError, match=r"row 3 \(counting from 0\): object '3' reappears"):
        list(iter_table(tmp_path / "bad.parquet"))


def test_fits_binary_table(tmp_path, rng):
    fits = pytest.importorskip("astropy.io.fits")
    objects = _objects(rng, 7)
    ids = np.concatenate([[k] * len(v[0]) for k, v in objects.items()])
    cols = [np.concatenate([v[j] for v in objects.values()]) for j in range(3)]
    hdu = fits.BinTableHDU.from_columns([
        fits.Column(name="OBJID", format="12A", array=ids),
        fits.Column(name="MJD", format="D", array=cols[0]),
        fits.Column(name="MAG", format="D", array=cols[1]),
        fits.Column(name="MAGERR", format="D", array=cols[2]),
    ])
    path = tmp_path / "t.fits"
    hdu.writeto(path)
    _assert_same(iter_table(path, chunk_rows=5), objects)
    assert survey_from_fits(path, tmp_path / "s.h5", chunk_rows=5) == 7
    with SurveyFile(tmp_path / "s.h5") as sf:
        _assert_same((sf[i] for i in range(len(sf))), objects)


def test_unknown_suffix_lists_formats(tmp_path):
    with pytest.raises(ValueError, match="format must be one of csv, parquet, fits"):
        list(iter_table(tmp_path / "t.xlsx"))
