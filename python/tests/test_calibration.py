# SPDX-License-Identifier: MIT
"""Calibrations from Python: loading by every kind of reference, what they hold, and
predictions checked against the C++ reader (python/tests/predict_reference.cpp:
load_calibration, predict_absolute_magnitude and rungcal-apply's apply_calibration)."""

import json
import os
import subprocess

import numpy as np
import pytest

import rungcal


def cpp_reference(store, reference, relation, rows):
    """The C++ reader's (M, calibration error, mu, stat error, calibration error) per row of
    (log_period, feh, m0, m0_err)."""
    exe = os.environ["RUNGCAL_PREDICT_REFERENCE"]
    text = "".join(f"{p!r} {f!r} {m!r} {e!r}\n" for p, f, m, e in rows)
    out = subprocess.run([exe, store, reference, relation], input=text, capture_output=True, text=True, check=True)
    return np.array([[float(x) for x in line.split()] for line in out.stdout.splitlines()])


def test_demo_calibration_loads(demo):
    cal = rungcal.load_calibration(demo.path("store", "halden-peak@latest"))
    assert (cal.name, cal.version, cal.label) == ("halden-peak", 2, "halden-peak@2")
    # The demo fit's relations (config/demo/fit.toml).
    assert cal.relations == ["W_VI", "W_G", "Ks"]
    # Against the calibration file itself, read with Python's json module.
    with open(demo.path("store", "halden-peak", "v0002", "calibration.json")) as f:
        document = json.load(f)
    assert cal.document == document
    relation = document["fit"]["relations"][0]
    for p in relation["parameters"]:
        assert cal.parameters["W_VI"][p["name"]]["value"] == p["value"]
        assert cal.parameters["W_VI"][p["name"]]["error"] == p["error"]
    assert cal.parameter_names("W_VI") == relation["parameter_names"]
    cov = cal.covariance("W_VI")
    assert cov.shape == (len(relation["parameter_names"]),) * 2
    i = relation["parameter_names"].index("alpha")
    assert cov[i, i] == relation["covariance"][i][i]
    assert cal.provenance == document["fit"]["provenance"]
    assert cal.content_sha256 == document["content_sha256"]
    assert set(cal.warnings) >= {"W_VI", "W_G", "Ks"}
    # The simulated truth (sample_data/truth.json): W_VI slope -3.3 within 5 sigma.
    beta = cal.parameters["W_VI"]["beta"]
    with open(os.path.join(os.environ["RUNGCAL_SOURCE_DIR"], "sample_data", "truth.json")) as f:
        truth = json.load(f)
    assert abs(beta["value"] - truth["wesenheit"]["W_VI"]["beta"]) < 5 * beta["error"]


def test_every_reference_form_loads_the_same_version(demo):
    store = demo.path("store")
    forms = [f"{store}/halden-peak@2", f"{store}/halden-peak", f"{store}/halden-peak/v0002",
             f"{store}/halden-peak/latest", f"{store}/halden-peak/v0002/calibration.json"]
    for form in forms:
        assert rungcal.load_calibration(form).label == "halden-peak@2", form
    assert rungcal.load_calibration(f"{store}/halden-peak@1").version == 1


def test_predictions_equal_the_cpp_readers(demo):
    cal = rungcal.load_calibration(demo.path("store", "halden-peak@2"))
    rows = [(0.4 + 0.13 * k, -0.3 + 0.05 * k, 24.0 + 0.1 * k, 0.05 + 0.01 * k) for k in range(12)]
    for relation in cal.relations:
        ref = cpp_reference(demo.path("store"), "halden-peak@2", relation, rows)
        p, f, m, e = (np.array(c) for c in zip(*rows))
        value, error = cal.absolute_magnitude(relation, p, feh=f)
        np.testing.assert_allclose(value, ref[:, 0], rtol=0, atol=1e-12)
        np.testing.assert_allclose(error, ref[:, 1], rtol=0, atol=1e-12)
        mu, stat, cal_err = cal.distance_modulus(relation, m, p, feh=f, m0_err=e)
        np.testing.assert_allclose(mu, ref[:, 2], rtol=0, atol=1e-12)
        np.testing.assert_allclose(stat, ref[:, 3], rtol=0, atol=1e-12)
        np.testing.assert_allclose(cal_err, ref[:, 4], rtol=0, atol=1e-12)


