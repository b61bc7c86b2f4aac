"""External check of the weighted rotation fit (Kabsch, "A solution for the
best rotation to relate two sets of vectors", Acta Cryst. A32 (1976) 922)
against scipy.spatial.transform.Rotation.align_vectors.

The Rust test `align::landmarks::tests::kabsch_points_for_scipy` writes the
weighted point pairs and our rotation to `kabsch_points.json` in the folder
named by HOROSPHERE_ARTIFACTS. When that variable is not set, this script runs
that one Rust test itself (cargo, in a temporary folder) to produce the file.
scipy minimises 1/2 sum_i w_i |a_i - R b_i|^2, so a = our targets and b = our
sources; the two rotation matrices must agree to 1e-10.
"""
import json
import os
import pathlib
import subprocess
import tempfile

import numpy as np
from scipy.spatial.transform import Rotation

REPO = pathlib.Path(__file__).resolve().parents[2]


def artifact_file():
    folder = os.environ.get("HOROSPHERE_ARTIFACTS")
    if folder:
        path = pathlib.Path(folder) / "kabsch_points.json"
        if path.exists():
            return path
    else:
        folder = tempfile.mkdtemp(prefix="horosphere-kabsch-")
    env = dict(os.environ, HOROSPHERE_ARTIFACTS=folder)
    subprocess.run(
        ["cargo", "test", "--quiet", "--lib", "kabsch_points_for_scipy"],
        cwd=REPO, env=env, check=True,
    )
    path = pathlib.Path(folder) / "kabsch_points.json"
    assert path.exists(), f"the Rust test did not write {path}"
    return path


def test_rotation_fit_matches_scipy_align_vectors():
    data = json.loads(artifact_file().read_text())
    p = np.array(data["source"], dtype=float)
    q = np.array(data["target"], dtype=float)
    w = np.array(data["weights"], dtype=float)
    ours = np.array(data["rotation"], dtype=float)
    assert p.shape == q.shape == (len(w), 3) and len(w) >= 3
    rot, _ = Rotation.align_vectors(q, p, weights=w)
    ref = rot.as_matrix()
    assert np.max(np.abs(ours - ref)) < 1e-10, (ours, ref)
    # The points are not a trivial case: the best fit leaves residuals.
    assert np.sum(w * np.sum((p @ ours.T - q) ** 2, axis=1)) > 1e-4
