"""`make demo`: run Channel Habitat on the invented demo reach, headless, through Processing.

Every capability adds a step file to demo/steps/ (NN_name.py, run in name order). A step module
defines ``TITLE`` and ``run(demo) -> list[(label, path)]``; ``demo`` gives the sample folder, the
output folder, ``demo.run(alg_id, params)`` (Processing) and ``demo.log``. The demo writes an
index page, demo_output/index.html, that links every output, and prints where everything is.
"""

from __future__ import annotations

import argparse
import html
import importlib.util
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
# QGIS's own Python plugins (the Processing framework) are not on sys.path outside the QGIS app.
QGIS_PLUGINS = Path("/usr/share/qgis/python/plugins")
if QGIS_PLUGINS.is_dir() and str(QGIS_PLUGINS) not in sys.path:
    sys.path.append(str(QGIS_PLUGINS))


class Demo:
    def __init__(self, sample: Path, out: Path):
        self.sample = sample
        self.out = out
        self.scenarios = sample / "scenarios.csv"

    def run(self, alg_id: str, params: dict) -> dict:
        import processing
        from qgis.core import QgsProcessingContext, QgsProcessingFeedback

        class Feedback(QgsProcessingFeedback):
            def reportError(self, error, fatalError=False):  # noqa: N802
                print(f"    ! {error}")

            def pushInfo(self, info):  # noqa: N802
                print(f"    {info}")

            def pushWarning(self, warning):  # noqa: N802
                print(f"    warning: {warning}")

        t0 = time.perf_counter()
        res = processing.run(f"channelhabitat:{alg_id}", params, context=QgsProcessingContext(),
                             feedback=Feedback())
        self.log(f"  {alg_id} finished in {time.perf_counter() - t0:.1f} s")
        return res

    def path(self, *parts) -> str:
        p = self.out.joinpath(*parts)
        p.parent.mkdir(parents=True, exist_ok=True)
        return str(p)

    @staticmethod
    def log(msg: str):
        print(msg, flush=True)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--sample", default=str(ROOT / "sample_gis" / "generated"))
    ap.add_argument("--out", default=str(ROOT / "demo_output"))
    ap.add_argument("--only", default="", help="run only steps whose file name contains this")
    args = ap.parse_args()
    sample, out = Path(args.sample).resolve(), Path(args.out).resolve()
    out.mkdir(parents=True, exist_ok=True)

    from qgis.core import QgsApplication

    app = QgsApplication([], False)
    app.initQgis()
    from processing.core.Processing import Processing

    Processing.initialize()
    from plugin.provider import ChannelHabitatProvider

    provider = ChannelHabitatProvider()  # keep a reference: Processing does not own it from Python
    QgsApplication.processingRegistry().addProvider(provider)

    demo = Demo(sample, out)
    sections = []
    steps = sorted((ROOT / "demo" / "steps").glob("[0-9][0-9]_*.py"))
    failures = 0
    for step in steps:
        if args.only and args.only not in step.name:
            continue
        spec = importlib.util.spec_from_file_location(f"demo_step_{step.stem}", step)
        mod = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(mod)
        demo.log(f"== {mod.TITLE}")
        t0 = time.perf_counter()
        try:
            items = mod.run(demo) or []
        except Exception as exc:  # report and carry on, exit non-zero at the end
            import traceback

            traceback.print_exc()
            demo.log(f"  FAILED: {exc}")
            failures += 1
            items = []
        sections.append((mod.TITLE, items, time.perf_counter() - t0))
    write_index(out, sections)
    demo.log(f"\nDemo outputs are in {out}\n  open {out / 'index.html'} for an overview")
    app.exitQgis()
    return 1 if failures else 0


def write_index(out: Path, sections):
    rows = []
    for title, items, secs in sections:
        rows.append(f"<h2>{html.escape(title)} <small>({secs:.1f} s)</small></h2><ul>")
        for label, path in items:
            rel = os.path.relpath(path, out)
            rows.append(f'<li><a href="{html.escape(rel)}">{html.escape(label)}</a> '
                        f"<code>{html.escape(rel)}</code></li>")
        rows.append("</ul>")
    page = f"""<!DOCTYPE html><html><head><meta charset="utf-8"><title>Channel Habitat demo</title>
<style>body{{font-family:sans-serif;max-width:60em;margin:2em auto;color:#222}}code{{color:#555}}</style>
</head><body><h1>Channel Habitat — demo on the invented Figment River reach</h1>
<p>All data are invented. Results are only as good as the hydraulic model behind them; class thresholds
are indicative and should be set with local ecological advice; not for flood-safety, navigation or
public-safety decisions; local regulations and licensed professional practice prevail.</p>
{''.join(rows)}</body></html>"""
    (out / "index.html").write_text(page, encoding="utf-8")


if __name__ == "__main__":
    sys.exit(main())
