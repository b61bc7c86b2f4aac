"""`horosphere extract` and `horosphere sample` against nibabel, scikit-image and scipy.

References:
- NIfTI-1 affines (sform, qform with qfac) as nibabel computes them
  (nibabel.load(...).affine, header.get_qform(), nibabel.affines.apply_affine);
  volumes written by nibabel as .nii and .nii.gz, oblique with anisotropic
  voxels, one with a negative determinant.
- Marching cubes of scikit-image (skimage.measure.marching_cubes, Lewiner
  et al. 2003 variant of Lorensen and Cline 1987) and
  skimage.measure.mesh_surface_area, on the same binary ball.
- Trilinear interpolation of scipy (scipy.ndimage.map_coordinates, order=1).

Checks:
(a) extract of a single voxel (--float64): the six vertices equal
    apply_affine(nibabel affine, voxel +- 1/2 along each axis) to 1e-9 mm,
    for sform and qform-only files, .nii and .nii.gz.
(b) sample (--float64) of a float64 volume holding a linear function of
    mm position, at random points inside the grid: equals the numpy
    evaluation to 1e-9 (relative to the value scale).
(c) a voxelised ball (R = 12 voxels, spacing 0.9 x 1.1 x 1.3 mm): closed,
    Euler characteristic 2; the vertex set equals scikit-image's exactly
    (both put vertices at the midpoints of the cut edges); area within 1%
    and enclosed volume within 0.5% of scikit-image's (only the
    triangulation of ambiguous faces may differ); area within 10% and
    volume within 1.5 h / R of the analytic sphere (h the largest spacing:
    vertices lie within h/2 of the sphere).
(d) trilinear sampling of random volumes equals map_coordinates(order=1)
    to 1e-9; points outside give NaN and are counted.
(e) bad input: 4-D with two volumes, complex data, empty mask, NaN mask,
    singular sform are refused with the file named; a 4-D file with one
    volume is accepted.

The binary comes from HOROSPHERE_BIN (default target/debug/horosphere);
scratch files go to HOROSPHERE_ARTIFACTS or pytest's tmp_path.
"""

import json
import os
import subprocess
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from nibabel.affines import apply_affine
from scipy.ndimage import map_coordinates
from skimage.measure import marching_cubes, mesh_surface_area

REPO = Path(__file__).resolve().parents[2]
BIN = Path(os.environ.get("HOROSPHERE_BIN", REPO / "target" / "debug" / "horosphere"))


@pytest.fixture(scope="module")
def binary():
    if not BIN.exists():
        pytest.fail(f"horosphere binary not found at {BIN}; build it or set HOROSPHERE_BIN")
    return BIN


@pytest.fixture
def scratch(tmp_path):
    base = os.environ.get("HOROSPHERE_ARTIFACTS")
    if base:
        d = Path(base) / "volume" / tmp_path.name
        d.mkdir(parents=True, exist_ok=True)
        return d
    return tmp_path


def run(binary, *args, ok=True):
    r = subprocess.run([str(binary), *map(str, args)], capture_output=True, text=True)
    if ok:
        assert r.returncode == 0, r.stderr
    return r


def oblique(spacing, mirror=False, offset=(12.0, -30.5, 7.25)):
    """Rotation about (1, 2, 2)/3 by 0.4 rad times anisotropic spacing."""
    ax = np.array([1.0, 2.0, 2.0]) / 3.0
    k = np.array([[0, -ax[2], ax[1]], [ax[2], 0, -ax[0]], [-ax[1], ax[0], 0]])
    rot = np.eye(3) + np.sin(0.4) * k + (1 - np.cos(0.4)) * k @ k
    a = np.eye(4)
    a[:3, :3] = rot @ np.diag(spacing)
    if mirror:
        a[:3, 0] *= -1
    a[:3, 3] = offset
    return a


def surface_file(path, coords, faces=None):
    """Points as a Wavefront OBJ with 17 significant digits (exact doubles;
    nibabel writes FLOAT64 GIFTI only in its non-strict mode)."""
    coords = np.asarray(coords, np.float64)
    if faces is None:
        faces = np.array([[0, 1, 2]])
    with open(path, "w") as fh:
        for x, y, z in coords:
            fh.write(f"v {x:.17g} {y:.17g} {z:.17g}\n")
        for t in faces:
            fh.write("f {} {} {}\n".format(*(int(i) + 1 for i in t)))


