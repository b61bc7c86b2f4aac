//! Layout of the flat disk in the plane and projection to the sphere.
//!
//! In: the solved intrinsic triangulation and its scaling; the triangles
//! without a pole corner form a flat disk (angle sum `2 pi` inside, convex
//! boundary). Out: a point `z_i` in the plane for every vertex but the pole,
//! then points on the unit sphere by inverse stereographic projection with
//! the pole at `(0, 0, 1)` (Springborn, "Ideal hyperbolic polyhedra and
//! discrete uniformization", Discrete Comput. Geom. 64 (2020) 63-108;
//! Gillespie, Springborn, Crane, "Discrete conformal equivalence of
//! polyhedral surfaces", ACM Trans. Graph. 40(4) (2021) 103).
//!
//! Method: sparse linear least squares, one complex equation per disk
//! triangle `(a, b, c)`:
//! `(z_c - z_a)/l_ca - e^{i alpha_a} (z_b - z_a)/l_ab = 0`, every equation of
//! unit scale; two vertices of one triangle are pinned and the normal
//! equations are solved by sparse Cholesky. Unlike unfolding triangle by
//! triangle along a tree, the error does not accumulate across scales.
//! What stays true: the planar points are normalised (centroid at 0, unit
//! RMS radius, the lowest-numbered vertex off the centre on the positive x
//! axis: a similarity, hence a Moebius map), and the output faces keep
//! the input's orientation (counter-clockwise seen from outside).
//! Stereographic projection is conformal and maps circles to circles
//! (Needham, "Visual complex analysis", 1997, ch. 3).

use super::energy::FIXED;
use super::intrinsic::{triangle_angles, Intrinsic, Scaling};
use super::sparse::SparseSpd;
use crate::error::{Error, Result};
use crate::mesh::halfedge::prev;
use faer::c64;
use std::f64::consts::PI;

/// The planar layout.
#[derive(Debug, Clone)]
pub struct Layout {
    /// Planar point per vertex (the pole's entry is `[0, 0]` and unused),
    /// normalised; faces of the disk are counter-clockwise.
    pub z: Vec<[f64; 2]>,
    /// Largest residual of the layout equations (unit scale).
    pub residual: f64,
    /// Number of disk triangles.
    pub disk_faces: usize,
    /// `"harmonic"` ([`layout_disk_harmonic`]) or `"least-squares"`
    /// ([`layout_disk`]).
    pub method: String,
}

