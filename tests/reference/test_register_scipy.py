"""External check of `horosphere register` with a rigid rotation, the
simplest diffeomorphism of the sphere, measured with scipy.

Files are written and read with nibabel (reference GIFTI reader/writer;
"GIFTI Surface Data Format Version 1.0", 2011). The subject sphere is the
convex hull (scipy.spatial.ConvexHull, Qhull: Barber, Dobkin, Huhdanpaa,
ACM TOMS 22 (1996) 469-483) of 3,000 random points on the sphere. Two
smooth feature maps (sums of von Mises bumps) define the template subject;
the second subject carries the same maps composed with a known rotation R
(scipy.spatial.transform.Rotation), so the true correspondence is
y -> R y. After `register-template` (from the first subject only) and
`register` of the second, the rotation fitted to (original, warped) vertex
pairs with Rotation.align_vectors (Kabsch, Acta Cryst. A32 (1976) 922) must
be R within 1 degree, the median angular residual under 1 degree, and no
triangle folded. The binary comes from HOROSPHERE_BIN (default
target/debug/horosphere); scratch files go to HOROSPHERE_ARTIFACTS or a
temporary folder.
"""

import json
import os
import subprocess
import tempfile
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from scipy.spatial import ConvexHull
from scipy.spatial.transform import Rotation

REPO = Path(__file__).resolve().parents[2]
BIN = Path(os.environ.get("HOROSPHERE_BIN", REPO / "target" / "debug" / "horosphere"))


def run(*args):
    r = subprocess.run([str(BIN), *map(str, args)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    return r.stdout


def write_surface(path, coords, faces):
    img = nib.gifti.GiftiImage()
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(
        coords.astype(np.float32), intent="NIFTI_INTENT_POINTSET", datatype="NIFTI_TYPE_FLOAT32"))
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(
        faces.astype(np.int32), intent="NIFTI_INTENT_TRIANGLE", datatype="NIFTI_TYPE_INT32"))
    nib.save(img, str(path))


def write_shape(path, values):
    img = nib.gifti.GiftiImage()
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(
        values.astype(np.float32), intent="NIFTI_INTENT_SHAPE", datatype="NIFTI_TYPE_FLOAT32"))
    nib.save(img, str(path))


def test_rotation_is_recovered():
    if not BIN.exists():
        pytest.fail(f"horosphere binary not found at {BIN}; build it or set HOROSPHERE_BIN")
    folder = Path(os.environ.get("HOROSPHERE_ARTIFACTS") or tempfile.mkdtemp(prefix="horosphere-reg-"))
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(4)
    pts = rng.normal(size=(3000, 3))
    pts /= np.linalg.norm(pts, axis=1, keepdims=True)
    faces = ConvexHull(pts).simplices.astype(np.int64)
    # Orient every triangle outwards.
    a, b, c = pts[faces[:, 0]], pts[faces[:, 1]], pts[faces[:, 2]]
    flip = np.einsum("ij,ij->i", np.cross(b - a, c - a), a + b + c) < 0
    faces[flip] = faces[flip][:, [0, 2, 1]]
    coords = 100.0 * pts
    centres = rng.normal(size=(2, 20, 3))
    centres /= np.linalg.norm(centres, axis=2, keepdims=True)
    amps = rng.normal(size=(2, 20))

    def feature(k, x):
        return (amps[k] * np.exp(8.0 * (x @ centres[k].T - 1.0))).sum(axis=1)

    rot = Rotation.from_rotvec(np.deg2rad(8.0) * np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8]))
    moved = rot.apply(pts)  # the true image of each subject vertex
    rows = ["subject,sphere,f0,f1"]
    for s, x in [("a", pts), ("b", moved)]:
        write_surface(folder / f"{s}.surf.gii", coords, faces)
        for k in range(2):
            write_shape(folder / f"{s}-f{k}.shape.gii", feature(k, x))
        if s == "a":
            rows.append(f"{s},{s}.surf.gii,{s}-f0.shape.gii,{s}-f1.shape.gii")
    (folder / "cohort.csv").write_text("\n".join(rows) + "\n")
    run("register-template", "--cohort", folder / "cohort.csv", "-o", folder / "tpl",
        "--level", "4", "--rounds", "1")
    tpl = json.loads((folder / "tpl" / "template.json").read_text())
    assert tpl["level"] == 4 and tpl["features"] == ["f0", "f1"]
    sphere = nib.load(str(folder / "tpl" / "sphere.surf.gii"))
    assert sphere.agg_data("NIFTI_INTENT_POINTSET").shape == (2562, 3)
    assert nib.load(str(folder / "tpl" / "feature-f0.shape.gii")).agg_data().shape == (2562,)
    run("register", folder / "b.surf.gii", "--features", folder / "b-f0.shape.gii",
        "--features", folder / "b-f1.shape.gii", "--template", folder / "tpl",
        "-o", folder / "b-warped.surf.gii", "--report", folder / "b.json")
    report = json.loads((folder / "b.json").read_text())
    assert report["jacobian"]["folded"] == 0 and report["subject_folded"] == 0
    warped = nib.load(str(folder / "b-warped.surf.gii"))
    w = np.asarray(warped.agg_data("NIFTI_INTENT_POINTSET"), dtype=float)
    assert np.array_equal(np.asarray(warped.agg_data("NIFTI_INTENT_TRIANGLE")), faces)
    w /= np.linalg.norm(w, axis=1, keepdims=True)
    est, _ = Rotation.align_vectors(w, pts)
    err = np.rad2deg((est * rot.inv()).magnitude())
    res = np.rad2deg(np.arccos(np.clip(np.einsum("ij,ij->i", w, moved), -1, 1)))
    before = np.rad2deg(np.arccos(np.clip(np.einsum("ij,ij->i", pts, moved), -1, 1)))
    print(f"rotation error {err:.3f} deg; residual median {np.median(res):.3f} deg, "
          f"before {np.median(before):.3f} deg")
    assert err < 1.0, err
    assert np.median(res) < 1.0, np.median(res)
    assert np.median(res) < 0.25 * np.median(before)
