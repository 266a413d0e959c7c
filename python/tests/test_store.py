# SPDX-License-Identifier: MIT
"""A store as data: versions, latest, history and the diff, checked against the store's
folders and against what the rungcal-diff command prints."""

import json
import math

import pytest

import rungcal
from conftest import run_cli


def test_versions_latest_and_history(demo):
    store = rungcal.Store(demo.path("store"))
    assert store.names() == ["halden-peak"]
    assert store.versions() == [1, 2]  # the two releases published by conftest.py
    assert store.latest() == 2 and store.withdrawn() == []
    history = store.history()
    assert [h["version"] for h in history] == [1, 2]
    assert [h["latest"] for h in history] == [False, True]
    assert history[1]["content_sha256"] == store.load(2).content_sha256
    assert store.load("halden-peak@1").version == 1 and store.load().version == 2


def test_diff_is_what_rungcal_diff_prints(demo):
    store = rungcal.Store(demo.path("store"))
    d = store.diff(1, 2)
    printed = run_cli("diff", "--store", demo.path("store"), "--from", "halden-peak@1", "--to", "halden-peak@latest")
    assert d["text"] == printed
    assert (d["from"], d["to"]) == ("halden-peak@1", "halden-peak@2")
    # a = None: the version before b, as rungcal-diff without --from (JSON: NaN equals NaN).
    assert json.dumps(store.diff(), sort_keys=True) == json.dumps(d, sort_keys=True)
    # Each shift against the two calibration files' parameters and covariance errors.
    one, two = store.load(1), store.load(2)
    assert len(d["shifts"]) > 0
    for s in d["shifts"]:
        a = one.parameters[s["relation"]][s["parameter"]]["value"]
        b = two.parameters[s["relation"]][s["parameter"]]["value"]
        assert (s["from"], s["to"]) == (a, b)
        assert s["shift"] == pytest.approx(b - a, abs=1e-15)
        if math.isfinite(s["from_error"]) and math.isfinite(s["to_error"]) and (s["from_error"] or s["to_error"]):
            assert s["shift_in_sigma"] == pytest.approx(s["shift"] / math.hypot(s["from_error"], s["to_error"]))
    # The second release changed the catalog the fit read: one input changed, the config not.
    assert any(i["what"] == "changed" for i in d["inputs"])
    assert d["config_changed"] is False
    assert d["max_shift_in_sigma"] == max(abs(s["shift_in_sigma"]) for s in d["shifts"]
                                          if not math.isnan(s["shift_in_sigma"]))


def test_bad_store_input_raises_input_error(demo):
    with pytest.raises(rungcal.InputError) as e:
        rungcal.Store(demo.path("no-store"))
    assert (e.value.rule, e.value.file) == ("unknown_calibration", demo.path("no-store"))
    store = rungcal.Store(demo.path("store"))
    with pytest.raises(rungcal.InputError) as e:
        store.diff(1, 7)
    assert e.value.rule == "unknown_calibration"
    with pytest.raises(rungcal.InputError) as e:
        store.diff(None, 1)
    assert e.value.rule == "no_previous_version"
    with pytest.raises(rungcal.InputError) as e:
        store.versions("other")
    assert (e.value.rule, e.value.key) == ("unknown_calibration", "other")
