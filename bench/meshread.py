"""Benchmark: a UGRID mesh of about one million faces read into arrays (DESIGN.md section 7 target:
under 0.3 s), side by side with reading the same mesh through the PyQGIS mesh API.

    .venv/bin/python bench/meshread.py [--repeat 3]

The mesh is generated once into bench/output/mesh_1m/ (sample_gis.generate: 40 km reach, regime
'weir', one discharge, mesh face size 2.5 m -> ~0.97 million faces; reused while it exists).

Variants, each timed in this process (best of --repeat; the file is in the OS page cache after the
first read):
  channel habitat   plugin.gis.runs.read_mesh_run: topology, face centroids and areas (shoelace),
                    depth and velocity of one time step, wet faces -> HydraulicField. The mesh
                    topology cache is cleared before every repeat (a cold read).
  pyqgis            QgsMeshLayer + dataProvider().populateMesh + vertex/face loops and
                    datasetValues blocks: what a script written against the PyQGIS API does.
Prints wall times and the ratio.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
OUT = ROOT / "bench" / "output" / "mesh_1m"


def ensure_mesh() -> Path:
    files = sorted(OUT.glob("mesh/weir/*.nc"))
    if files:
        return files[0]
    from sample_gis.generate import generate

    print("generating a 40 km reach with a ~1 million-face mesh (once) ...", flush=True)
    generate(OUT, cell=20.0, length_km=40.0, regimes=("weir",), mesh_regimes=("weir",), mesh_face_size=2.5,
             discharges=(3000,), verbose=False)
    return sorted(OUT.glob("mesh/weir/*.nc"))[0]


def read_ours(path: Path):
    from plugin.core.sources import RunSource
    from plugin.gis import runs

    runs._MESH_CACHE.clear()
    t = time.perf_counter()
    fld = runs.read_mesh_run(RunSource(mesh=str(path)))
    return time.perf_counter() - t, fld


def read_pyqgis(path: Path):
    import numpy as np
    from qgis.core import QgsMesh, QgsMeshDatasetIndex, QgsMeshLayer

    t = time.perf_counter()
    layer = QgsMeshLayer(str(path), "mesh", "mdal")
    dp = layer.dataProvider()
    mesh = QgsMesh()
    dp.populateMesh(mesh)
    nv, nf = mesh.vertexCount(), mesh.faceCount()
    vx = np.fromiter((mesh.vertex(i).x() for i in range(nv)), float, nv)
    vy = np.fromiter((mesh.vertex(i).y() for i in range(nv)), float, nv)
    faces = [mesh.face(i) for i in range(nf)]
    groups = {dp.datasetGroupMetadata(g).name(): g for g in range(dp.datasetGroupCount())}
    depth = np.asarray(dp.datasetValues(QgsMeshDatasetIndex(groups["depth"], 0), 0, nf).values())
    vel = np.asarray(dp.datasetValues(QgsMeshDatasetIndex(groups["velocity"], 0), 0, nf).values())
    return time.perf_counter() - t, (nf, len(faces), vx.size + vy.size, depth.size, vel.size)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    path = ensure_mesh()
    from qgis.core import QgsApplication

    app = QgsApplication([], False)
    app.initQgis()
    ours, theirs = [], []
    fld = None
    for _ in range(args.repeat):
        t, fld = read_ours(path)
        ours.append(t)
        theirs.append(read_pyqgis(path)[0])
    n_faces = len(fld.support.face_nodes)
    print(f"mesh: {path.relative_to(ROOT)}  {n_faces:,} faces ({fld.n:,} wet)")
    print(f"{'variant':<18}{'best s':>9}{'median s':>10}")
    for name, ts in (("channel habitat", ours), ("pyqgis", theirs)):
        ts = sorted(ts)
        print(f"{name:<18}{ts[0]:>9.3f}{ts[len(ts) // 2]:>10.3f}")
    print(f"ratio pyqgis / channel habitat: {min(theirs) / min(ours):.1f}x;  target: channel habitat < 0.3 s "
          f"per million faces -> {min(ours) / (n_faces / 1e6):.3f} s per million faces")
    app.exitQgis()
    return 0


if __name__ == "__main__":
    sys.exit(main())
