"""Resampling outputs and the cohort matrix, read by nibabel.

Reference: "GIFTI Surface Data Format Version 1.0", NIfTI Data Format
Working Group (2011), through its reader in nibabel (nibabel.gifti), and the
BIDS-derivatives naming of outputs (space- entity).

(a) nibabel writes a subject sphere (radius 100 mm, the icosahedral sphere
    that `horosphere sphere` writes) and a shape map (z / 100) and a label
    map; `horosphere resample` takes them to icosphere:2; nibabel reads the
    outputs: a SHAPE (or LABEL) array with 162 values and a UINT8 mask array
    named "missing"; the shape values equal z / 100 of the target to float
    precision (the level-2 vertices are the first 162 of level 3, so this is
    the identical-spheres case up to 32-bit rounding); labels and table kept.
(b) a mask (the cap z > 80) gives NaN exactly where the output mask is 1.
(c) `horosphere matrix` of two outputs: nibabel finds one array per subject
    with the Subject metadata; the wide CSV read by numpy equals the arrays.

The binary comes from HOROSPHERE_BIN (default target/debug/horosphere).
"""

import os
import subprocess
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from nibabel.gifti import GiftiDataArray, GiftiImage, GiftiLabel, GiftiLabelTable

REPO = Path(__file__).resolve().parents[2]
BIN = Path(os.environ.get("HOROSPHERE_BIN", REPO / "target" / "debug" / "horosphere"))


@pytest.fixture(scope="module")
def binary():
    if not BIN.exists():
        pytest.fail(f"horosphere binary not found at {BIN}; build it or set HOROSPHERE_BIN")
    return BIN


def run(binary, *args):
    r = subprocess.run([str(binary), *map(str, args)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    return r.stdout


def shape_file(path, values):
    img = GiftiImage(darrays=[GiftiDataArray(np.asarray(values, np.float32), intent="NIFTI_INTENT_SHAPE", datatype="NIFTI_TYPE_FLOAT32")])
    nib.save(img, path)


@pytest.fixture(scope="module")
def subject(binary, tmp_path_factory):
    d = tmp_path_factory.mktemp("resample")
    sphere = d / "sub-01_hemi-L_sphere.surf.gii"
    run(binary, "sphere", "icosphere:3", "-o", sphere)
    coords = nib.load(sphere).darrays[0].data.astype(np.float64)
    assert coords.shape == (642, 3)
    data = d / "sub-01_hemi-L_depth.shape.gii"
    shape_file(data, coords[:, 2] / 100.0)
    keys = (coords[:, 0] > 0).astype(np.int32) + 1
    table = GiftiLabelTable()
    for k, name in [(1, "west"), (2, "east")]:
        lab = GiftiLabel(key=k, red=0.2 * k, green=0.5, blue=0.1, alpha=1.0)
        lab.label = name
        table.labels.append(lab)
    labels = d / "sub-01_hemi-L_sides.label.gii"
    nib.save(GiftiImage(darrays=[GiftiDataArray(keys, intent="NIFTI_INTENT_LABEL", datatype="NIFTI_TYPE_INT32")], labeltable=table), labels)
    mask = d / "sub-01_hemi-L_cap.shape.gii"
    shape_file(mask, (coords[:, 2] > 80.0).astype(np.float32))
    return d, sphere, data, labels, mask, coords


def test_resampled_files_open_in_nibabel(binary, subject):
    d, sphere, data, labels, _, coords = subject
    out = d / "out"
    run(binary, "resample", "--sphere", sphere, "--data", data, "--data", labels, "--target", "icosphere:2", "-o", out)
    shape = nib.load(out / "sub-01_hemi-L_space-icosphere2_depth.shape.gii")
    assert len(shape.darrays) == 2
    values, mask = shape.darrays
    assert values.intent == nib.nifti1.intent_codes["NIFTI_INTENT_SHAPE"]
    assert values.data.dtype == np.float32 and values.data.shape == (162,)
    assert mask.data.dtype == np.uint8 and mask.metadata["Name"] == "missing"
    assert not mask.data.any()
    np.testing.assert_allclose(values.data, coords[:162, 2] / 100.0, atol=1e-6)
    lab = nib.load(out / "sub-01_hemi-L_space-icosphere2_sides.label.gii")
    assert lab.darrays[0].intent == nib.nifti1.intent_codes["NIFTI_INTENT_LABEL"]
    assert lab.labeltable.get_labels_as_dict() == {1: "west", 2: "east"}
    expect = (coords[:162, 0] > 0).astype(np.int32) + 1
    # Away from the border x = 0 the side is the target vertex's own.
    far = np.abs(coords[:162, 0]) > 5.0
    assert np.array_equal(lab.darrays[0].data[far], expect[far])


def test_mask_gives_nan_exactly_where_missing(binary, subject):
    d, sphere, data, _, mask, coords = subject
    out = d / "masked.shape.gii"
    run(binary, "resample", "--sphere", sphere, "--data", data, "--target", "icosphere:2", "--mask", mask, "-o", out)
    values, miss = nib.load(out).darrays
    assert miss.data.sum() > 0
    assert np.array_equal(np.isnan(values.data), miss.data.astype(bool))
    assert np.all(coords[:162, 2][miss.data.astype(bool)] > 70.0)


def test_cohort_matrix_opens_in_nibabel(binary, subject):
    d, sphere, data, _, _, coords = subject
    a = d / "sub-01_hemi-L_space-icosphere2_depth.shape.gii"
    b = d / "sub-02_hemi-L_space-icosphere2_depth.shape.gii"
    run(binary, "resample", "--sphere", sphere, "--data", data, "--target", "icosphere:2", "-o", a)
    shape_file(d / "two.shape.gii", 2.0 * coords[:, 2] / 100.0)
    run(binary, "resample", "--sphere", sphere, "--data", d / "two.shape.gii", "--target", "icosphere:2", "-o", b)
    m = d / "cohort.func.gii"
    wide = d / "cohort.csv"
    run(binary, "matrix", a, b, "-o", m, "--csv", wide)
    img = nib.load(m)
    assert [x.metadata["Subject"] for x in img.darrays] == ["sub-01", "sub-02"]
    np.testing.assert_allclose(img.darrays[1].data, 2.0 * img.darrays[0].data, rtol=1e-6)
    table = np.genfromtxt(wide, delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert table.shape == (2,)
    assert table.dtype.names[:3] == ("subject", "v0", "v1")
    row = np.array([table[0][f"v{k}"] for k in range(162)])
    np.testing.assert_array_equal(row.astype(np.float32), img.darrays[0].data)