def read_surface(path):
    g = nib.load(path)
    return g.darrays[0].data.astype(np.float64), g.darrays[1].data.astype(np.int64), g


def euler(faces):
    e = {tuple(sorted((int(t[i]), int(t[(i + 1) % 3])))) for t in faces for i in range(3)}
    return len(np.unique(faces)) - len(e) + len(faces)


def enclosed_volume(v, f):
    a, b, c = v[f[:, 0]], v[f[:, 1]], v[f[:, 2]]
    return float(np.einsum("ij,ij->i", a, np.cross(b, c)).sum() / 6.0)


@pytest.mark.parametrize("ext", [".nii", ".nii.gz"])
@pytest.mark.parametrize("form", ["sform", "qform"])
def test_single_voxel_vertices_equal_nibabel_affine(binary, scratch, ext, form):
    data = np.zeros((5, 6, 7), np.uint8)
    ijk = np.array([2, 3, 4])
    data[tuple(ijk)] = 1
    a = oblique([0.8, 1.25, 2.0], mirror=(form == "qform"))
    img = nib.Nifti1Image(data, a)
    if form == "qform":
        img.set_qform(a, code=1)
        img.set_sform(a, code=0)
    p = scratch / f"voxel_{form}{ext}"
    nib.save(img, p)
    back = nib.load(p)
    ref = back.header.get_qform() if form == "qform" else back.affine
    assert back.header["sform_code"] == (0 if form == "qform" else 2)
    out = scratch / f"voxel_{form}.surf.gii"
    r = run(binary, "extract", p, "-o", out, "--float64", "--json")
    summary = json.loads(r.stdout)
    assert summary["extract"]["affine_source"] == form
    assert summary["topology"]["euler_characteristic"] == 2
    assert summary["topology"]["outward"]
    v, f, g = read_surface(out)
    assert v.shape == (6, 3) and f.shape == (8, 3)
    want_vox = np.array([ijk + s * e for e in np.eye(3) for s in (-0.5, 0.5)])
    want = apply_affine(ref, want_vox)
    d = np.linalg.norm(v[:, None, :] - want[None, :, :], axis=2)
    assert np.all(d.min(axis=1) < 1e-9), d.min(axis=1)
    assert np.all(d.min(axis=0) < 1e-9)
    # The pointset names the coordinate system (identity in scanner mm).
    xf = g.darrays[0].coordsys
    assert xf is not None and np.allclose(xf.xform, np.eye(4))
    # Outward: the octahedron's enclosed volume is positive.
    assert enclosed_volume(v, f) > 0


@pytest.mark.parametrize("ext", [".nii", ".nii.gz"])
def test_sampling_linear_function_equals_numpy(binary, scratch, ext):
    a = oblique([1.1, 0.7, 1.6], mirror=True)
    shape = (9, 11, 8)
    vox = np.indices(shape).reshape(3, -1).T.astype(np.float64)
    mm = apply_affine(a, vox)
    coef = np.array([0.75, -1.5, 2.25])
    data = (mm @ coef + 4.0).reshape(shape)
    p = scratch / f"linear{ext}"
    nib.save(nib.Nifti1Image(data.astype(np.float64), a), p)
    aff = nib.load(p).affine
    # Random points inside the grid of voxel centres (in voxel units, then mm).
    rng = np.random.default_rng(7)
    pv = rng.uniform(0, 1, (300, 3)) * (np.array(shape) - 1)
    pts = apply_affine(aff, pv)
    surf = scratch / "points.obj"
    surface_file(surf, pts)
    out = scratch / "linear.shape.gii"
    r = run(binary, "sample", p, "--surface", surf, "-o", out, "--float64", "--json")
    assert json.loads(r.stdout)["outside"] == 0
    got = nib.load(out).darrays[0].data.astype(np.float64)
    # The file holds the linear function of the voxel centres in nibabel's
    # (float32-stored) affine; evaluate the same function at the points.
    want = apply_affine(aff, pv) @ coef + 4.0
    want_from_file = map_coordinates(nib.load(p).get_fdata(), pv.T, order=1)
    scale = np.abs(data).max()
    assert np.max(np.abs(got - want_from_file)) < 1e-9 * scale
    # Linear in mm to rounding of the float32 affine against the float64 one.
    assert np.max(np.abs(got - want)) < 1e-4 * scale


