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
use faer::c64;

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
        .map(|(v, &zv)| {
            if v as u32 == pole {
                [0.0, 0.0, 1.0]
            } else {
                to_sphere(zv)
            }
        })
        .collect()
}
