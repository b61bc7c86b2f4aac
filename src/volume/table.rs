//! The marching-cubes case table, generated (not typed in) from one local
//! rule, so that the surface it gives is a closed, oriented 2-manifold.
//!
//! In: nothing (built once, on first use). Out: for each of the 256 corner
//! configurations of a cube, triangles whose corners are cube edges (the
//! surface vertex on that edge). Corner `c` of a cube sits at offset
//! `(c & 1, (c >> 1) & 1, (c >> 2) & 1)`; bit `c` of a configuration is set
//! when that corner is foreground. Edge `4 * d + a + 2 * b` runs along axis
//! `d` (0 = x, 1 = y, 2 = z) at the other two coordinates `(a, b)` (in
//! increasing axis order).
//!
//! The rule (marching cubes, Lorensen and Cline 1987, SIGGRAPH '87,
//! Computer Graphics 21(4):163-169, with the face ambiguity resolved in one
//! fixed way, as discussed by Duerst 1988, Computer Graphics 22(2):72, and
//! Nielson and Hamann 1991, IEEE Visualization '91):
//!
//! 1. On every face, each maximal run of foreground corners (cyclically
//!    adjacent along the face's sides) is cut off by one segment joining the
//!    two cut sides that bound the run. Two foreground corners on a face
//!    diagonal are therefore always separated (and the two background
//!    corners joined): foreground is 6-connected, background 18-connected,
//!    a well-composed pair of digital connectivities. The segments on a face
//!    depend only on that face's four corners, so the two cubes sharing the
//!    face make the same segments.
//! 2. Segments are directed by the outward orientation of the face (cut
//!    side leaving the run -> cut side entering it). The two faces through a
//!    cube edge run along it in opposite directions, so each surface vertex
//!    starts one segment and ends one: the segments form disjoint directed
//!    loops, at least 3 long.
//! 3. Each loop is triangulated with diagonals that never join two vertices
//!    on a common cube face (a dynamic programme over the polygon's
//!    triangulations; every loop that occurs has one). So every diagonal
//!    runs through the cube's interior and belongs to this cube alone.
//!
//! Why the result is closed and manifold: a diagonal lies in exactly two
//! triangles of its loop's triangulation; a segment lies in one triangle of
//! each of the two cubes sharing its face (padding the volume with
//! background makes every face an inner one), with opposite directions, so
//! the orientation is consistent; around a surface vertex the four cubes
//! through its edge each contribute one fan from one face segment to the
//! other, which chain into a single cycle. The exhaustive test in
//! `volume::tests` checks this for all 256 configurations.

use std::sync::OnceLock;

/// One configuration's triangles, as cube-edge indices.
pub type CaseTriangles = Vec<[u8; 3]>;

/// The two corners (lower, upper along the edge's axis) of cube edge `e`.
pub fn edge_corners(e: usize) -> (usize, usize) {
    let d = e / 4;
    let a = e & 1;
    let b = (e >> 1) & 1;
    // The other two axes, increasing.
    let (p, q) = match d {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    };
    let base = (a << p) | (b << q);
    (base, base | (1 << d))
}

/// The cube edge joining corners `u` and `v` (which differ in one bit).
fn edge_of(u: usize, v: usize) -> usize {
    let x = u ^ v;
    let d = x.trailing_zeros() as usize;
    let lo = u & v;
    let (p, q) = match d {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    };
    4 * d + ((lo >> p) & 1) + 2 * ((lo >> q) & 1)
}

/// The six faces, each as four corners counter-clockwise seen from outside.
fn faces() -> [[usize; 4]; 6] {
    let mut out = [[0usize; 4]; 6];
    for d in 0..3 {
        // (u, v) axes with u x v = +axis d.
        let (u, v) = match d {
            0 => (1, 2),
            1 => (2, 0),
            _ => (0, 1),
        };
        for s in 0..2 {
            let at = |a: usize, b: usize| (s << d) | (a << u) | (b << v);
            let ccw = [at(0, 0), at(1, 0), at(1, 1), at(0, 1)];
            out[2 * d + s] = if s == 1 {
                ccw
            } else {
                [ccw[0], ccw[3], ccw[2], ccw[1]]
            };
        }
    }
    out
}

/// True when cube edges `e` and `f` lie on a common face.
fn share_face(e: usize, f: usize) -> bool {
    let (a0, a1) = edge_corners(e);
    let (b0, b1) = edge_corners(f);
    faces().iter().any(|fc| {
        let has = |c: usize| fc.contains(&c);
        has(a0) && has(a1) && has(b0) && has(b1)
    })
}