def test_ball_agrees_with_skimage_and_sphere(binary, scratch):
    n, r_vox = 32, 12.0
    spacing = np.array([0.9, 1.1, 1.3])
    c = np.array([15.3, 15.6, 15.45])
    g = np.indices((n, n, n)).astype(np.float64)
    inside = np.sqrt(((g - c[:, None, None, None]) ** 2).sum(0)) <= r_vox
    data = inside.astype(np.uint8)
    a = np.diag([*spacing, 1.0])
    p = scratch / "ball.nii.gz"
    nib.save(nib.Nifti1Image(data, a), p)
    out = scratch / "ball.surf.gii"
    summary = json.loads(run(binary, "extract", p, "-o", out, "--float64", "--json").stdout)
    topo = summary["topology"]
    assert topo["closed"] and topo["manifold"] and topo["euler_characteristic"] == 2 and topo["components"] == 1
    v, f, _ = read_surface(out)
    assert euler(f) == 2
    sv, sf, _, _ = marching_cubes(data.astype(np.float64), level=0.5, spacing=tuple(spacing))
    # Same vertex set (midpoints of the cut edges).
    ours = np.unique(np.round(v, 9), axis=0)
    theirs = np.unique(np.round(sv.astype(np.float64), 5), axis=0)
    assert ours.shape == theirs.shape
    assert np.max(np.abs(ours - theirs)) < 1e-5  # skimage returns float32
    area, s_area = mesh_surface_area(v, f), mesh_surface_area(sv, sf)
    vol, s_vol = enclosed_volume(v, f), abs(enclosed_volume(sv.astype(np.float64), sf))
    assert abs(area / s_area - 1) < 0.01, (area, s_area)
    assert abs(vol / s_vol - 1) < 0.005, (vol, s_vol)
    # Against the sphere: the voxelised ball is an ellipsoid in mm with
    # semi-axes R * spacing.
    sa = r_vox * spacing
    true_vol = 4 / 3 * np.pi * sa.prod()
    p_ = 1.6075  # Knud Thomsen's approximation of the ellipsoid area (within 1.1%)
    true_area = 4 * np.pi * (((sa[0] * sa[1]) ** p_ + (sa[0] * sa[2]) ** p_ + (sa[1] * sa[2]) ** p_) / 3) ** (1 / p_)
    h = spacing.max()
    assert abs(vol / true_vol - 1) <= 1.5 * h / sa.min()
    assert abs(area / true_area - 1) <= 0.10
    assert abs(summary["extract"]["area_mm2"] - area) < 1e-6 * area


def test_trilinear_equals_map_coordinates(binary, scratch):
    rng = np.random.default_rng(11)
    shape = (12, 10, 8)
    data = rng.normal(size=shape)
    a = oblique([1.3, 0.9, 1.1])
    p = scratch / "random.nii"
    nib.save(nib.Nifti1Image(data, a), p)
    aff = nib.load(p).affine
    pv = rng.uniform(0, 1, (400, 3)) * (np.array(shape) - 1)
    outside_v = np.array([[-0.5, 2, 2], [2, 2, 7.6], [11.2, 0, 0]])
    pts = apply_affine(aff, np.vstack([pv, outside_v]))
    surf = scratch / "pts.obj"
    surface_file(surf, pts)
    out = scratch / "tri.shape.gii"
    r = run(binary, "sample", p, "--surface", surf, "-o", out, "--float64", "--json")
    assert json.loads(r.stdout)["outside"] == 3
    got = nib.load(out).darrays[0].data.astype(np.float64)
    want = map_coordinates(data, pv.T, order=1)
    assert np.max(np.abs(got[:400] - want)) < 1e-9
    assert np.all(np.isnan(got[400:]))
    # Nearest: the voxel with the nearest centre (float32 output this time).
    out2 = scratch / "near.shape.gii"
    run(binary, "sample", p, "--surface", surf, "-o", out2, "--method", "nearest")
    got2 = nib.load(out2).darrays[0].data
    assert got2.dtype == np.float32
    idx = np.floor(pv + 0.5).astype(int)
    want2 = data[idx[:, 0], idx[:, 1], idx[:, 2]].astype(np.float32)
    assert np.array_equal(got2[:400], want2)


