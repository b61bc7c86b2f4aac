"""External check of `horosphere repair`: the repaired surface and the mask of
created vertices are read back with nibabel (reference GIFTI reader), and the
closedness, orientation and Euler characteristic are recomputed with numpy
from the faces nibabel returns.

Input: a level-4 icosahedral sphere of radius 50 mm (built here with numpy,
Kenner, "Geodesic math and how to use it", 1976) with four holes punched out,
written as OBJ. Run by scripts/test.sh; the binary comes from HOROSPHERE_BIN.
"""

import json
import os
import subprocess
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

nib = pytest.importorskip("nibabel")

BIN = os.environ.get("HOROSPHERE_BIN", "target/debug/horosphere")


def icosphere(level, radius):
    t = (1 + 5**0.5) / 2
    p = [[-1, t, 0], [1, t, 0], [-1, -t, 0], [1, -t, 0], [0, -1, t], [0, 1, t],
         [0, -1, -t], [0, 1, -t], [t, 0, -1], [t, 0, 1], [-t, 0, -1], [-t, 0, 1]]
    p = [list(np.array(q, float) / np.linalg.norm(q)) for q in p]
    f = [[0, 11, 5], [0, 5, 1], [0, 1, 7], [0, 7, 10], [0, 10, 11], [1, 5, 9],
         [5, 11, 4], [11, 10, 2], [10, 7, 6], [7, 1, 8], [3, 9, 4], [3, 4, 2],
         [3, 2, 6], [3, 6, 8], [3, 8, 9], [4, 9, 5], [2, 4, 11], [6, 2, 10],
         [8, 6, 7], [9, 8, 1]]
    for _ in range(level):
        mid, nf = {}, []
        for tri in f:
            m = []
            for k in range(3):
                a, b = tri[k], tri[(k + 1) % 3]
                key = (min(a, b), max(a, b))
                if key not in mid:
                    q = np.array(p[a]) + np.array(p[b])
                    p.append(list(q / np.linalg.norm(q)))
                    mid[key] = len(p) - 1
                m.append(mid[key])
            nf += [[tri[0], m[0], m[2]], [m[0], tri[1], m[1]],
                   [m[2], m[1], tri[2]], [m[0], m[1], m[2]]]
        f = nf
    return np.array(p) * radius, np.array(f)


def area(p, f):
    a, b, c = p[f[:, 0]], p[f[:, 1]], p[f[:, 2]]
    return 0.5 * np.linalg.norm(np.cross(b - a, c - a), axis=1).sum()


def volume(p, f):
    a, b, c = p[f[:, 0]], p[f[:, 1]], p[f[:, 2]]
    return np.einsum("ij,ij->i", a, np.cross(b, c)).sum() / 6.0


def test_repaired_sphere_reads_back_closed_with_its_mask(tmp_path: Path):
    p, f = icosphere(4, 50.0)
    full_area = area(p, f)
    keep = np.ones(len(f), bool)
    for v, deg in [(0, 0.1), (1, 0.1), (2, 5.0), (3, 20.0)]:
        c = p[v] / 50.0
        ang = np.degrees(np.arccos(np.clip(p @ c / 50.0, -1, 1)))
        keep &= ~(ang[f] <= deg).any(axis=1)
    holed = f[keep]
    src = tmp_path / "holed.obj"
    with open(src, "w") as fh:
        for q in p:
            fh.write("v %r %r %r\n" % (float(q[0]), float(q[1]), float(q[2])))
        for t in holed:
            fh.write(f"f {t[0] + 1} {t[1] + 1} {t[2] + 1}\n")
    out = tmp_path / "fixed.surf.gii"
    log = tmp_path / "fixed.json"
    run = subprocess.run([BIN, "repair", str(src), "-o", str(out), "--json", str(log),
                          "--max-dp-hole", "20"], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    mask_path = tmp_path / "fixed.added.shape.gii"
    assert mask_path.exists()

    g = nib.load(str(out))
    q = g.agg_data("NIFTI_INTENT_POINTSET").astype(float)
    t = g.agg_data("NIFTI_INTENT_TRIANGLE").astype(np.int64)
    # Closed and consistently oriented: every directed edge once, and its
    # reverse once.
    directed = Counter((int(a), int(b)) for tri in t for a, b in
                       [(tri[0], tri[1]), (tri[1], tri[2]), (tri[2], tri[0])])
    assert all(n == 1 for n in directed.values())
    assert all(directed.get((b, a)) == 1 for (a, b) in directed)
    # Euler characteristic 2 (genus 0), positive volume (outward).
    n_edges = len(directed) // 2
    assert len(q) - n_edges + len(t) == 2
    assert volume(q, t) > 0
    # Area within 1% of the unholed sphere.
    assert abs(area(q, t) - full_area) < 0.01 * full_area

    mask = np.asarray(nib.load(str(mask_path)).agg_data()).ravel()
    assert mask.shape == (len(q),)
    doc = json.loads(log.read_text())
    added = doc["repair"]["added_vertices"]
    assert len(added) == 1
    assert set(np.flatnonzero(mask > 0.5).tolist()) == set(added)
    methods = sorted(h["method"] for h in doc["repair"]["holes"])
    assert methods == ["angle-area-dp", "angle-area-dp", "angle-area-dp", "fan"]
    # Input vertices kept in order: the first vertices are the used input
    # vertices, at their input positions (GIFTI stores float32).
    used = np.unique(holed)
    assert len(q) == len(used) + 1
    np.testing.assert_array_equal(q[: len(used)], p[used].astype(np.float32))
