"""OBJ, OFF and PLY files written by an independent (numpy) writer are read by
`horosphere inspect`, and its figures agree with numpy/scipy computations.

References:
- PLY: Turk, "The PLY polygon file format" (1994); the binary files are
  written here with numpy structured dtypes ('<f4', '>f8', list counts 'u1'
  or '<i4'), both byte orders, with an extra vertex property and an extra
  element to be skipped.
- OBJ: Wavefront "Object Files (.obj)"; OFF: Geomview's OFF format.
- Connected components: scipy.sparse.csgraph.connected_components on the
  vertex adjacency graph.
- Euler characteristic V - E + F = 2 - 2g (Massey, "A basic course in
  algebraic topology", 1991); edges counted with numpy.unique on sorted
  vertex pairs.
- Area and enclosed volume: sum of |cross|/2 and of the divergence-theorem
  tetrahedra, in numpy (float64 from the same float32/float64 values the file
  holds), compared within 1e-9 relative (only the summation order differs).

The binary comes from HOROSPHERE_BIN (default target/debug/horosphere
relative to the repository).
"""

import json
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

REPO = Path(__file__).resolve().parents[2]
BIN = Path(os.environ.get("HOROSPHERE_BIN", REPO / "target" / "debug" / "horosphere"))


def torus(R, r, n, m):
    """Torus around z (our own construction in numpy, outward faces)."""
    i, j = np.meshgrid(np.arange(n), np.arange(m), indexing="ij")
    u, v = 2 * np.pi * i / n, 2 * np.pi * j / m
    w = R + r * np.cos(v)
    pos = np.stack([w * np.cos(u), w * np.sin(u), r * np.sin(v)], axis=-1).reshape(-1, 3)
    idx = lambda a, b: (a % n) * m + (b % m)
    a, b, c, d = idx(i, j), idx(i + 1, j), idx(i + 1, j + 1), idx(i, j + 1)
    faces = np.concatenate(
        [np.stack([a, b, c], -1).reshape(-1, 3), np.stack([a, c, d], -1).reshape(-1, 3)]
    )
    return pos, faces


def tetrahedron(offset):
    pos = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], float) * 3.0 + offset
    faces = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]])
    return pos, faces


@pytest.fixture(scope="module")
def mesh():
    p1, f1 = torus(20.0, 6.0, 24, 12)
    p2, f2 = tetrahedron(np.array([50.0, 0.0, 0.0]))
    pos = np.concatenate([p1, p2])
    faces = np.concatenate([f1, f2 + len(p1)])
    return pos, faces


def write_obj(path, pos, faces):
    with open(path, "w") as fh:
        fh.write("# numpy writer\n")
        for p in pos:
            fh.write("v %r %r %r\n" % tuple(float(x) for x in p))
        fh.write("g all\n")
        for t in faces:
            fh.write("f %d/%d %d/%d %d/%d\n" % (t[0] + 1, 1, t[1] + 1, 1, t[2] + 1, 1))


def write_off(path, pos, faces):
    with open(path, "w") as fh:
        fh.write("OFF\n# numpy writer\n%d %d 0\n" % (len(pos), len(faces)))
        np.savetxt(fh, pos, fmt="%.17g")
        np.savetxt(fh, np.column_stack([np.full(len(faces), 3), faces]), fmt="%d")


def write_ply_binary(path, pos, faces, endian, coord, count):
    fmt = "binary_little_endian" if endian == "<" else "binary_big_endian"
    ctype = {"f4": "float", "f8": "double"}[coord]
    cname = {"u1": "uchar", "i4": "int"}[count]
    header = (
        "ply\nformat %s 1.0\ncomment numpy writer\n"
        "element vertex %d\nproperty %s x\nproperty %s y\nproperty %s z\nproperty ushort quality\n"
        "element face %d\nproperty list %s int vertex_indices\n"
        "element note 2\nproperty int a\nend_header\n"
    ) % (fmt, len(pos), ctype, ctype, ctype, len(faces), cname)
    vdt = np.dtype([("x", endian + coord), ("y", endian + coord), ("z", endian + coord), ("q", endian + "u2")])
    v = np.zeros(len(pos), vdt)
    v["x"], v["y"], v["z"], v["q"] = pos[:, 0], pos[:, 1], pos[:, 2], 7
    fdt = np.dtype([("n", endian + count), ("i", endian + "i4", (3,))])
    f = np.zeros(len(faces), fdt)
    f["n"], f["i"] = 3, faces
    note = np.array([1, 2], endian + "i4")
    with open(path, "wb") as fh:
        fh.write(header.encode())
        fh.write(v.tobytes())
        fh.write(f.tobytes())
        fh.write(note.tobytes())
    return np.stack([v["x"], v["y"], v["z"]], -1).astype(np.float64)


