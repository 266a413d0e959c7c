# SPDX-License-Identifier: MIT
"""Products as tables: FITS binary tables (units from TUNIT) and CSV products, read by the
library's readers, returned as astropy Tables when astropy is importable, else as numpy
structured arrays (TableArray: units, descriptions, nulls and header keywords attached)."""

import json
import os

import numpy as np

from . import _rungcal
from ._input import input_error


class TableArray(np.ndarray):
    """A numpy structured array with units ({column: unit}), descriptions, null
    ({column: bool array}: values missing in the file) and meta (header keywords)."""

    def __array_finalize__(self, obj):
        for attr in ("units", "descriptions", "null", "meta"):
            setattr(self, attr, getattr(obj, attr, {}))


def _column_array(column):
    values = column["values"]
    if column["type"] == "text":
        return np.array(values, dtype=str) if values else np.array([], dtype="U1")
    return np.asarray(values)


def _csv_keywords(path):
    """The "# key = value" lines the CSV writer puts before the header line."""
    meta = {}
    with open(path, encoding="utf-8", errors="replace") as f:
        for line in f:
            if not line.startswith("#"):
                break
            key, sep, value = line[1:].strip().partition(" = ")
            if sep:
                meta[key] = value
    return meta


def _as_astropy(data, astropy_table):
    table = astropy_table.Table()
    from astropy import units as u
    for c in data["columns"]:
        values, null = _column_array(c), np.asarray(c["null"], dtype=bool)
        unit = u.Unit(c["unit"], parse_strict="silent") if c["unit"] else None
        kind = astropy_table.MaskedColumn if null.any() and c["type"] != "real" else astropy_table.Column
        kwargs = {"mask": null} if kind is astropy_table.MaskedColumn else {}
        table[c["name"]] = kind(values, name=c["name"], unit=unit, description=c["description"] or None, **kwargs)
    table.meta.update(data["meta"])
    return table


def _as_numpy(data):
    columns = data["columns"]
    arrays = [_column_array(c) for c in columns]
    rows = len(arrays[0]) if arrays else 0
    out = np.zeros(rows, dtype=[(c["name"], a.dtype) for c, a in zip(columns, arrays)]).view(TableArray)
    for c, a in zip(columns, arrays):
        out[c["name"]] = a
    out.units = {c["name"]: c["unit"] for c in columns}
    out.descriptions = {c["name"]: c["description"] for c in columns}
    out.null = {c["name"]: np.asarray(c["null"], dtype=bool) for c in columns}
    out.meta = dict(data["meta"])
    return out


def read_table(path, hdu=None, astropy=None):
    """A product table. FITS: hdu None (the first binary table), an EXTNAME ("STARS") or an
    extension number (1 = first); units from TUNIT, descriptions from the TTYPE comments,
    header keywords in meta. CSV (what the stages write beside FITS products): column types
    from the values, header keywords from the leading "# key = value" lines; CSV carries no
    units. astropy None: an astropy Table when astropy is importable, else a TableArray;
    True or False to choose."""
    path = os.fspath(path)
    if _rungcal.has_fits_extension(path):
        name, index = (hdu, 0) if isinstance(hdu, str) else ("", int(hdu or 0))
        data = _rungcal.read_fits_table(path, name, index)
        data["meta"] = {key: value for key, value, _ in data["header"]}
    else:
        if hdu is not None:
            raise input_error("not_fits", "a CSV file has no HDUs: leave hdu out", file=path, key="hdu")
        data = _rungcal.read_csv_table(path)
        data["meta"] = _csv_keywords(path)
    if astropy is not False:
        try:
            from astropy import table as astropy_table
        except ImportError:
            if astropy:
                raise
        else:
            return _as_astropy(data, astropy_table)
    return _as_numpy(data)


def read_json(path):
    """A JSON product (grid.json, run_state.json, ...) as Python objects, read as rungcal
    reads it (nesting depth and syntax checked)."""
    return json.loads(_rungcal.read_json_text(os.fspath(path)))


def read_fit(path):
    """A rungcal-fit result (fit.json) as Python objects, checked as publish and apply check
    it (rule fit_schema)."""
    return json.loads(_rungcal.read_fit_text(os.fspath(path)))


def read_residuals(path, astropy=None):
    """A fit's per-star residuals (fit_residuals.fits, HDU RESIDUALS) as a table."""
    return read_table(path, hdu="RESIDUALS", astropy=astropy)
