"""Weighted usable area against Hyra (1978).

Source: Hyra, R. (1978) Methods of assessing instream flows for recreation. Instream Flow
Information Paper No. 6, Cooperative Instream Flow Service Group, US Fish and Wildlife Service,
June 1978. Table 3 (p. 8): "Total surface area of stream and (weighted usable surface area) for a
hypothetical recreation activity in square feet" - a 4 x 4 matrix of depth classes (ft) with
probabilities-of-use <1: 0, 1-2: 0.3, 2-3: 0.8, >3: 1.0 and velocity classes (ft/s) <0.5: 1.0,
0.5-1.0: 0.8, 1.0-1.5: 0.4, >1.5: 0, each cell's surface area, and each cell's weighted usable
area = area x depth probability x velocity probability (the product, "Composite
Probabilities-of-Use", p. 6). Table totals: 4,500 ft2 of surface, 916 ft2 weighted usable.
The cell values below are transcribed from that table (read from a scan of the report).

What is reproduced: every cell's weighted usable area, the row totals (0, 444, 432, 40), the
column totals (260, 360, 296, 0) and the totals 916 of 4,500 ft2, through the CSV curve reader
(with ft and ft/s units), the product composite and weighted_usable_area. Hyra's criteria are
class steps; here each class is a flat stretch of a piecewise-linear curve (ramps confined to
+-0.05 ft or ft/s around the class limits) and each cell is represented by its class mid-value, so
the curve returns exactly the class probability. Also the worked example on p. 6: depth 2.6 ft
(probability 0.9) and velocity 6 ft/s (0.24) give a composite of 0.216.
"""

from __future__ import annotations

import numpy as np
import pytest

from plugin.core.suitability import combine, suitability_from_csv_text, weighted_usable_area

FT2_M2 = 0.3048 ** 2  # international foot (exact)

# Hyra 1978, Table 3: surface area (ft2) by depth class (rows) and velocity class (columns).
AREA_FT2 = np.array([
    [500, 400, 100, 0],    # depth < 1 ft        (probability 0)
    [600, 700, 800, 300],  # depth 1-2 ft        (0.3)
    [100, 300, 500, 100],  # depth 2-3 ft        (0.8)
    [0, 0, 100, 0],        # depth > 3 ft        (1.0)
], dtype=float)
# Hyra 1978, Table 3: weighted usable surface area (ft2), the bracketed values.
WUA_FT2 = np.array([
    [0, 0, 0, 0],
    [180, 168, 96, 0],
    [80, 192, 160, 0],
    [0, 0, 40, 0],
], dtype=float)
DEPTH_MID_FT = [0.5, 1.5, 2.5, 3.5]
VEL_MID_FTS = [0.25, 0.75, 1.25, 1.75]

CURVES = """variable,value,unit,suitability,source
depth,0.00,ft,0.0,Hyra 1978 Table 3
depth,0.95,ft,0.0,Hyra 1978 Table 3
depth,1.05,ft,0.3,Hyra 1978 Table 3
depth,1.95,ft,0.3,Hyra 1978 Table 3
depth,2.05,ft,0.8,Hyra 1978 Table 3
depth,2.95,ft,0.8,Hyra 1978 Table 3
depth,3.05,ft,1.0,Hyra 1978 Table 3
velocity,0.00,ft/s,1.0,Hyra 1978 Table 3
velocity,0.45,ft/s,1.0,Hyra 1978 Table 3
velocity,0.55,ft/s,0.8,Hyra 1978 Table 3
velocity,0.95,ft/s,0.8,Hyra 1978 Table 3
velocity,1.05,ft/s,0.4,Hyra 1978 Table 3
velocity,1.45,ft/s,0.4,Hyra 1978 Table 3
velocity,1.55,ft/s,0.0,Hyra 1978 Table 3
"""


def test_hyra_1978_table_3():
    # Source: Hyra 1978, Instream Flow Information Paper No. 6, Table 3 (see module docstring).
    cs = suitability_from_csv_text(CURVES)[0]
    di, vi = np.meshgrid(np.arange(4), np.arange(4), indexing="ij")
    depth_m = np.array(DEPTH_MID_FT)[di].ravel() * 0.3048
    vel_ms = np.array(VEL_MID_FTS)[vi].ravel() * 0.3048
    area_m2 = AREA_FT2.ravel() * FT2_M2
    csi = cs.composite(depth=depth_m, velocity=vel_ms, method="product")
    # every cell
    np.testing.assert_allclose(csi * AREA_FT2.ravel(), WUA_FT2.ravel(), atol=1e-9)
    # rows (depth classes) and columns (velocity classes)
    rows = weighted_usable_area(csi, area_m2, di.ravel(), 4)
    cols = weighted_usable_area(csi, area_m2, vi.ravel(), 4)
    np.testing.assert_allclose(rows["wua_m2"] / FT2_M2, [0, 444, 432, 40], atol=1e-9)
    np.testing.assert_allclose(rows["wet_area_m2"] / FT2_M2, [1000, 2400, 1000, 100], atol=1e-9)
    np.testing.assert_allclose(cols["wua_m2"] / FT2_M2, [260, 360, 296, 0], atol=1e-9)
    np.testing.assert_allclose(cols["wet_area_m2"] / FT2_M2, [1200, 1400, 1500, 400], atol=1e-9)
    total = weighted_usable_area(csi, area_m2)
    assert total["wua_m2"][0] / FT2_M2 == pytest.approx(916.0, abs=1e-9)
    assert total["wet_area_m2"][0] / FT2_M2 == pytest.approx(4500.0, abs=1e-9)
    assert total["wua_fraction"][0] == pytest.approx(916.0 / 4500.0, rel=1e-12)


def test_hyra_1978_composite_example():
    # Source: Hyra 1978, p. 6 ("Composite Probabilities-of-Use"): 0.9 x 0.24 = 0.216.
    assert combine([np.array([0.9]), np.array([0.24])], "product")[0] == pytest.approx(0.216, abs=1e-15)
