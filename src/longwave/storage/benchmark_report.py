"""Benchmark reports in HDF5 (optional beside the JSON report).

Layout ``benchmark_report`` version 1::

    /                     attrs: longwave_format="benchmark_report", format_version=1,
                                 longwave_version
    /report_json  ()      UTF-8 string: the whole JSON report, as written to report.json
    /methods/label (k,)   UTF-8 strings, one row per method setting
    /methods/<figure> (k,) float64 (NaN where not measured) or bool, one column per scalar
                          figure of a setting; nested figures are named with a dot
                          (``interpolation.nlpd``)

The columns make the figures readable with any HDF5 tool; the JSON string
keeps everything else (zoom curves, scaling points) without a second layout.
"""

from __future__ import annotations

import json
import math

import h5py
import numpy as np

from . import _h5

FORMAT = "benchmark_report"
FORMAT_VERSION = 1


def _flat(row: dict, prefix: str = "") -> dict:
    out = {}
    for key, value in row.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            if all(not isinstance(v, (dict, list)) for v in value.values()):
                out.update(_flat(value, name + "."))
        elif isinstance(value, bool) or isinstance(value, (int, float)) or value is None:
            out[name] = value
    return out


def _column(values):
    if all(isinstance(v, bool) for v in values):
        return np.asarray(values, dtype=bool)
    return np.asarray([math.nan if v is None else float(v) for v in values], dtype=np.float64)


def write_report_hdf5(path, report: dict, *, rows: str = "methods",
                      overwrite: bool = True) -> None:
    """Write a benchmark report (the JSON-ready dict of ``report.json``) to HDF5.

    Parameters
    ----------
    path : str or Path
    report : dict
        Plain JSON-compatible values.
    rows : str, default "methods"
        Key of the list of per-setting dicts that becomes ``/methods`` columns
        (``"combined"`` for a several-object report).
    overwrite : bool, default True

    Raises
    ------
    TypeError
        If ``report`` is not JSON-serialisable.
    FileExistsError
        If ``path`` exists and ``overwrite`` is False.
    """
    text = _h5.json_attr(report, "the benchmark report")
    rows = [r for r in report.get(rows, []) if isinstance(r, dict)]
    flats = [_flat(r) for r in rows]
    # Only figures present in every row make a column, so columns line up.
    names = [k for k in flats[0] if all(k in f for f in flats)] if flats else []
    with _h5.atomic_path(path, overwrite=overwrite) as tmp:
        with h5py.File(tmp, "w") as f:
            f.attrs["longwave_format"] = FORMAT
            f.attrs["format_version"] = FORMAT_VERSION
            f.attrs["longwave_version"] = _h5.package_version()
            f.create_dataset("report_json", data=text, dtype=_h5.STRING)
            group = f.create_group("methods")
            _h5.create_dataset(group, "label", _h5.STRING, kind="column",
                               data=[str(r.get("label", "")) for r in rows])
            for name in names:
                data = _column([fl[name] for fl in flats])
                _h5.create_dataset(group, name, data.dtype, kind="column", data=data)


def read_report_hdf5(path) -> dict:
    """The JSON report stored by :func:`write_report_hdf5`.

    Raises
    ------
    LayoutError
        If the file is not a benchmark report of a supported version.
    """
    with _h5.open_h5(path, "r", what="benchmark report") as f:
        _h5.check_format(f, str(path), FORMAT, FORMAT_VERSION)
        ds = f.get("report_json")
        if not isinstance(ds, h5py.Dataset):
            raise _h5.LayoutError(str(path), "/report_json", "is missing; rewrite the report")
        raw = _h5.read(ds, str(path), ())
    return json.loads(raw.decode("utf-8") if isinstance(raw, bytes) else raw)