/// Lay out the triangles of `tri` that have no pole corner.
pub fn layout_disk(tri: &Intrinsic, s: &Scaling) -> Result<Layout> {
    let he = &tri.he;
    let n = he.n_vertices();
    let pole = s.pole;
    let is_disk = |f: u32| (0..3).all(|k| he.tail[(3 * f + k) as usize] != pole);
    let disk: Vec<u32> = (0..he.n_faces() as u32).filter(|&f| is_disk(f)).collect();
    let Some(&f0) = disk.first() else {
        return Err(Error::Algorithm {
            stage: "map: layout",
            message: "no triangle without the pole".into(),
        });
    };
    // Pin a = tail(3 f0) at 0 and b = head at l_ab; lengths relative to l_ab.
    let lref = tri.face_lams(f0, s)[0];
    let pa = he.tail[(3 * f0) as usize];
    let pb = he.tail[(3 * f0 + 1) as usize];
    let mut idx = vec![u32::MAX; n];
    let mut m = 0u32;
    for &f in &disk {
        for k in 0..3 {
            let v = he.tail[(3 * f + k) as usize];
            if v != pa && v != pb && idx[v as usize] == u32::MAX {
                idx[v as usize] = m;
                m += 1;
            }
        }
    }
    let missing =
        (0..n as u32).find(|&v| v != pole && v != pa && v != pb && idx[v as usize] == u32::MAX);
    if let Some(v) = missing {
        return Err(Error::Algorithm {
            stage: "map: layout",
            message: format!("vertex {v} lies in no triangle of the disk"),
        });
    }
    // Coefficients per equation, complex: sum_j c_j z_j = 0.
    let coeffs: Vec<[(u32, c64); 3]> = disk
        .iter()
        .map(|&f| {
            let lams = tri.face_lams(f, s);
            let t = triangle_angles(lams);
            let (a, b, c) = (
                he.tail[(3 * f) as usize],
                he.tail[(3 * f + 1) as usize],
                he.tail[(3 * f + 2) as usize],
            );
            let inv_ab = (-(lams[0] - lref) / 2.0).exp();
            let inv_ca = (-(lams[2] - lref) / 2.0).exp();
            let (sn, cs) = t.angle[1].sin_cos();
            let rot = c64::new(cs * inv_ab, sn * inv_ab); // e^{i alpha_a} / l_ab
            [
                (a, rot - c64::new(inv_ca, 0.0)),
                (b, -rot),
                (c, c64::new(inv_ca, 0.0)),
            ]
        })
        .collect();
    // Hermitian normal equations A^H A z = -A^H A_pinned z_pinned (lower
    // triangle: row >= column).
    let mut z: Vec<c64> = vec![c64::new(0.0, 0.0); n];
    z[pb as usize] = c64::new(1.0, 0.0);
    let mut entries: Vec<(u32, u32, c64)> = Vec::with_capacity(coeffs.len() * 9);
    let mut rhs = vec![c64::new(0.0, 0.0); m as usize];
    for cf in &coeffs {
        for &(vj, cj) in cf {
            let ij = idx[vj as usize];
            if ij == u32::MAX {
                continue;
            }
            for &(vk, ck) in cf {
                let ik = idx[vk as usize];
                let val = cj.conj() * ck;
                if ik == u32::MAX {
                    rhs[ij as usize] -= val * z[vk as usize];
                } else if ij >= ik {
                    entries.push((ij, ik, val));
                }
            }
        }
    }
    let mut spd: SparseSpd<c64> = SparseSpd::default();
    if m > 0 {
        spd.factorize(m as usize, &mut entries)?;
        spd.solve(&mut rhs)?;
    }
    let scatter = |z: &mut Vec<c64>, x: &[c64], add: bool| {
        for (v, zv) in z.iter_mut().enumerate() {
            let i = idx[v];
            if i != u32::MAX {
                *zv = if add {
                    *zv + x[i as usize]
                } else {
                    x[i as usize]
                };
            }
        }
    };
    scatter(&mut z, &rhs, false);
    // Residual of every equation; `atr` collects A^H r for the refinement.
    let residuals = |z: &[c64], atr: &mut Vec<c64>| -> f64 {
        atr.iter_mut().for_each(|x| *x = c64::new(0.0, 0.0));
        let mut worst: f64 = 0.0;
        for cf in &coeffs {
            let mut acc = c64::new(0.0, 0.0);
            for &(v, c) in cf {
                acc += c * z[v as usize];
            }
            worst = worst.max(acc.norm());
            for &(v, c) in cf {
                let i = idx[v as usize];
                if i != u32::MAX {
                    atr[i as usize] -= c.conj() * acc;
                }
            }
        }
        worst
    };
    // Iterative refinement with the same factor (corrected semi-normal
    // equations): each step removes the error the squared condition number
    // of the normal equations let in (Bjorck, "Numerical methods for least
    // squares problems", SIAM 1996, section 2.5).
    let mut atr = vec![c64::new(0.0, 0.0); m as usize];
    let mut residual = residuals(&z, &mut atr);
    for _ in 0..4 {
        if m == 0 {
            break;
        }
        spd.solve(&mut atr)?;
        let mut trial = z.clone();
        scatter(&mut trial, &atr, true);
        let mut atr2 = vec![c64::new(0.0, 0.0); m as usize];
        let r2 = residuals(&trial, &mut atr2);
        if r2.is_nan() || r2 >= residual {
            break;
        }
        z = trial;
        residual = r2;
        atr = atr2;
    }
    let mut z: Vec<[f64; 2]> = z.iter().map(|c| [c.re, c.im]).collect();
    if !residual.is_finite() {
        return Err(Error::Algorithm {
            stage: "map: layout",
            message: "the planar layout is not finite".into(),
        });
    }
    normalise(&mut z, pole)?;
    Ok(Layout {
        z,
        residual,
        disk_faces: disk.len(),
        method: "least-squares".into(),
    })
}

