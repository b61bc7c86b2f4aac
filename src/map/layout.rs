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

use super::intrinsic::{triangle_angles, Intrinsic, Scaling};
use super::sparse::SparseSpd;
use crate::error::{Error, Result};

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
    let missing = (0..n as u32).find(|&v| v != pole && v != pa && v != pb && idx[v as usize] == u32::MAX);
    if let Some(v) = missing {
        return Err(Error::Algorithm {
            stage: "map: layout",
            message: format!("vertex {v} lies in no triangle of the disk"),
        });
    }
    let mut pinned = vec![[0.0f64; 2]; n];
    pinned[pb as usize] = [1.0, 0.0];
    // Coefficients per equation.
    let eq = |f: u32| -> [(u32, [f64; 2]); 3] {
        let lams = tri.face_lams(f, s);
        let t = triangle_angles(lams);
        let (a, b, c) = (he.tail[(3 * f) as usize], he.tail[(3 * f + 1) as usize], he.tail[(3 * f + 2) as usize]);
        let inv_ab = (-(lams[0] - lref) / 2.0).exp();
        let inv_ca = (-(lams[2] - lref) / 2.0).exp();
        let (sn, cs) = t.angle[1].sin_cos();
        let rot = [cs * inv_ab, sn * inv_ab]; // e^{i alpha_a} / l_ab
        [
            (a, [rot[0] - inv_ca, rot[1]]),
            (b, [-rot[0], -rot[1]]),
            (c, [inv_ca, 0.0]),
        ]
    };
    let mut entries: Vec<(u32, u32, f64)> = Vec::with_capacity(disk.len() * 36);
    let mut rhs = vec![0.0; 2 * m as usize];
    for &f in &disk {
        let cf = eq(f);
        for &(vj, cj) in &cf {
            let ij = idx[vj as usize];
            if ij == u32::MAX {
                continue;
            }
            for &(vk, ck) in &cf {
                // B = C_j^T C_k for the real 2x2 blocks [[p, -q], [q, p]].
                let (pj, qj, pk, qk) = (cj[0], cj[1], ck[0], ck[1]);
                let b = [[pj * pk + qj * qk, -pj * qk + qj * pk], [-qj * pk + pj * qk, qj * qk + pj * pk]];
                let ik = idx[vk as usize];
                if ik == u32::MAX {
                    let z = pinned[vk as usize];
                    rhs[2 * ij as usize] -= b[0][0] * z[0] + b[0][1] * z[1];
                    rhs[2 * ij as usize + 1] -= b[1][0] * z[0] + b[1][1] * z[1];
                    continue;
                }
                for (r, row) in b.iter().enumerate() {
                    for (c, &val) in row.iter().enumerate() {
                        let gr = 2 * ij + r as u32;
                        let gc = 2 * ik + c as u32;
                        if gr >= gc {
                            entries.push((gr, gc, val));
                        }
                    }
                }
            }
        }
    }
    let mut spd = SparseSpd::default();
    if m > 0 {
        spd.factorize(2 * m as usize, &mut entries)?;
        spd.solve(&mut rhs)?;
    }
    let mut z = pinned;
    let scatter = |z: &mut Vec<[f64; 2]>, x: &[f64], add: bool| {
        for (v, zv) in z.iter_mut().enumerate() {
            let i = idx[v];
            if i != u32::MAX {
                let (a, b) = (x[2 * i as usize], x[2 * i as usize + 1]);
                *zv = if add { [zv[0] + a, zv[1] + b] } else { [a, b] };
            }
        }
    };
    scatter(&mut z, &rhs, false);
    // Residual of every equation; `atr` collects A^T r for the refinement.
    let residuals = |z: &[[f64; 2]], atr: &mut Vec<f64>| -> f64 {
        atr.iter_mut().for_each(|x| *x = 0.0);
        let mut worst: f64 = 0.0;
        for &f in &disk {
            let cf = eq(f);
            let mut acc = [0.0, 0.0];
            for &(v, c) in &cf {
                let zv = z[v as usize];
                acc[0] += c[0] * zv[0] - c[1] * zv[1];
                acc[1] += c[1] * zv[0] + c[0] * zv[1];
            }
            worst = worst.max(acc[0].hypot(acc[1]));
            // r = -acc; A^T r per unknown: C_j^T r.
            for &(v, c) in &cf {
                let i = idx[v as usize];
                if i != u32::MAX {
                    atr[2 * i as usize] -= c[0] * acc[0] + c[1] * acc[1];
                    atr[2 * i as usize + 1] -= -c[1] * acc[0] + c[0] * acc[1];
                }
            }
        }
        worst
    };
    // Iterative refinement with the same factor (corrected semi-normal
    // equations): each step removes the error the squared condition number
    // of the normal equations let in (Bjorck, "Numerical methods for least
    // squares problems", SIAM 1996, section 2.5).
    let mut atr = vec![0.0; 2 * m as usize];
    let mut residual = residuals(&z, &mut atr);
    for _ in 0..4 {
        if m == 0 {
            break;
        }
        spd.solve(&mut atr)?;
        let mut trial = z.clone();
        scatter(&mut trial, &atr, true);
        let mut atr2 = vec![0.0; 2 * m as usize];
        let r2 = residuals(&trial, &mut atr2);
        if !(r2 < residual) {
            break;
        }
        z = trial;
        residual = r2;
        atr = atr2;
    }
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
    if !scale.is_finite() || !residual.is_finite() {
        return Err(Error::Algorithm {
            stage: "map: layout",
            message: "the planar layout is degenerate or not finite".into(),
        });
    }
    for (v, zv) in z.iter_mut().enumerate() {
        *zv = if v as u32 == pole { [0.0, 0.0] } else { [(zv[0] - c[0]) * scale, (zv[1] - c[1]) * scale] };
    }
    // Rotation: the lowest-numbered vertex off the centre goes on the
    // positive x axis, so the output does not depend on which triangle was
    // pinned.
    if let Some(zr) = z.iter().enumerate().find(|(v, zv)| *v as u32 != pole && zv[0].hypot(zv[1]) > 1e-3).map(|(_, zv)| *zv) {
        let r = zr[0].hypot(zr[1]);
        let (cs, sn) = (zr[0] / r, -zr[1] / r);
        for (v, zv) in z.iter_mut().enumerate() {
            if v as u32 != pole {
                *zv = [cs * zv[0] - sn * zv[1], sn * zv[0] + cs * zv[1]];
            }
        }
    }
    Ok(Layout {
        z,
        residual,
        disk_faces: disk.len(),
    })
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
        .map(|(v, &zv)| if v as u32 == pole { [0.0, 0.0, 1.0] } else { to_sphere(zv) })
        .collect()
}
