"""Headless through qgis_process: the provider is listed with every algorithm, and one runs.

Debian's qgis_process wrapper passes a flag the 3.22 binary rejects, so the binary is called with
QGIS_PLUGINPATH pointing at the staged plugin (build/plugins, made by `make setup`). qgis_process
runs the system Python; the venv's site-packages give it shapely 2.0.
"""

import csv
import os
import shutil
import subprocess
import sysconfig
from pathlib import Path

import pytest

from tests.qgis.test_provider import DESIGNED_IDS

ROOT = Path(__file__).resolve().parents[2]
BIN = shutil.which("qgis_process.bin") or "/usr/bin/qgis_process.bin"
STAGE = ROOT / "build" / "plugins"


def _env(tmp_path):
    return {**os.environ, "QT_QPA_PLATFORM": "offscreen", "QGIS_PLUGINPATH": str(STAGE),
            "PYTHONPATH": sysconfig.get_paths()["purelib"], "HOME": str(tmp_path)}


@pytest.fixture(scope="module")
def qp_env(tmp_path_factory):
    if not Path(BIN).exists():
        pytest.fail("qgis_process.bin is missing: tools/install_sysdeps.sh installs the 'qgis' package")
    if not (STAGE / "channel_habitat" / "metadata.txt").exists():
        pytest.fail("the staged plugin is missing: run `make setup`")
    home = tmp_path_factory.mktemp("qgis_home")  # a fresh QGIS profile: the plugin must be enabled in it
    env = _env(home)
    subprocess.run([BIN, "plugins", "enable", "channel_habitat"], env=env, capture_output=True, timeout=120)
    return env


def test_list_shows_every_algorithm(qp_env):
    res = subprocess.run([BIN, "list"], env=qp_env, capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr[-2000:]
    ids = {line.split()[0].split(":")[1] for line in res.stdout.splitlines()
           if line.strip().startswith("channelhabitat:")}
    assert ids == DESIGNED_IDS


def test_fitrating_runs_headless(qp_env, tmp_path):
    records = tmp_path / "records.csv"
    # Exact records of Q = 50 (h - 10)^1.8 (ML/d, m): the fit must give the same levels back.
    with open(records, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["stage_m", "discharge_mld"])
        for h in (10.5, 11.0, 11.5, 12.0, 13.0, 14.0, 15.5, 17.0):
            w.writerow([h, 50.0 * (h - 10.0) ** 1.8])
    levels = tmp_path / "levels.csv"
    res = subprocess.run(
        [BIN, "run", "channelhabitat:fitrating", "--", f"RECORDS={records}", "STAGE_FIELD=stage_m",
         "DISCHARGE_FIELD=discharge_mld", "LADDER=100, 1000", f"RATING={tmp_path / 'rating.csv'}",
         f"LEVELS={levels}", f"REPORT={tmp_path / 'rating.html'}"],
        env=qp_env, capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stdout[-2000:] + res.stderr[-2000:]
    with open(levels, newline="") as fh:
        rows = list(csv.DictReader(fh))
    got = {float(r["q_mld"]): float(r["stage_m"]) for r in rows}
    for q, h in got.items():
        assert abs(h - (10.0 + (q / 50.0) ** (1 / 1.8))) < 1e-4
    assert "licensed professional practice" in (tmp_path / "rating.html").read_text()
