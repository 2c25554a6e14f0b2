"""Build dist/channel_habitat.zip: one top folder channel_habitat/ with __init__.py,
metadata.txt, LICENSE, the code and resources; no tests, caches, .pyc or VCS files."""

from __future__ import annotations

import argparse
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TOP = "channel_habitat"
SKIP_DIRS = {"__pycache__", ".git", ".pytest_cache", ".ruff_cache", "tests"}
SKIP_SUFFIXES = {".pyc", ".pyo", ".orig", ".rej", ".swp"}


def members():
    for base, prefix in ((ROOT / "plugin", TOP), (ROOT / "resources", f"{TOP}/resources")):
        for path in sorted(base.rglob("*")):
            rel = path.relative_to(base)
            if any(part in SKIP_DIRS or part.startswith(".") for part in rel.parts):
                continue
            if path.is_file() and path.suffix not in SKIP_SUFFIXES:
                yield path, f"{prefix}/{rel.as_posix()}"
    yield ROOT / "metadata.txt", f"{TOP}/metadata.txt"
    yield ROOT / "LICENSE", f"{TOP}/LICENSE"


def build(out: Path) -> Path:
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_suffix(".zip.partial")
    with zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED) as zf:
        for src, arc in members():
            zf.write(src, arc)
    tmp.replace(out)
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--out", default=str(ROOT / "dist" / f"{TOP}.zip"))
    args = ap.parse_args()
    path = build(Path(args.out))
    with zipfile.ZipFile(path) as zf:
        n = len(zf.namelist())
    print(f"wrote {path} ({n} files)")


if __name__ == "__main__":
    main()
