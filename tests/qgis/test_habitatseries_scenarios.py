"""habitatseries with its curves computed from a scenario table (SCENARIOS) instead of a CURVES table.

The independent route: flowhabitat writes CURVES for the same scenario table, and habitatseries reads them
(CURVES path). Both routes must give the same DAILY, SPELLS and OPTIONS, and CURVES_OUT must be
flowhabitat's CURVES of the regime. Two regimes of the demo table (weir, natural) keep it quick; the series
asks for 'weir' only, so only its 11 runs may be read. Bad input (both or neither of CURVES and
SCENARIOS, names that do not fit the reach or the classes) is refused before any run is read."""

from __future__ import annotations

import math

import pytest
from qgis.core import QgsProcessingException, QgsProcessingFeedback

from plugin.core.curves import CURVE_COLUMNS
from tests.qgis import flow_cases as fc

REGIMES = ("weir", "natural")
TARGETS = "lower: moderate+fast >= 50%\nupper: fast >= 85%\nsegment 30: very slow < 20%"
UNITS = "reach, upper, middle, lower, segment 30"
DELIVERY = ("summer pulse: pulse start=2002-01-10 duration=5 ramp_up=2 ramp_down=5\n"
            "held recession: recession start=2001-10-20 fall=1")


class Log(QgsProcessingFeedback):
    """Keeps info and warning lines."""

    def __init__(self):
        super().__init__()
        self.lines = []
        self.warnings = []

    def pushInfo(self, info):  # noqa: N802
        self.lines.append(info)
        super().pushInfo(info)

    def pushWarning(self, warning):  # noqa: N802
        self.warnings.append(warning)
        super().pushWarning(warning)


def _table(sample_dir, path):
    rows = [dict(r) for r in fc.scenario_rows(sample_dir) if r["regime"] in REGIMES]
    for r in rows:
        for c in ("depth", "speed"):
            r[c] = str(sample_dir / r[c])
    return fc.write_table(path, rows)


def _series_params(sample_dir, out, **kw):
    p = {"REGIME": "weir", "FLOWS": str(sample_dir / "daily_flows.csv"), "REPORT_UNITS": UNITS,
         "TARGET_STATEMENTS": TARGETS, "BLOOM_CLASSES": "very slow", "BLOOM_SHARE": 10.0, "BLOOM_MIN_DAYS": 5,
         "ENV_VOLUME": 40.0, "VOLUME_UNIT": 1, "DELIVERY": DELIVERY,
         "DAILY": str(out / "daily.gpkg"), "SPELLS": str(out / "spells.gpkg"), "OPTIONS": str(out / "options.gpkg"),
         "REPORT": str(out / "report.html")}
    p.update(kw)
    return p


def _reach(axis):
    return {"CENTRELINE": axis, "SEGMENT_LENGTH": fc.SEGMENT_M, "ZONE_BREAKS": fc.ZONES}


@pytest.fixture(scope="module")
def routes(provider, sample_dir, tmp_path_factory):
    root = tmp_path_factory.mktemp("habitatseries_scenarios")
    axis = fc.write_axis(sample_dir, root / "axis.gpkg")
    table = _table(sample_dir, root / "scenarios.csv")
    # route A: flowhabitat's CURVES for the table, read by habitatseries
    fh = root / "flowhabitat"
    fh.mkdir()
    curves = fc.run("flowhabitat", {"SCENARIOS": table, **_reach(axis), "TARGET_STATEMENTS": "",
                                    "CURVES": str(fh / "curves.gpkg"), "TARGETS": str(fh / "targets.gpkg")})["CURVES"]
    a = root / "a"
    a.mkdir()
    res_a = fc.run("habitatseries", _series_params(sample_dir, a, CURVES=curves))
    # route B: the same table given to habitatseries directly (regime named in another case)
    b = root / "b"
    b.mkdir()
    log = Log()
    res_b = fc.run("habitatseries", _series_params(sample_dir, b, SCENARIOS=table, REGIME="Weir",
                                                   CURVES_OUT=str(b / "curves_out.gpkg"), **_reach(axis)), log)
    return {"root": root, "axis": axis, "table": table, "curves": curves, "a": res_a, "b": res_b, "log": log,
            "sample": sample_dir}


def _same(x, y, where):
    if isinstance(x, float) or isinstance(y, float):
        assert x is not None and y is not None, where
        assert x == pytest.approx(y, rel=1e-12, abs=1e-12), where
    else:
        assert x == y, where


@pytest.mark.parametrize("output", ["DAILY", "SPELLS", "OPTIONS"])
def test_scenario_table_gives_the_results_of_flowhabitat_curves(routes, output):
    names_a, rows_a = fc.read_layer(routes["a"][output])
    names_b, rows_b = fc.read_layer(routes["b"][output])
    assert names_a == names_b
    assert len(rows_a) == len(rows_b) > 0
    for i, (ra, rb) in enumerate(zip(rows_a, rows_b)):
        for n in names_a:
            if n != "fid":
                _same(ra[n], rb[n], f"{output} row {i + 1} {n}")


def test_the_comparison_has_something_to_compare(routes):
    # Plausibility of the shared results (invented data): every option, days inside the ladder with
    # shares, segment 30 reported, targets met on some days and not on others.
    names, daily = fc.read_layer(routes["b"]["DAILY"])
    assert {"pct_segment_30_fast", "pct_middle_very_slow", "t3_met", "bloom_lower_met"} <= set(names)
    assert {r["option"] for r in daily} == {"base", "summer pulse", "held recession"}
    inside = [r for r in daily if r["in_ladder"]]
    assert len(inside) > 300 and all(r["pct_lower_fast"] is not None for r in inside)
    for k in ("t1_met", "t2_met", "bloom_lower_met"):
        met = [bool(r[k]) for r in inside]
        assert any(met) and not all(met), k
    _, options = fc.read_layer(routes["b"]["OPTIONS"])
    assert [o["option"] for o in options] == ["base", "summer pulse", "held recession"]
    assert options[1]["volume_ml"] == pytest.approx(40000.0, abs=1e-6)  # 40 GL = 40 000 ML