/// Faster layout when the boundary is known to be the pole's link and a
/// factorisation of the interior cotangent Laplacian is at hand (the last
/// Newton matrix of the fast path): the boundary polygon is walked from its
/// edge lengths and exterior angles `pi - (disk angle)`, and the interior
/// is its harmonic extension with the cotangent weights of the flat metric,
/// which a flat triangulated disk satisfies exactly (Pinkall, Polthier,
/// "Computing discrete minimal surfaces and their conjugates", Experimental
/// Math. 2(1) (1993)). The factor comes from a nearby iterate, so the
/// solution is refined with residuals of the exact weights. Returns an
/// error (the caller then uses [`layout_disk`]) if any condition fails or
/// the unit-scale residual of the triangle equations exceeds `max_residual`.
pub fn layout_disk_harmonic(
    tri: &Intrinsic,
    s: &Scaling,
    angle: &[f64],
    cot: &[f64],
    factor: &mut SparseSpd<f64>,
    fvar: &[u32],
    max_residual: f64,
) -> Result<Layout> {
    let fail = |m: &str| Error::Algorithm {
        stage: "map: harmonic layout",
        message: m.into(),
    };
    let he = &tri.he;
    let n = he.n_vertices();
    let pole = s.pole;
    let face_has_pole = |f: usize| (0..3).any(|k| he.tail[3 * f + k] == pole);
    // Disk angles; boundary successor along the disk's counter-clockwise
    // boundary: the pole face (p, b, c) has the disk on the other side of
    // b -> c, so the boundary runs c -> b.
    let mut disk_angle = vec![0.0; n];
    let mut succ = vec![u32::MAX; n];
    let mut succ_len = vec![0.0; n];
    let mut n_boundary = 0usize;
    let mut start = u32::MAX;
    let mut lref = f64::NAN;
    for f in 0..he.n_faces() {
        if !face_has_pole(f) {
            for k in 0..3 {
                let h = 3 * f + k;
                disk_angle[he.tail[prev(h as u32) as usize] as usize] += angle[h];
            }
            continue;
        }
        let k = (0..3).find(|&k| he.tail[3 * f + k] == pole).unwrap_or(0);
        let hb = (3 * f + (k + 1) % 3) as u32; // b -> c
        let (b, c) = (he.tail[hb as usize], he.head(hb));
        if b == pole || c == pole || b == c {
            return Err(fail("a pole face is not a triangle on a disk edge"));
        }
        if succ[c as usize] != u32::MAX {
            return Err(fail("a boundary vertex is met twice"));
        }
        let t = he.twin[hb as usize];
        let lams = tri.face_lams(t / 3, s);
        let lam = lams[(t % 3) as usize];
        if lref.is_nan() {
            lref = lam;
            start = c;
        }
        succ[c as usize] = b;
        succ_len[c as usize] = (0.5 * (lam - lref)).exp();
        n_boundary += 1;
    }
    if n_boundary < 3 {
        return Err(fail("fewer than three boundary vertices"));
    }
    // Walk the boundary.
    let mut z = vec![[0.0f64; 2]; n];
    let mut is_boundary = vec![false; n];
    let (mut v, mut phi) = (start, 0.0f64);
    is_boundary[start as usize] = true;
    let mut end = [0.0, 0.0];
    for step in 0..n_boundary {
        let w = succ[v as usize];
        if w == u32::MAX {
            return Err(fail("the boundary is not a closed polygon"));
        }
        let l = succ_len[v as usize];
        let p = [
            z[v as usize][0] + l * phi.cos(),
            z[v as usize][1] + l * phi.sin(),
        ];
        if step + 1 == n_boundary {
            end = p;
            if w != start {
                return Err(fail("the boundary is not one polygon"));
            }
            break;
        }
        z[w as usize] = p;
        is_boundary[w as usize] = true;
        phi += PI - disk_angle[w as usize];
        v = w;
    }
    if end[0].hypot(end[1]) > 1e-9 {
        return Err(fail("the boundary polygon does not close"));
    }
    // The interior must be exactly the free set of the factor.
    let m = fvar.iter().filter(|&&i| i != FIXED).count();
    for v in 0..n {
        let interior = v as u32 != pole && !is_boundary[v];
        if interior != (fvar[v] != FIXED) {
            return Err(fail("the factor's free set is not the disk interior"));
        }
    }
    // Residual r_i = sum_j w_ij (z_j - z_i) at interior vertices (exact
    // weights), solve H delta = r, z += delta.
    let mut rx = vec![0.0; m];
    let mut ry = vec![0.0; m];
    for _round in 0..4 {
        rx.iter_mut().for_each(|x| *x = 0.0);
        ry.iter_mut().for_each(|x| *x = 0.0);
        for &h in &he.edge_half {
            let (a, b) = (he.tail[h as usize], he.head(h));
            if a == b || a == pole || b == pole {
                continue;
            }
            let w = 0.5 * (cot[h as usize] + cot[he.twin[h as usize] as usize]);
            let (za, zb) = (z[a as usize], z[b as usize]);
            if fvar[a as usize] != FIXED {
                let i = fvar[a as usize] as usize;
                rx[i] += w * (zb[0] - za[0]);
                ry[i] += w * (zb[1] - za[1]);
            }
            if fvar[b as usize] != FIXED {
                let i = fvar[b as usize] as usize;
                rx[i] += w * (za[0] - zb[0]);
                ry[i] += w * (za[1] - zb[1]);
            }
        }
        factor.solve(&mut rx)?;
        factor.solve(&mut ry)?;
        for v in 0..n {
            if fvar[v] != FIXED {
                let i = fvar[v] as usize;
                z[v][0] += rx[i];
                z[v][1] += ry[i];
            }
        }
    }
    // Unit-scale residual of the triangle equations (as in [`layout_disk`]).
    let mut residual: f64 = 0.0;
    for f in 0..he.n_faces() as u32 {
        if face_has_pole(f as usize) {
            continue;
        }
        let lams = tri.face_lams(f, s);
        let alpha = angle[(3 * f + 1) as usize];
        let (a, b, c) = (
            he.tail[(3 * f) as usize],
            he.tail[(3 * f + 1) as usize],
            he.tail[(3 * f + 2) as usize],
        );
        let inv_ab = (-(lams[0] - lref) / 2.0).exp();
        let inv_ca = (-(lams[2] - lref) / 2.0).exp();
        let (za, zb, zc) = (z[a as usize], z[b as usize], z[c as usize]);
        let (ux, uy) = (zb[0] - za[0], zb[1] - za[1]);
        let (sn, cs) = alpha.sin_cos();
        let rx = (zc[0] - za[0]) * inv_ca - (cs * ux - sn * uy) * inv_ab;
        let ry = (zc[1] - za[1]) * inv_ca - (sn * ux + cs * uy) * inv_ab;
        residual = residual.max(rx.hypot(ry));
    }
    if !residual.is_finite() || residual > max_residual {
        return Err(fail(&format!(
            "residual {residual:.3e} above {max_residual:.1e}"
        )));
    }
    normalise(&mut z, pole)?;
    let disk_faces = (0..he.n_faces()).filter(|&f| !face_has_pole(f)).count();
    Ok(Layout {
        z,
        residual,
        disk_faces,
        method: "harmonic".into(),
    })
}