def write_ply_ascii(path, pos, faces):
    with open(path, "w") as fh:
        fh.write(
            "ply\nformat ascii 1.0\nelement vertex %d\nproperty double x\nproperty double y\n"
            "property double z\nelement face %d\nproperty list uchar int vertex_indices\nend_header\n"
            % (len(pos), len(faces))
        )
        np.savetxt(fh, pos, fmt="%.17g")
        np.savetxt(fh, np.column_stack([np.full(len(faces), 3), faces]), fmt="%d")


def inspect_json(path):
    out = subprocess.run([str(BIN), "inspect", str(path), "--json"], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout)


def reference_figures(pos, faces):
    e = np.sort(np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]]), axis=1)
    edges = np.unique(e, axis=0)
    n = len(pos)
    adj = coo_matrix((np.ones(len(edges)), (edges[:, 0], edges[:, 1])), shape=(n, n))
    ncomp, labels = connected_components(adj, directed=False)
    a, b, c = pos[faces[:, 0]], pos[faces[:, 1]], pos[faces[:, 2]]
    area = 0.5 * np.linalg.norm(np.cross(b - a, c - a), axis=1).sum()
    centre = pos.mean(axis=0)
    vol = np.einsum("ij,ij->i", a - centre, np.cross(b - centre, c - centre)).sum() / 6.0
    chis = []
    for k in range(ncomp):
        fk = faces[labels[faces[:, 0]] == k]
        ek = edges[labels[edges[:, 0]] == k]
        chis.append(len(np.unique(fk)) - len(ek) + len(fk))
    return dict(edges=len(edges), ncomp=ncomp, area=area, volume=vol, chis=sorted(chis))


CASES = [
    ("obj", None),
    ("off", None),
    ("ply-ascii", None),
    ("ply-le-f4-u1", ("<", "f4", "u1")),
    ("ply-be-f4-u1", (">", "f4", "u1")),
    ("ply-le-f8-i4", ("<", "f8", "i4")),
    ("ply-be-f8-i4", (">", "f8", "i4")),
]


@pytest.mark.parametrize("name,binary", CASES)
def test_numpy_written_files_inspect_like_numpy(tmp_path, mesh, name, binary):
    pos, faces = mesh
    ext = name.split("-")[0]
    path = tmp_path / ("m." + ext)
    if name == "obj":
        write_obj(path, pos, faces)
    elif name == "off":
        write_off(path, pos, faces)
    elif name == "ply-ascii":
        write_ply_ascii(path, pos, faces)
    else:
        pos = write_ply_binary(path, pos, faces, *binary)
    ref = reference_figures(pos, faces)
    r = inspect_json(path)
    assert r["schema_version"] == 1
    assert (r["vertices"], r["faces"], r["edges"]) == (len(pos), len(faces), ref["edges"])
    assert r["components"]["count"] == ref["ncomp"] == 2
    chis = sorted(c["euler_characteristic"] for c in r["components"]["listed"])
    assert chis == ref["chis"] == [0, 2]  # torus 0, tetrahedron 2 (Massey 1991)
    genus = sorted(c["genus"] for c in r["components"]["listed"])
    assert genus == [0, 1]
    assert abs(r["area_mm2"] - ref["area"]) <= 1e-9 * ref["area"]
    assert abs(r["enclosed_volume_mm3"] - ref["volume"]) <= 1e-9 * abs(ref["volume"])
    # The bounding box is exact: the same float32/float64 values, widened.
    assert r["bounding_box"]["min"] == pos.min(axis=0).tolist()
    assert r["bounding_box"]["max"] == pos.max(axis=0).tolist()
    assert r["orientation"] == "outward"
    assert not r["ready_to_map"]
    assert [x["code"] for x in r["reasons"]] == ["components", "genus"]


def test_truncated_binary_ply_is_a_clear_error(tmp_path, mesh):
    pos, faces = mesh
    path = tmp_path / "cut.ply"
    write_ply_binary(path, pos, faces, "<", "f4", "u1")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - 40])
    out = subprocess.run([str(BIN), "inspect", str(path)], capture_output=True, text=True)
    assert out.returncode == 1
    assert "cut.ply" in out.stderr and "header" in out.stderr
    assert "panicked" not in out.stderr