def test_only_the_runs_of_the_regime_are_read(routes):
    runs = [line for line in routes["log"].lines if "wet elements" in line]
    assert len(runs) == 11 and all(line.startswith("weir ") for line in runs)
    assert any("only the 11 runs of regime weir are read" in line and "11 runs of natural are not needed" in line
               for line in routes["log"].lines)


def test_curves_out_is_flowhabitat_curves_of_the_regime(routes):
    names, out = fc.read_layer(routes["b"]["CURVES_OUT"])
    assert [n for n in names if n != "fid"] == list(CURVE_COLUMNS)
    _, ref = fc.read_layer(routes["curves"])
    ref = [r for r in ref if r["regime"] == "weir"]
    key = lambda r: (r["q_mld"], r["scope"], r["unit"], r["class"])  # noqa: E731
    got = {key(r): r for r in out}
    assert len(got) == len(out) == len(ref)
    assert {r["regime"] for r in out} == {"weir"}
    for r in ref:
        g = got[key(r)]
        for c in ("q_m3s", "chainage_from_m", "chainage_to_m", "area_m2", "wet_area_m2", "percent"):
            if r[c] is None:
                assert g[c] is None, (key(r), c)
            else:
                assert g[c] == r[c], (key(r), c)  # the same computation: bit for bit


def test_curves_out_feeds_the_curves_path(routes, tmp_path):
    # CURVES_OUT is a CURVES table: fed back, it gives the same OPTIONS.
    res = fc.run("habitatseries", _series_params(routes["sample"], tmp_path, CURVES=routes["b"]["CURVES_OUT"],
                                                 REGIME=""))
    _, a = fc.read_layer(res["OPTIONS"])
    _, b = fc.read_layer(routes["b"]["OPTIONS"])
    assert a == b


def test_report_names_the_scenario_table(routes):
    with open(routes["b"]["REPORT"], encoding="utf-8") as fh:
        html = fh.read()
    assert "computed from the scenario table" in html and "11 runs of regime weir" in html
    assert "licensed professional practice" in html


# ---- bad input --------------------------------------------------------------------------------

def _refused(routes, tmp_path, parameter, phrases, **kw):
    log = Log()
    with pytest.raises(QgsProcessingException) as e:
        fc.run("habitatseries", _series_params(routes["sample"], tmp_path, **kw), log)
    msg = str(e.value)
    assert msg.startswith(f"{parameter}: "), msg
    for p in phrases:
        assert p in msg, msg
    assert not any("wet elements" in line for line in log.lines), "a run was read before the input was refused"
    assert not (tmp_path / "daily.gpkg").exists() and not (tmp_path / "report.html").exists()
    return msg


def test_both_or_neither_curves_and_scenarios_refused(routes, tmp_path):
    _refused(routes, tmp_path, "CURVES", ["either CURVES", "or SCENARIOS", "not both"],
             CURVES=routes["curves"], SCENARIOS=routes["table"], **_reach(routes["axis"]))
    _refused(routes, tmp_path, "CURVES", ["give CURVES", "or SCENARIOS"])


def test_scenario_path_checks_before_reading_runs(routes, tmp_path):
    kw = {"SCENARIOS": routes["table"], **_reach(routes["axis"])}
    _refused(routes, tmp_path, "REGIME", ["no regime 'lake' in the scenario table", "weir, natural"],
             **{**kw, "REGIME": "lake"})
    _refused(routes, tmp_path, "REGIME", ["several regimes in the scenario table"], **{**kw, "REGIME": ""})
    _refused(routes, tmp_path, "CENTRELINE", ["give the reach axis"], **{**kw, "CENTRELINE": None})
    _refused(routes, tmp_path, "TARGET_STATEMENTS", ["'rapid' is not a class"],
             **{**kw, "TARGET_STATEMENTS": "lower: rapid >= 5%"})
    n_seg = math.ceil(fc.axis_line(routes["axis"]).length / fc.SEGMENT_M)
    _refused(routes, tmp_path, "REPORT_UNITS", [f"no unit 'segment {n_seg + 1}'"],
             **{**kw, "REPORT_UNITS": f"lower, segment {n_seg + 1}"})
    _refused(routes, tmp_path, "BLOOM_CLASSES", ["no class 'pool'"], **{**kw, "BLOOM_CLASSES": "pool"})
    _refused(routes, tmp_path, "FLOWS", ["does not exist"], **{**kw, "FLOWS": str(tmp_path / "none.csv")})


def test_curves_path_says_what_it_ignores(routes, tmp_path):
    log = Log()
    res = fc.run("habitatseries", _series_params(routes["sample"], tmp_path, CURVES=routes["curves"],
                                                 CENTRELINE=routes["axis"], CURVES_OUT=str(tmp_path / "c.gpkg")), log)
    assert "CURVES_OUT" not in res and not (tmp_path / "c.gpkg").exists()
    assert any("CURVES_OUT is written only when the curves are computed from SCENARIOS" in line for line in log.lines)
    assert any(w.startswith("CENTRELINE: used only to compute the curves from SCENARIOS") for w in log.warnings)