def test_bad_volumes_are_refused(binary, scratch):
    a = oblique([1.0, 1.0, 1.0])
    cube = np.zeros((6, 6, 6), np.float32)
    cube[2:4, 2:4, 2:4] = 1

    def refused(name, img, *needles):
        p = scratch / name
        nib.save(img, p)
        r = run(binary, "extract", p, "-o", scratch / "x.surf.gii", ok=False)
        assert r.returncode == 1, r.stdout
        assert name in r.stderr, r.stderr
        for n in needles:
            assert n in r.stderr, r.stderr
        assert not (scratch / "x.surf.gii").exists()

    refused("two.nii", nib.Nifti1Image(np.stack([cube, cube], -1), a), "3-D")
    refused("complex.nii", nib.Nifti1Image(cube.astype(np.complex64), a), "not supported")
    refused("empty.nii.gz", nib.Nifti1Image(np.zeros((4, 4, 4), np.uint8), a), "empty")
    bad = cube.copy()
    bad[0, 1, 2] = np.nan
    refused("nan.nii", nib.Nifti1Image(bad, a), "NaN", "(0, 1, 2)")
    sing = nib.Nifti1Image(cube, a)
    s = a.copy()
    s[2, :3] = s[0, :3]
    sing.set_sform(s, code=1)
    refused("singular.nii", sing, "singular")
    # One volume in a 4-D file is accepted.
    p = scratch / "one.nii"
    nib.save(nib.Nifti1Image(cube[..., None], a), p)
    summary = json.loads(run(binary, "extract", p, "-o", scratch / "one.surf.gii", "--json").stdout)
    assert summary["topology"]["euler_characteristic"] == 2


@pytest.mark.parametrize("ext", [".nii", ".nii.gz"])
@pytest.mark.parametrize("order", ["<", ">"])
def test_scaled_ints_with_extension_equal_nibabel(binary, scratch, ext, order):
    """The in-memory NIfTI parser against nibabel's reading of files nibabel
    wrote: int16 with scl_slope/scl_inter chosen by nibabel, a header
    extension (so vox_offset > 352 and the data start after it), both byte
    orders, plain and gzip. Sampling (nearest) at every voxel centre gives
    nibabel's get_fdata() exactly (1e-9 of the value scale)."""
    a = oblique([1.2, 0.8, 1.5])
    shape = (5, 6, 4)
    rng = np.random.default_rng(11)
    data = rng.uniform(-40.0, 90.0, shape)
    hdr = nib.Nifti1Header(endianness=order)
    img = nib.Nifti1Image(data, a, header=hdr)
    img.set_data_dtype(np.int16)
    img.header.extensions.append(
        nib.nifti1.Nifti1Extension("comment", b"horosphere reference check: data after an extension")
    )
    p = scratch / f"scaled{ext}"
    nib.save(img, p)
    back = nib.load(p)
    # The offset as stored (nibabel's loaded header no longer carries it).
    with nib.openers.ImageOpener(p) as f:
        stored = nib.Nifti1Header.from_fileobj(f)
    assert float(stored["vox_offset"]) > 352
    assert stored.endianness == order
    slope, inter = stored.get_slope_inter()
    assert slope is not None and slope != 1.0
    want = back.get_fdata()
    vox = np.indices(shape).reshape(3, -1).T.astype(np.float64)
    pts = apply_affine(back.affine, vox)
    surf = scratch / "centres.obj"
    surface_file(surf, pts)
    out = scratch / "scaled.shape.gii"
    r = run(binary, "sample", p, "--surface", surf, "-o", out, "--method", "nearest", "--float64", "--json")
    assert json.loads(r.stdout)["outside"] == 0
    got = nib.load(out).darrays[0].data.astype(np.float64)
    expect = want[tuple(vox.astype(int).T)]
    assert np.max(np.abs(got - expect)) < 1e-9 * np.abs(want).max()
