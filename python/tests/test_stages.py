# SPDX-License-Identifier: MIT
"""Stages run from Python against the same stages run from the command line
(build/bin/rungcal-<stage>): the same products and the same refusals."""

import json
import pickle

import pytest

import rungcal
from conftest import BOOTSTRAP


def without_time(fit):
    fit = json.loads(json.dumps(fit))
    fit["provenance"].pop("created_utc")
    return fit


def test_fit_from_python_equals_the_command_lines(demo, tmp_path):
    out = tmp_path / "fit.json"
    result = rungcal.run_stage("fit", config=demo.path("fit.toml"), input=demo.path("dered2.fits"), out=out,
                               bootstrap=BOOTSTRAP)
    assert (result.exit_code, result.exit_name) == (0, "success")
    assert result.summary == demo.fit_summary  # what rungcal-fit printed for the same catalog
    cli, py = rungcal.read_fit(demo.path("fit2.json")), rungcal.read_fit(out)
    assert without_time(py) == without_time(cli)
    cli_res = rungcal.read_residuals(demo.path("fit2_residuals.fits"), astropy=False)
    py_res = rungcal.read_residuals(tmp_path / "fit_residuals.fits", astropy=False)
    assert cli_res.tobytes() == py_res.tobytes()


def test_outcomes_other_than_success_are_results(demo):
    # Publishing the content 'latest' already has: exit 0, "unchanged", no new version.
    r = rungcal.run_stage("publish", store=demo.path("store"), name="halden-peak", fit=demo.path("fit2.json"),
                          config=demo.path("fit.toml"))
    assert r.exit_code == 0 and rungcal.Store(demo.path("store")).versions() == [1, 2]


def test_bad_input_raises_input_error_with_rule_file_and_key(demo, tmp_path):
    bad = tmp_path / "fit.toml"
    bad.write_text(open(demo.path("fit.toml")).read().replace("max_ruwe = 1.4", "max_ruwe = 1.4\nmax_rwue = 1.4"))
    with pytest.raises(rungcal.InputError) as e:
        rungcal.run_stage("fit", config=bad, input=demo.path("dered1.fits"), out=tmp_path / "x.json")
    assert (e.value.rule, e.value.file, e.value.key) == ("unknown_config_key", str(bad), "fit.max_rwue")
    assert e.value.row == bad.read_text().splitlines().index("max_rwue = 1.4") + 1  # the key's line
    assert pickle.loads(pickle.dumps(e.value)).rule == "unknown_config_key"
    assert e.value.exit_code == 2 and not (tmp_path / "x.json").exists()
    with pytest.raises(rungcal.InputError) as e:
        rungcal.run_stage("fit", config=demo.path("fit.toml"), bootstrap="many")
    assert e.value.rule == "command_line" and "--bootstrap" in str(e.value)
    with pytest.raises(rungcal.InputError) as e:
        rungcal.run_stage("fit", config=demo.path("fit.toml"), input=tmp_path / "none.fits", out=tmp_path / "x.json")
    assert (e.value.rule, e.value.file) == ("unreadable_file", str(tmp_path / "none.fits"))
    with pytest.raises(rungcal.InputError) as e:
        rungcal.run_stage("fitt", config=demo.path("fit.toml"))
    assert e.value.rule == "unknown_stage" and "fit" in str(e.value)


def test_stage_names_are_the_command_lines():
    assert {"fit", "publish", "apply", "diff", "run"} <= set(rungcal.stage_names())
    assert rungcal.stage_arguments("a.toml", out="b", dry_run=True, force=False, wavelength=[5500, 12350]) == [
        "--config", "a.toml", "--out", "b", "--dry-run", "--wavelength", "5500", "12350"]
