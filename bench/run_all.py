"""`make bench`: every benchmark of bench/, one after the other, each printing its own ratios.

    .venv/bin/python bench/run_all.py [--only NAME]

Each benchmark generates its reach once into bench/output/ (git-ignored) and reuses it.
Benchmarks measure side by side in one run; they are never timed tests.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ORDER = ("meshread", "locate", "maphabitat", "flowhabitat", "drift")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--only", default="")
    args = ap.parse_args()
    failed = []
    for name in ORDER:
        if args.only and args.only != name:
            continue
        print(f"\n=== bench/{name}.py", flush=True)
        t = time.perf_counter()
        res = subprocess.run([sys.executable, str(HERE / f"{name}.py")])
        print(f"=== bench/{name}.py: {time.perf_counter() - t:.0f} s, exit {res.returncode}", flush=True)
        if res.returncode:
            failed.append(name)
    if failed:
        print("failed:", ", ".join(failed))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
