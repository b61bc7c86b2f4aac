//! Checks run on every mapping result; a result that fails is an error,
//! never an output.
//!
//! In: the solved intrinsic triangulation, its scaling, the planar layout
//! and the points on the sphere. Out: a [`Verification`] with the measured
//! figures, or [`Error::Algorithm`] naming the failed check. Checks:
//! - every point on the unit sphere, the pole at the north pole;
//! - the final triangulation is the convex hull of the points: every disk
//!   face is counter-clockwise in the plane, every interior disk edge is
//!   locally Delaunay in the plane (the in-circle test; through the
//!   stereographic lift this is local convexity on the sphere), the disk's
//!   boundary turns left at every vertex (convexity at the edges to the
//!   pole), and the polyhedron has positive volume;
//! - discrete conformal equivalence: for every edge the length cross-ratio
//!   `l_il l_jk / (l_lj l_ki)` from the Penner coordinates equals the one of
//!   the output (computed in the plane, where chordal and planar
//!   cross-ratios agree; the pole at infinity drops out);
//! - KKT: vertices not joined to the pole are flat (angle sum `2 pi`),
//!   vertices joined to it have disk angle at most `pi` (a convex disk).
//!
//! Sources: Bobenko, Pinkall, Springborn, "Discrete conformal maps and ideal
//! hyperbolic polyhedra", Geom. Topol. 19 (2015) 2155-2215 (cross-ratios of
//! inscribed polyhedra); Springborn, "Ideal hyperbolic polyhedra and
//! discrete uniformization", Discrete Comput. Geom. 64 (2020) 63-108;
//! Needham, "Visual complex analysis" (1997), ch. 3 (cross-ratios and
//! stereographic projection).

use super::intrinsic::{Intrinsic, Scaling};
use crate::error::{Error, Result};
use crate::mesh::halfedge::{face, next, prev};
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// Tolerances of the verification.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VerifyTolerances {
    /// Largest allowed `| |x| - 1 |`.
    pub on_sphere: f64,
    /// Largest allowed interior angle-sum error (rad).
    pub interior_angle: f64,
    /// Largest allowed boundary angle excess over `pi` (rad).
    pub boundary_angle: f64,
    /// Largest allowed difference of log cross-ratios.
    pub cross_ratio: f64,
    /// Relative tolerance of the in-circle and turn tests.
    pub convexity: f64,
}

impl Default for VerifyTolerances {
    fn default() -> Self {
        VerifyTolerances {
            on_sphere: 1e-12,
            interior_angle: 1e-9,
            boundary_angle: 1e-9,
            cross_ratio: 1e-7,
            convexity: 1e-8,
        }
    }
}

/// Measured figures of a verified result.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Verification {
    /// Largest `| |x| - 1 |`.
    pub max_radius_error: f64,
    /// Largest `|2 pi - angle sum|` over vertices not joined to the pole.
    pub max_interior_angle_error: f64,
    /// Largest `disk angle - pi` over vertices joined to the pole (negative:
    /// strictly convex).
    pub max_boundary_angle_excess: f64,
    /// Number of disk boundary vertices (joined to the pole).
    pub boundary_vertices: usize,
    /// Largest difference of log cross-ratios.
    pub max_cross_ratio_error: f64,
    /// Largest relative in-circle violation (positive = violated).
    pub max_incircle: f64,
    /// Largest relative right turn along the disk boundary (positive = violated).
    pub max_boundary_turn: f64,
    /// Signed volume of the hull polyhedron (`4 pi / 3` for a round sphere).
    pub hull_volume: f64,
}

fn fail(message: String) -> Error {
    Error::Algorithm {
        stage: "map: verification",
        message,
    }
}

#[inline]
fn orient2d(a: [f64; 2], b: [f64; 2], c: [f64; 2]) -> (f64, f64) {
    let (ux, uy, vx, vy) = (b[0] - a[0], b[1] - a[1], c[0] - a[0], c[1] - a[1]);
    (ux * vy - uy * vx, ux.hypot(uy) * vx.hypot(vy))
}

