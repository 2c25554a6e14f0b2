"""Helpers shared by the benchmarks (each runs its variants in fresh child processes)."""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
from pathlib import Path


def peak_mb() -> float:
    """Peak resident set size of this process image (VmHWM; ru_maxrss would carry the parent's
    peak across fork + exec)."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def run_child(script: str, kind: str, reach: Path) -> dict:
    """Run ``script --child kind --reach reach`` in a fresh process; its 'RESULT {json}' line as a dict."""
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", PYTHONDONTWRITEBYTECODE="1")
    out = subprocess.run([sys.executable, script, "--child", kind, "--reach", str(reach)], capture_output=True,
                         text=True, env=env)
    for line in out.stdout.splitlines():
        if line.startswith("RESULT "):
            return json.loads(line[7:])
    raise RuntimeError(f"{kind} failed:\n{out.stdout[-3000:]}\n{out.stderr[-3000:]}")
