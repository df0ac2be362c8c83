"""What the benchmark reads: one series (CSV, .npy, .npz) or objects of a survey file.

Single-series formats:

* CSV with columns ``time,value[,error]``, with or without a header line (a
  header may name the columns in any order, with the spellings that
  :mod:`longwave.storage.tables` recognises: time/t/mjd, value/y/mag, error/err);
* ``.npy``: an array of shape (n, 2) or (n, 3) with the same columns;
* ``.npz``: arrays named ``time`` (or ``t``), ``value`` (or ``y``) and
  optionally ``error`` (or ``err``).

A file starting with the HDF5 signature is read as a survey file through
:class:`longwave.storage.SurveyFile`, and ``objects`` of its objects are
sampled with the seed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..series import Series
from ..storage import SurveyFile
from ..storage.tables import read_object_csv
from ..survey import DataScales, build_model, load_model_file, parse_spec

_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
_NPZ_NAMES = {"time": ("time", "t"), "value": ("value", "y"), "error": ("error", "err")}


def _series_from_columns(cols: np.ndarray, path) -> Series:
    if cols.ndim != 2 or cols.shape[1] not in (2, 3):
        raise ValueError(
            f"{path}: expected 2 or 3 columns (time, value[, error]), got an array of shape "
            f"{cols.shape}"
        )
    try:
        return Series(cols[:, 0], cols[:, 1], cols[:, 2] if cols.shape[1] == 3 else None)
    except ValueError as exc:
        raise ValueError(f"{path}: {exc}") from exc


def _read_csv(path) -> Series:
    with open(path, encoding="utf-8") as fh:
        fields = fh.readline().strip().split(",")
    try:
        [float(f) for f in fields]
    except ValueError:
        # A header: the storage layer's reader knows the column spellings.
        t, y, err = read_object_csv(path)
        return _series_from_columns(np.column_stack([t, y] + ([] if err is None else [err])),
                                    path)
    try:
        data = np.loadtxt(path, delimiter=",", ndmin=2)
    except ValueError as exc:
        raise ValueError(f"{path}: not a numeric CSV of time,value[,error] ({exc})") from exc
    return _series_from_columns(data, path)


def _read_npz(path) -> Series:
    with np.load(path) as npz:
        cols = []
        for key, accepted in _NPZ_NAMES.items():
            hit = next((a for a in accepted if a in npz.files), None)
            if hit is None and key != "error":
                raise ValueError(
                    f"{path}: no array named {' or '.join(map(repr, accepted))}; it holds "
                    f"{npz.files}. Save with np.savez(path, time=t, value=y, error=err)"
                )
            if hit is not None:
                cols.append(np.asarray(npz[hit], dtype=float))
    return _series_from_columns(np.column_stack(cols), path)


def is_survey_file(path) -> bool:
    """Whether ``path`` starts with the HDF5 signature (survey files are HDF5)."""
    with open(path, "rb") as fh:
        return fh.read(8) == _HDF5_SIGNATURE


def load_series(path) -> Series:
    """Read one series from CSV, ``.npy`` or ``.npz`` (see the module docstring)."""
    path = Path(path)
    if not path.is_file():
        raise FileNotFoundError(f"input file {path} does not exist")
    suffix = path.suffix.lower()
    if suffix == ".npy":
        return _series_from_columns(np.load(path), path)
    if suffix == ".npz":
        return _read_npz(path)
    if suffix in (".csv", ".txt", ""):
        return _read_csv(path)
    raise ValueError(
        f"{path}: unknown input format {suffix!r}; give a CSV (time,value,error), a .npy or "
        ".npz file, or a survey HDF5 file"
    )


def load_objects(path, objects: int | None = None, seed: int = 0) -> list[tuple[str, Series]]:
    """The series to benchmark: the one in ``path``, or ``objects`` sampled from a survey.

    Parameters
    ----------
    path : str or Path
    objects : int, optional
        Objects to sample from a survey file (default 3, or all if fewer); not allowed for a
        single-series file.
    seed : int, default 0
        Seeds the sample, drawn without replacement.

    Returns
    -------
    list of (str, Series)
        Identifier (the file name for a single series) and series.
    """
    path = Path(path)
    if not path.is_file():
        raise FileNotFoundError(f"input file {path} does not exist")
    if not is_survey_file(path):
        if objects is not None:
            raise ValueError(
                f"--objects applies to survey files only, and {path} holds one series; "
                "leave --objects out"
            )
        return [(path.stem, load_series(path))]
    with SurveyFile(path) as survey:
        k = min(3, len(survey)) if objects is None else int(objects)
        if not 1 <= k <= len(survey):
            raise ValueError(
                f"objects must lie between 1 and the {len(survey)} objects of {path}, got {k}"
            )
        picks = np.sort(np.random.default_rng(seed).choice(len(survey), size=k, replace=False))
        out = []
        for i in picks:
            obj = survey[int(i)]
            out.append((obj.id, Series(obj.t, obj.y, obj.err)))
    return out


def model_from_spec(spec: str, series: Series):
    """The model a specification (or a TOML model file's path) denotes for this series.

    Starting values left ``auto`` come from the series' own scales, as in the
    survey runner (:func:`longwave.survey.build_model`).
    """
    spec_obj = load_model_file(spec) if Path(spec).suffix == ".toml" else parse_spec(spec)
    return build_model(spec_obj, DataScales.from_arrays(series.t, series.y,
                                                        series.err if series.has_err else None))