/// In-circle value (positive if `d` is inside the circle through the
/// counter-clockwise `a, b, c`) and the size of its terms.
#[inline]
fn incircle(a: [f64; 2], b: [f64; 2], c: [f64; 2], d: [f64; 2]) -> (f64, f64) {
    let (adx, ady) = (a[0] - d[0], a[1] - d[1]);
    let (bdx, bdy) = (b[0] - d[0], b[1] - d[1]);
    let (cdx, cdy) = (c[0] - d[0], c[1] - d[1]);
    let (al, bl, cl) = (
        adx * adx + ady * ady,
        bdx * bdx + bdy * bdy,
        cdx * cdx + cdy * cdy,
    );
    let v =
        al * (bdx * cdy - bdy * cdx) + bl * (cdx * ady - cdy * adx) + cl * (adx * bdy - ady * bdx);
    let size = al * (bl * cl).sqrt() + bl * (cl * al).sqrt() + cl * (al * bl).sqrt();
    (v, size)
}

/// Run every check. `sums` are the angle sums per vertex and `angle` the
/// angles per halfedge at the solution.
pub fn verify(
    tri: &Intrinsic,
    s: &Scaling,
    angle: &[f64],
    sums: &[f64],
    z: &[[f64; 2]],
    points: &[[f64; 3]],
    tol: &VerifyTolerances,
) -> Result<Verification> {
    let he = &tri.he;
    let n = he.n_vertices();
    let pole = s.pole;
    let mut out = Verification::default();
    // Points on the sphere, the pole at the north pole.
    for (v, p) in points.iter().enumerate() {
        let r = (p[0] * p[0] + p[1] * p[1] + p[2] * p[2]).sqrt();
        if !r.is_finite() {
            return Err(fail(format!("vertex {v} has a non-finite position")));
        }
        out.max_radius_error = out.max_radius_error.max((r - 1.0).abs());
    }
    if out.max_radius_error > tol.on_sphere {
        return Err(fail(format!(
            "a point is off the sphere by {:.3e}",
            out.max_radius_error
        )));
    }
    if points.get(pole as usize) != Some(&[0.0, 0.0, 1.0]) {
        return Err(fail("the pole is not at the north pole".into()));
    }
    // Structure: no loops at the pole, no folded faces.
    let mut joined = vec![false; n];
    for h in 0..he.n_halfedges() as u32 {
        let (a, b) = (he.tail[h as usize], he.head(h));
        if face(h) == face(he.twin[h as usize]) {
            return Err(fail(format!(
                "edge {} is folded into one triangle",
                he.edge[h as usize]
            )));
        }
        if a == b {
            return Err(fail(format!("a loop edge remains at vertex {a}")));
        }
        if a == pole {
            joined[b as usize] = true;
        }
    }
    out.boundary_vertices = joined.iter().filter(|&&j| j).count();
    // KKT: interior vertices flat, boundary disk angles at most pi.
    let mut disk_angle = vec![0.0; n];
    for f in 0..he.n_faces() as u32 {
        let hs = [3 * f, 3 * f + 1, 3 * f + 2];
        if hs.iter().any(|&h| he.tail[h as usize] == pole) {
            continue;
        }
        for h in hs {
            disk_angle[he.tail[prev(h) as usize] as usize] += angle[h as usize];
        }
    }
    let mut max_excess = f64::NEG_INFINITY;
    let mut worst_interior = 0usize;
    for v in 0..n {
        if v as u32 == pole {
            continue;
        }
        if joined[v] {
            let excess = disk_angle[v] - PI;
            max_excess = max_excess.max(excess);
        } else {
            let err = (sums[v] - 2.0 * PI).abs();
            if err > out.max_interior_angle_error {
                out.max_interior_angle_error = err;
                worst_interior = v;
            }
        }
    }
    out.max_boundary_angle_excess = if max_excess.is_finite() {
        max_excess
    } else {
        0.0
    };
    if out.max_interior_angle_error > tol.interior_angle {
        return Err(fail(format!(
            "interior angle sums are off by up to {:.3e} rad (vertex {worst_interior}, angle sum {:.6})",
            out.max_interior_angle_error, sums[worst_interior]
        )));
    }
    if out.max_boundary_angle_excess > tol.boundary_angle {
        return Err(fail(format!(
            "a disk boundary angle exceeds pi by {:.3e} rad",
            out.max_boundary_angle_excess
        )));
    }
    // Convex hull: disk faces counter-clockwise, in-circle, boundary turns.
    out.max_incircle = f64::NEG_INFINITY;
    out.max_boundary_turn = f64::NEG_INFINITY;
    for f in 0..he.n_faces() as u32 {
        let vs = [
            he.tail[(3 * f) as usize],
            he.tail[(3 * f + 1) as usize],
            he.tail[(3 * f + 2) as usize],
        ];
        if vs.contains(&pole) {
            continue;
        }
        let (o, _) = orient2d(z[vs[0] as usize], z[vs[1] as usize], z[vs[2] as usize]);
        if o.is_nan() || o <= 0.0 {
            return Err(fail(format!(
                "disk face {f} is not counter-clockwise in the plane"
            )));
        }
    }
    let mut max_cr: f64 = 0.0;
    for e in 0..he.n_edges() as u32 {
        let h = he.edge_half[e as usize];
        let t = he.twin[h as usize];
        let i = he.tail[h as usize];
        let j = he.head(h);
        let k = he.tail[prev(h) as usize];
        let l = he.tail[prev(t) as usize];
        let quad = [i, j, k, l];
        let n_pole = quad.iter().filter(|&&v| v == pole).count();
        let zz = |v: u32| z[v as usize];
        if n_pole == 0 {
            let (v, size) = incircle(zz(i), zz(j), zz(k), zz(l));
            let rel = v / size;
            out.max_incircle = out.max_incircle.max(rel);
        } else if n_pole == 1 && (i == pole || j == pole) {
            // Edge to the pole: the boundary must turn left at the other end.
            // With h = p -> b in (p, b, c) and its twin b -> p in (b, p, a),
            // the boundary runs c -> b -> a counter-clockwise.
            let (b, c, a) = if i == pole { (j, k, l) } else { (i, l, k) };
            let (o, size) = orient2d(zz(c), zz(b), zz(a));
            let rel = -o / size;
            out.max_boundary_turn = out.max_boundary_turn.max(rel);
        }
        if n_pole > 1 {
            return Err(fail(format!(
                "edge {e}: the pole appears twice in its quad"
            )));
        }
        // Cross-ratio l_il l_jk / (l_lj l_ki).
        let lam = |hh: u32| tri.lam[he.edge[hh as usize] as usize];
        let cr_intr = 0.5 * (lam(next(t)) + lam(next(h)) - lam(prev(t)) - lam(prev(h)));
        let dist = |a: u32, b: u32| -> f64 {
            if a == pole || b == pole {
                0.0
            } else {
                let (p, q) = (zz(a), zz(b));
                (p[0] - q[0]).hypot(p[1] - q[1]).ln()
            }
        };
        let cr_out = dist(i, l) + dist(j, k) - dist(l, j) - dist(k, i);
        let err = (cr_intr - cr_out).abs();
        if !err.is_finite() {
            return Err(fail(format!("edge {e}: non-finite cross-ratio")));
        }
        max_cr = max_cr.max(err);
    }
    out.max_cross_ratio_error = max_cr;
    if !out.max_incircle.is_finite() {
        out.max_incircle = 0.0;
    }
    if !out.max_boundary_turn.is_finite() {
        out.max_boundary_turn = 0.0;
    }
    if out.max_incircle > tol.convexity {
        return Err(fail(format!(
            "the triangulation is not the convex hull: in-circle violation {:.3e}",
            out.max_incircle
        )));
    }
    if out.max_boundary_turn > tol.convexity {
        return Err(fail(format!(
            "the disk is not convex: boundary turn {:.3e}",
            out.max_boundary_turn
        )));
    }
    if max_cr > tol.cross_ratio {
        return Err(fail(format!(
            "cross-ratios differ from the intrinsic ones by up to {max_cr:.3e}"
        )));
    }
    // Orientation: positive volume of the hull polyhedron.
    let mut vol = 0.0;
    for f in 0..he.n_faces() {
        let [a, b, c] = [0, 1, 2].map(|k| points[he.tail[3 * f + k] as usize]);
        vol += (a[0] * (b[1] * c[2] - b[2] * c[1]) - a[1] * (b[0] * c[2] - b[2] * c[0])
            + a[2] * (b[0] * c[1] - b[1] * c[0]))
            / 6.0;
    }
    out.hull_volume = vol;
    if vol.is_nan() || vol <= 0.0 {
        return Err(fail(format!(
            "the hull has non-positive volume {vol:.3e}: orientation reversed"
        )));
    }
    Ok(out)
}