def test_distance_moduli_equal_rungcal_apply_per_star(demo, tmp_path):
    # rungcal-apply's STARS table (docs/file-formats.md, "Distances") for the demo targets.
    out = tmp_path / "distances.fits"
    rungcal.run_stage("apply", store=demo.path("store"), calibration="halden-peak@latest", relation="W_VI",
                      targets=demo.path("targets_dereddened.fits"), out=out)
    stars = rungcal.read_table(out, hdu="STARS", astropy=False)
    targets = rungcal.read_table(demo.path("targets_dereddened.fits"), hdu="CATALOG", astropy=False)
    index = {t: i for i, t in enumerate(targets["id"])}
    rows = [index[s] for s in stars["id"]]
    cal = rungcal.load_calibration(demo.path("store", "halden-peak@latest"))
    mu, stat, cal_err = cal.distance_modulus("W_VI", targets["mag0_W_VI"][rows], stars["log_period_f"],
                                             feh=targets["feh"][rows], m0_err=targets["mag0_err_W_VI"][rows])
    np.testing.assert_allclose(mu, stars["mu"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(stat, stars["mu_stat_err"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(cal_err, stars["mu_cal_err"], rtol=0, atol=1e-12)


def test_scalars_give_floats_and_arrays_keep_their_shape(demo):
    cal = rungcal.load_calibration(demo.path("store", "halden-peak@latest"))
    m, e = cal.absolute_magnitude("W_VI", 1.2, feh=-0.1)
    assert isinstance(m, float) and isinstance(e, float)
    grid = np.array([[0.8, 1.0, 1.2], [1.4, 1.6, 1.8]])
    values, errors = cal.absolute_magnitude("W_VI", grid, feh=-0.1)  # a scalar broadcast over a 2-D grid
    assert values.shape == errors.shape == (2, 3)
    assert values[0, 2] == m and errors[0, 2] == e  # the same numbers, element for element
    assert cal.absolute_magnitude("W_VI", [1.2], feh=[-0.1])[0].shape == (1,)
    mu, stat, c = cal.distance_modulus("W_VI", 25.0, 1.2, feh=-0.1, m0_err=0.1)
    assert isinstance(mu, float) and mu == 25.0 - m and c == e
    mus = cal.distance_modulus("W_VI", np.full((2, 3), 25.0), grid, feh=-0.1, m0_err=0.1)
    assert all(a.shape == (2, 3) for a in mus) and mus[0][0, 2] == mu


def test_bad_calibration_input_raises_input_error_with_its_rule(demo):
    store = demo.path("store")
    cases = [
        (lambda: rungcal.load_calibration(f"{store}/halden-peak@9"), "unknown_calibration"),
        (lambda: rungcal.load_calibration(f"{store}/halden-peak@first"), "unknown_calibration"),
        (lambda: rungcal.load_calibration(f"{store}/no-such-name@latest"), "unknown_calibration"),
        (lambda: rungcal.load_calibration(demo.path("nowhere", "halden-peak@latest")), "unknown_calibration"),
        (lambda: rungcal.load_calibration(demo.path("fit.toml")), "json_syntax"),
        (lambda: rungcal.load_calibration(demo.path("fit1.json")), "not_a_calibration"),
    ]
    for call, rule in cases:
        with pytest.raises(rungcal.InputError) as e:
            call()
        assert e.value.rule == rule, str(e.value)
    cal = rungcal.load_calibration(f"{store}/halden-peak@latest")
    with pytest.raises(rungcal.InputError) as e:
        cal.absolute_magnitude("B_V", 1.0)
    assert (e.value.rule, e.value.key, e.value.file) == ("unknown_relation", "B_V", "halden-peak@2")
    with pytest.raises(rungcal.InputError) as e:
        cal.absolute_magnitude("W_VI", np.ones(3), feh=np.zeros(4))
    assert e.value.rule == "shape_mismatch" and "(3,)" in str(e.value) and "(4,)" in str(e.value)
    with pytest.raises(rungcal.InputError) as e:
        cal.distance_modulus("W_VI", np.ones(3), np.ones(2))
    assert e.value.rule == "shape_mismatch"
    with pytest.raises(rungcal.InputError) as e:
        cal.absolute_magnitude("W_VI", ["long"])
    assert (e.value.rule, e.value.key) == ("not_a_number", "log_period")
    # The demo relations have a metallicity term: no [Fe/H] (None or NaN) is refused, as in C++.
    for feh in (None, float("nan")):
        with pytest.raises(rungcal.InputError) as e:
            cal.absolute_magnitude("W_VI", 1.0, feh=feh)
        assert e.value.rule == "missing_value"
    # An empty array with an unknown relation still names the relation.
    with pytest.raises(rungcal.InputError) as e:
        cal.absolute_magnitude("B_V", np.array([]))
    assert e.value.rule == "unknown_relation"
