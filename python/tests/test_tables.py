# SPDX-License-Identifier: MIT
"""Products as tables, checked against astropy's own FITS reader (astropy.io.fits) and
Python's csv module."""

import csv

import numpy as np
import pytest
from astropy import units as u
from astropy.io import fits

import rungcal


def test_fits_product_with_units_matches_astropy_io_fits(demo):
    path = demo.path("fit1_residuals.fits")
    table = rungcal.read_residuals(path)
    with fits.open(path) as hdus:
        hdu = hdus["RESIDUALS"]
        assert len(table) == hdu.header["NAXIS2"]
        for i, name in enumerate(hdu.columns.names):
            unit = hdu.columns[i].unit
            assert str(table[name].unit or "") == str(u.Unit(unit) if unit else ""), name
            raw = hdu.data[name]
            if raw.dtype.kind == "f":
                np.testing.assert_array_equal(np.asarray(table[name], dtype=float), raw)
            elif raw.dtype.kind in "iu":
                np.testing.assert_array_equal(np.asarray(table[name]), raw)
    assert table["parallax_err_mas"].unit == u.mas
    # Provenance keywords (docs/file-formats.md, "Provenance") in meta.
    assert (table.meta["RGSTAGE"], table.meta["RGPRODUC"]) == ("fit", "fit_residuals")


def test_numpy_fallback_carries_units_nulls_and_meta(demo):
    path = demo.path("fit1_residuals.fits")
    astropy_table = rungcal.read_table(path, hdu="RESIDUALS")
    array = rungcal.read_table(path, hdu="RESIDUALS", astropy=False)
    assert isinstance(array, rungcal.TableArray) and array.dtype.names == tuple(astropy_table.colnames)
    assert array.units["parallax_err_mas"] == "mas"
    np.testing.assert_array_equal(array["m0"], np.asarray(astropy_table["m0"]))
    assert array.meta == dict(astropy_table.meta)
    assert set(array.null) == set(array.dtype.names)
    # The same HDU by number (1 = first extension) and by default (the first binary table).
    assert len(rungcal.read_table(path, hdu=1, astropy=False)) == len(array)
    assert len(rungcal.read_table(path, astropy=False)) == len(array)


def test_csv_product_types_its_columns(demo, tmp_path):
    out = tmp_path / "distances.fits"
    rungcal.run_stage("apply", store=demo.path("store"), calibration="halden-peak@latest", relation="W_VI",
                      targets=demo.path("targets_dereddened.fits"), out=out)
    hosts_fits = rungcal.read_table(out, hdu="HOSTS")
    hosts_csv = rungcal.read_table(tmp_path / "distances_hosts.csv")
    assert hosts_csv.colnames == hosts_fits.colnames
    assert hosts_csv["n_stars"].dtype.kind == "i" and hosts_csv["mu"].dtype.kind == "f"
    np.testing.assert_array_equal(np.asarray(hosts_csv["mu"]), np.asarray(hosts_fits["mu"]))  # shortest round trip
    assert list(hosts_csv["host"]) == ["Veyra Spiral"]
    # Python's csv module on the same file (after the "# key = value" lines).
    with open(tmp_path / "distances.csv") as f:
        rows = list(csv.DictReader(line for line in f if not line.startswith("#")))
    stars = rungcal.read_table(tmp_path / "distances.csv", astropy=False)
    assert len(stars) == len(rows)
    assert [float(r["mu"]) for r in rows] == list(stars["mu"])
    assert stars["outlier"].dtype == bool
    assert stars.meta["RGRELAT"] == "W_VI"


def test_fit_json_loads_as_python_objects(demo):
    fit = rungcal.read_fit(demo.path("fit1.json"))
    assert [r["name"] for r in fit["relations"]] == ["W_VI", "W_G", "Ks"]
    assert rungcal.read_json(demo.path("fit1.json")) == fit


def test_bad_table_input_raises_input_error(demo, tmp_path):
    with pytest.raises(rungcal.InputError) as e:
        rungcal.read_table(demo.path("missing.fits"))
    assert e.value.rule == "unreadable_file" and e.value.file == demo.path("missing.fits")
    with pytest.raises(rungcal.InputError) as e:
        rungcal.read_table(demo.path("fit1_residuals.fits"), hdu="NOPE")
    assert e.value.rule == "fits_hdu"
    bad = tmp_path / "bad.json"
    bad.write_text('{"relations": [{"name": 3}]}')
    with pytest.raises(rungcal.InputError) as e:
        rungcal.read_fit(bad)
    assert (e.value.rule, e.value.key) == ("fit_schema", "relations[0].name")
