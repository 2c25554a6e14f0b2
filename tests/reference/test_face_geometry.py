"""Mesh face centroids and areas (shoelace) against shapely (reference library)."""

import numpy as np
import shapely

from plugin.gis.runs import face_geometry


def test_face_centroid_and_area_match_shapely():
    rng = np.random.default_rng(7)
    nx, ny = np.empty(0), np.empty(0)
    faces = []
    for n in (3, 4, 5, 6):
        for _ in range(40):
            c = rng.random(2) * 1e5 + 5e5  # large coordinates, as in a projected CRS
            ang = np.sort(rng.random(n) * 2 * np.pi)
            faces.append(len(nx) + np.arange(n))
            nx = np.append(nx, c[0] + rng.uniform(2, 20) * np.cos(ang))
            ny = np.append(ny, c[1] + rng.uniform(2, 20) * np.sin(ang))
    order = rng.permutation(len(faces))  # mixed face sizes in the table
    fn = np.full((len(faces), 6), -1)
    for row, i in enumerate(order):
        fn[row, : len(faces[i])] = faces[i]
    fx, fy, area = face_geometry(nx, ny, fn)
    polys = [shapely.Polygon(np.column_stack([nx[faces[i]], ny[faces[i]]])) for i in order]
    cent = shapely.centroid(polys)
    np.testing.assert_allclose(area, shapely.area(polys), rtol=1e-9)
    np.testing.assert_allclose(fx, shapely.get_x(cent), atol=1e-6)
    np.testing.assert_allclose(fy, shapely.get_y(cent), atol=1e-6)


def test_clockwise_faces_have_positive_area():
    nx = np.array([0.0, 0.0, 2.0, 2.0])
    ny = np.array([0.0, 1.0, 1.0, 0.0])  # clockwise square 2 x 1
    fx, fy, area = face_geometry(nx, ny, np.array([[0, 1, 2, 3]]))
    assert area[0] == 2.0 and fx[0] == 1.0 and fy[0] == 0.5
