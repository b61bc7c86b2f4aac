"""Our convex hull of sphere points against Qhull (scipy.spatial.ConvexHull).

Reference: Barber, Dobkin, Huhdanpaa, "The Quickhull algorithm for convex
hulls", ACM Trans. Math. Softw. 22 (1996) 469-483, through scipy. For points
in general position on a sphere the hull triangulation is unique, so the
sets of triangles must be equal; ours must also be counter-clockwise seen
from outside.

The Rust test `hull_triangles_for_the_qhull_cross_check` (tests/resample.rs)
writes hull_points.csv and hull_faces.csv into HOROSPHERE_ARTIFACTS; a
missing folder or file is a failure, not a skip.
"""

import os
from pathlib import Path

import numpy as np
import pytest
from scipy.spatial import ConvexHull


def _load(name):
    folder = os.environ.get("HOROSPHERE_ARTIFACTS")
    if not folder:
        pytest.fail("HOROSPHERE_ARTIFACTS is not set; run cargo test with it set first (scripts/test.sh does)")
    path = Path(folder) / name
    if not path.is_file():
        pytest.fail(f"{path} is missing; the Rust test tests/resample.rs did not write it")
    return np.loadtxt(path, delimiter=",", skiprows=1)


def test_hull_equals_qhull():
    pts = _load("hull_points.csv")
    faces = _load("hull_faces.csv").astype(int)
    assert pts.shape == (642, 3)
    assert faces.shape == (2 * 642 - 4, 3)
    ours = {tuple(sorted(f)) for f in faces}
    theirs = {tuple(sorted(f)) for f in ConvexHull(pts).simplices}
    assert ours == theirs
    a, b, c = pts[faces[:, 0]], pts[faces[:, 1]], pts[faces[:, 2]]
    normals = np.cross(b - a, c - a)
    assert np.all(np.einsum("ij,ij->i", normals, a) > 0)