/// The directed loops of configuration `config` (rules 1 and 2).
pub fn loops(config: u8) -> Vec<Vec<usize>> {
    let fg = |c: usize| (config >> c) & 1 == 1;
    let mut next = [usize::MAX; 12];
    for face in faces() {
        let n_fg = face.iter().filter(|&&c| fg(c)).count();
        if n_fg == 0 || n_fg == 4 {
            continue;
        }
        for i in 0..4 {
            // A run starts at corner i when i is foreground and i-1 is not.
            let prev = face[(i + 3) % 4];
            if !fg(face[i]) || fg(prev) {
                continue;
            }
            let mut j = i;
            while fg(face[(j + 1) % 4]) {
                j = (j + 1) % 4;
            }
            let enter = edge_of(prev, face[i]);
            let leave = edge_of(face[j], face[(j + 1) % 4]);
            next[leave] = enter;
        }
    }
    let mut seen = [false; 12];
    let mut out = Vec::new();
    for start in 0..12 {
        if next[start] == usize::MAX || seen[start] {
            continue;
        }
        let mut lp = Vec::new();
        let mut e = start;
        while !seen[e] {
            seen[e] = true;
            lp.push(e);
            e = next[e];
        }
        out.push(lp);
    }
    out
}

/// Midpoint of cube edge `e` (for the tie-breaking cost of rule 3).
fn edge_mid(e: usize) -> [f64; 3] {
    let (a, b) = edge_corners(e);
    let mut p = [0.0; 3];
    for (k, c) in p.iter_mut().enumerate() {
        *c = 0.5 * (((a >> k) & 1) as f64 + ((b >> k) & 1) as f64);
    }
    p
}

/// Triangulate one loop (rule 3): minimise the number of diagonals joining
/// two vertices on a common face, then the total diagonal length. Returns
/// the triangles and the number of such diagonals left (0 for every loop
/// that occurs).
#[allow(clippy::needless_range_loop)]
fn triangulate(lp: &[usize]) -> (Vec<[u8; 3]>, usize) {
    let n = lp.len();
    let cost = |i: usize, j: usize| -> (usize, f64) {
        // Side of the polygon: free.
        if j == i + 1 || (i == 0 && j == n - 1) {
            return (0, 0.0);
        }
        let (a, b) = (edge_mid(lp[i]), edge_mid(lp[j]));
        let len = ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt();
        (usize::from(share_face(lp[i], lp[j])), len)
    };
    // best[i][j]: triangulation of the sub-polygon i..=j (j - i >= 2).
    let mut best = vec![vec![(0usize, 0.0f64, usize::MAX); n]; n];
    for gap in 2..n {
        for i in 0..n - gap {
            let j = i + gap;
            let mut cand = (usize::MAX, f64::INFINITY, usize::MAX);
            for k in i + 1..j {
                let (b1, l1) = if k - i >= 2 {
                    (best[i][k].0, best[i][k].1)
                } else {
                    (0, 0.0)
                };
                let (b2, l2) = if j - k >= 2 {
                    (best[k][j].0, best[k][j].1)
                } else {
                    (0, 0.0)
                };
                let (c1, d1) = cost(i, k);
                let (c2, d2) = cost(k, j);
                let b = b1 + b2 + c1 + c2;
                let l = l1 + l2 + d1 + d2;
                if b < cand.0 || (b == cand.0 && l < cand.1 - 1e-12) {
                    cand = (b, l, k);
                }
            }
            best[i][j] = cand;
        }
    }
    let mut tris = Vec::new();
    let mut stack = vec![(0usize, n - 1)];
    while let Some((i, j)) = stack.pop() {
        if j < i + 2 {
            continue;
        }
        let k = best[i][j].2;
        // Loops run clockwise seen from the background; reverse them so
        // triangles are counter-clockwise seen from outside.
        tris.push([lp[i] as u8, lp[j] as u8, lp[k] as u8]);
        stack.push((i, k));
        stack.push((k, j));
    }
    (tris, best[0][n - 1].0)
}

/// Triangles of every configuration, and the number of face-sharing
/// diagonals the table needed (0; checked by a test).
fn build() -> (Vec<CaseTriangles>, usize) {
    let mut table = Vec::with_capacity(256);
    let mut bad = 0;
    for config in 0..=255u8 {
        let mut tris = Vec::new();
        for lp in loops(config) {
            let (t, b) = triangulate(&lp);
            bad += b;
            tris.extend(t);
        }
        table.push(tris);
    }
    (table, bad)
}

static TABLE: OnceLock<(Vec<CaseTriangles>, usize)> = OnceLock::new();

/// The case table: `table()[config]` are the triangles of that configuration.
pub fn table() -> &'static [CaseTriangles] {
    &TABLE.get_or_init(build).0
}

/// Number of diagonals in the table that join two vertices on a common
/// cube face (the construction needs this to be 0).
pub fn face_diagonals() -> usize {
    TABLE.get_or_init(build).1
}

/// The edges cut in configuration `config` (one corner in, one out).
pub fn cut_edges(config: u8) -> u16 {
    let mut m = 0u16;
    for e in 0..12 {
        let (a, b) = edge_corners(e);
        if ((config >> a) & 1) != ((config >> b) & 1) {
            m |= 1 << e;
        }
    }
    m
}