/// Normalise planar points in place (the pole's entry is set to 0): centroid
/// at the origin, unit RMS radius, the lowest-numbered vertex off the centre
/// on the positive x axis. A similarity, hence a Moebius map.
pub fn normalise(z: &mut [[f64; 2]], pole: u32) -> Result<()> {
    let n = z.len();
    // Normalise: centroid at the origin, unit RMS radius.
    let count = (n - usize::from(pole != u32::MAX)) as f64;
    let mut c = [0.0, 0.0];
    for (v, zv) in z.iter().enumerate() {
        if v as u32 != pole {
            c[0] += zv[0];
            c[1] += zv[1];
        }
    }
    c = [c[0] / count, c[1] / count];
    let mut r2 = 0.0;
    for (v, zv) in z.iter().enumerate() {
        if v as u32 != pole {
            r2 += (zv[0] - c[0]).powi(2) + (zv[1] - c[1]).powi(2);
        }
    }
    let scale = 1.0 / (r2 / count).sqrt();
    if !scale.is_finite() {
        return Err(Error::Algorithm {
            stage: "map: layout",
            message: "the planar layout is degenerate or not finite".into(),
        });
    }
    for (v, zv) in z.iter_mut().enumerate() {
        *zv = if v as u32 == pole {
            [0.0, 0.0]
        } else {
            [(zv[0] - c[0]) * scale, (zv[1] - c[1]) * scale]
        };
    }
    // Rotation: the lowest-numbered vertex off the centre goes on the
    // positive x axis, so the output does not depend on which triangle was
    // pinned.
    if let Some(zr) = z
        .iter()
        .enumerate()
        .find(|(v, zv)| *v as u32 != pole && zv[0].hypot(zv[1]) > 1e-3)
        .map(|(_, zv)| *zv)
    {
        let r = zr[0].hypot(zr[1]);
        let (cs, sn) = (zr[0] / r, -zr[1] / r);
        for (v, zv) in z.iter_mut().enumerate() {
            if v as u32 != pole {
                *zv = [cs * zv[0] - sn * zv[1], sn * zv[0] + cs * zv[1]];
            }
        }
    }
    Ok(())
}

/// Inverse stereographic projection of the plane to the unit sphere from the
/// north pole, with the plane's `y` reversed so that counter-clockwise
/// triangles in the plane become counter-clockwise seen from outside.
#[inline]
pub fn to_sphere(z: [f64; 2]) -> [f64; 3] {
    let (x, y) = (z[0], -z[1]);
    let r2 = x * x + y * y;
    let d = 1.0 + r2;
    // (r2 - 1)/(r2 + 1) written to keep precision near the south pole.
    [2.0 * x / d, 2.0 * y / d, (r2 - 1.0) / d]
}

/// Points on the unit sphere for every vertex, the pole at `(0, 0, 1)`.
pub fn project(z: &[[f64; 2]], pole: u32) -> Vec<[f64; 3]> {
    z.iter()
        .enumerate()
        .map(|(v, &zv)| {
            if v as u32 == pole {
                [0.0, 0.0, 1.0]
            } else {
                to_sphere(zv)
            }
        })
        .collect()
}
