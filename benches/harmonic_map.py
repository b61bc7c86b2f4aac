"""Linear conformal ("harmonic") spherical map, for the benchmark only.

The method of S. Angenent, S. Haker, A. Tannenbaum, R. Kikinis, "On the
Laplace-Beltrami operator and brain surface flattening", IEEE Trans. Med.
Imaging 18(8) (1999) 700-711, in the discrete form of S. Haker et al.,
"Conformal surface parameterization for texture mapping", IEEE TVCG 6(2)
(2000): solve the cotangent Laplace equation with the derivative of a delta
function at one triangle as the right-hand side, which maps the punctured
surface conformally (in the limit) to the plane; then inverse stereographic
projection. One sparse linear solve (scipy), no flips, no exactness.

Usage: python harmonic_map.py MESH.off POLE_VERTEX
Prints one JSON object: seconds, angle distortion percentiles (same
per-face definition as horosphere's report), inverted faces.
"""

import json
import sys
import time

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla


def read_off(path):
    with open(path) as f:
        words = [w for line in f for w in line.split("#")[0].split()]
    assert words[0] == "OFF", "expected an OFF file"
    nv, nf = int(words[1]), int(words[2])
    vals = words[4:]
    pos = np.array(vals[: 3 * nv], dtype=float).reshape(nv, 3)
    rest = np.array(vals[3 * nv :], dtype=np.int64).reshape(nf, 4)
    assert (rest[:, 0] == 3).all(), "triangles only"
    return pos, rest[:, 1:]


def cotan_laplacian(pos, faces):
    n = len(pos)
    rows, cols, vals = [], [], []
    for k in range(3):
        i, j, o = faces[:, k], faces[:, (k + 1) % 3], faces[:, (k + 2) % 3]
        u, v = pos[i] - pos[o], pos[j] - pos[o]
        cot = (u * v).sum(1) / np.linalg.norm(np.cross(u, v), axis=1)
        w = 0.5 * cot
        rows += [i, j, i, j]
        cols += [j, i, i, j]
        vals += [-w, -w, w, w]
    return sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))


def face_metrics(pos, sph, faces):
    a, b, c = (pos[faces[:, k]] for k in range(3))
    p, q, r = (sph[faces[:, k]] for k in range(3))

    def frame(e1, e2):
        l1 = np.linalg.norm(e1, axis=1)
        x = e1 / l1[:, None]
        bx = (e2 * x).sum(1)
        by = np.linalg.norm(e2 - bx[:, None] * x, axis=1)
        return l1, bx, by

    l1, bx, by = frame(b - a, c - a)
    m1, cx, cy = frame(q - p, r - p)
    # J = Q P^-1 with P = [[l1, bx], [0, by]], Q = [[m1, cx], [0, cy]].
    j00 = m1 / l1
    j01 = (cx - m1 * bx / l1) / by
    j11 = cy / by
    fro = j00**2 + j01**2 + j11**2
    det = np.abs(j00 * j11)
    disc = np.sqrt(np.maximum(fro**2 - 4 * det**2, 0))
    s1 = np.sqrt(0.5 * (fro + disc))
    ratio = s1 / (det / s1)
    normal = np.cross(q - p, r - p)
    inverted = int(((normal * (p + q + r)).sum(1) <= 0).sum())
    return ratio, inverted


def main():
    pos, faces = read_off(sys.argv[1])
    pole = int(sys.argv[2])
    t0 = time.perf_counter()
    # The puncture: a triangle at the pole vertex.
    f = int(np.nonzero((faces == pole).any(1))[0][0])
    k = int(np.nonzero(faces[f] == pole)[0][0])
    ia, ib, ic = faces[f][k], faces[f][(k + 1) % 3], faces[f][(k + 2) % 3]
    A, B, C = pos[ia], pos[ib], pos[ic]
    ab = np.linalg.norm(B - A)
    theta = np.dot(C - A, B - A) / ab**2
    E = A + theta * (B - A)
    ce = np.linalg.norm(C - E)
    n = len(pos)
    br = np.zeros(n)
    bi = np.zeros(n)
    br[ia], br[ib] = -1 / ab, 1 / ab
    bi[ia], bi[ib], bi[ic] = (1 - theta) / ce, theta / ce, -1 / ce
    L = cotan_laplacian(pos, faces).tocsc()
    # The Laplacian is singular along constants: pin one vertex far from the
    # puncture (its value only translates the plane).
    keep = np.ones(n, bool)
    keep[(ia + n // 2) % n] = False
    Lk = L[keep][:, keep]
    solve = spla.factorized(Lk)
    x = np.zeros(n)
    y = np.zeros(n)
    x[keep] = solve(br[keep])
    y[keep] = solve(bi[keep])
    z = x + 1j * y
    # Same normalisation as horosphere: centroid 0, unit RMS radius.
    z = z - z.mean()
    z = z / np.sqrt((np.abs(z) ** 2).mean())
    r2 = np.abs(z) ** 2
    sph = np.stack([2 * z.real, 2 * z.imag, r2 - 1], 1) / (1 + r2)[:, None]
    seconds = time.perf_counter() - t0
    ratio, inverted = face_metrics(pos, sph, faces)
    if inverted > len(faces) / 2:  # a reflection: mirror it back (free to fix)
        sph[:, 1] *= -1
        ratio, inverted = face_metrics(pos, sph, faces)
    ratio = ratio[np.isfinite(ratio)]
    print(json.dumps({
        "seconds": seconds,
        "angle_distortion_p50": float(np.percentile(ratio, 50)),
        "angle_distortion_p95": float(np.percentile(ratio, 95)),
        "angle_distortion_max": float(ratio.max()),
        "inverted_faces": inverted,
    }))


if __name__ == "__main__":
    main()
