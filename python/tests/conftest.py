# SPDX-License-Identifier: MIT
"""The demo scenario's products, made once per session by the command-line stages (the
executables in RUNGCAL_BIN_DIR) from sample_data/ and config/demo/, as scripts/demo.sh makes
them: the calibrators ingested, dereddened, fitted (bootstrap kept small) and published as
two versions of "halden-peak" (the second from the data release with smaller parallax
errors, sample_data/calibrators_release2.fits); the targets ingested and dereddened."""

import os
import shutil
import subprocess

import pytest

SOURCE = os.environ.get("RUNGCAL_SOURCE_DIR", os.path.join(os.path.dirname(__file__), "..", ".."))
BIN = os.environ.get("RUNGCAL_BIN_DIR", os.path.join(SOURCE, "build", "bin"))
DEMO = os.path.join(SOURCE, "config", "demo")
BOOTSTRAP = "20"  # resamples per fit: enough for bootstrap errors to exist, quick


def run_cli(stage, *args):
    """Runs build/bin/rungcal-<stage>; its stdout, or a failed test with its stderr."""
    r = subprocess.run([os.path.join(BIN, "rungcal-" + stage), *map(str, args)], capture_output=True, text=True)
    assert r.returncode == 0, f"rungcal-{stage} exit {r.returncode}: {r.stderr}"
    return r.stdout


class DemoProducts:
    def __init__(self, root):
        self.root = root

    def path(self, *parts):
        return os.path.join(self.root, *parts)


@pytest.fixture(scope="session")
def demo(tmp_path_factory):
    d = DemoProducts(str(tmp_path_factory.mktemp("demo")))
    shutil.copy(os.path.join(DEMO, "fit.toml"), d.path("fit.toml"))
    for release, catalog in ((1, "calibrators.fits"), (2, "calibrators_release2.fits")):
        cat, dered = d.path(f"catalog{release}.fits"), d.path(f"dered{release}.fits")
        run_cli("ingest", "--config", os.path.join(DEMO, "ingest.toml"), "--input",
                os.path.join(SOURCE, "sample_data", catalog), "--out", cat)
        run_cli("deredden", "--config", os.path.join(DEMO, "deredden.toml"), "--input", cat, "--out", dered)
        fit = d.path(f"fit{release}.json")
        d.fit_summary = run_cli("fit", "--config", d.path("fit.toml"), "--input", dered, "--out", fit,
                                "--bootstrap", BOOTSTRAP)
        run_cli("publish", "--store", d.path("store"), "--name", "halden-peak", "--fit", fit, "--residuals",
                d.path(f"fit{release}_residuals.fits"), "--config", d.path("fit.toml"))
    run_cli("ingest", "--config", os.path.join(DEMO, "ingest_targets.toml"), "--out", d.path("targets.fits"))
    run_cli("deredden", "--config", os.path.join(DEMO, "deredden_targets.toml"), "--input", d.path("targets.fits"),
            "--out", d.path("targets_dereddened.fits"))
    return d
