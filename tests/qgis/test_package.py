"""The release zip has the layout and metadata the official QGIS plugin repository requires."""

import configparser
import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
REQUIRED = ("name", "description", "about", "version", "qgisMinimumVersion", "qgisMaximumVersion",
            "author", "email", "tracker", "repository", "hasProcessingProvider", "tags", "category", "icon")


def test_zip_structure_and_metadata(tmp_path):
    out = tmp_path / "channel_habitat.zip"
    subprocess.run([sys.executable, str(ROOT / "tools" / "package_plugin.py"), "--out", str(out)],
                   check=True, capture_output=True)
    with zipfile.ZipFile(out) as zf:
        names = zf.namelist()
        tops = {n.split("/")[0] for n in names}
        assert tops == {"channel_habitat"}
        for must in ("channel_habitat/__init__.py", "channel_habitat/metadata.txt", "channel_habitat/LICENSE",
                     "channel_habitat/provider.py", "channel_habitat/core/__init__.py",
                     "channel_habitat/resources/icons/channel_habitat.svg"):
            assert must in names, must
        for n in names:
            assert "__pycache__" not in n and not n.endswith((".pyc", ".pyo"))
            assert "/tests/" not in n and ".git" not in n
        meta = configparser.ConfigParser()
        meta.read_string(zf.read("channel_habitat/metadata.txt").decode("utf-8"))
        general = meta["general"]
        for key in REQUIRED:
            assert general.get(key, "").strip(), f"metadata.txt lacks {key}"
        assert general["qgisMinimumVersion"] == "3.22"
        assert general["qgisMaximumVersion"] == "4.99"
        assert general["hasProcessingProvider"] == "yes"
        assert general["category"] == "Analysis"
        assert f"channel_habitat/{general['icon']}" in names
        assert "GNU GENERAL PUBLIC LICENSE" in zf.read("channel_habitat/LICENSE").decode()


def test_zip_imports_as_channel_habitat(tmp_path, qgis_app):
    """Unpacked under its own name, the package imports and builds its plugin with iface=None."""
    out = tmp_path / "channel_habitat.zip"
    subprocess.run([sys.executable, str(ROOT / "tools" / "package_plugin.py"), "--out", str(out)],
                   check=True, capture_output=True)
    with zipfile.ZipFile(out) as zf:
        zf.extractall(tmp_path / "plugins")
    code = ("import sys; sys.path.insert(0, sys.argv[1]); import channel_habitat as c; "
            "from channel_habitat.provider import algorithm_classes; "
            "print(len(algorithm_classes())); p = c.classFactory(None); print(type(p).__name__)")
    res = subprocess.run([sys.executable, "-c", code, str(tmp_path / "plugins")], capture_output=True,
                         text=True, env={"QT_QPA_PLATFORM": "offscreen", "PATH": "/usr/bin:/bin"})
    assert res.returncode == 0, res.stderr
    assert "ChannelHabitatPlugin" in res.stdout
