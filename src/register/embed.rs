//! Keeping the subject's triangulation embedded under the warp.
//!
//! In: a velocity field `v` ([`VelocityField`]), the subject sphere's unit
//! directions and faces. Out: `v` attenuated near every subject triangle
//! that the warp `exp(-v)` would turn over or squash below
//! [`MIN_AREA_RATIO`] of its area, the warped directions, and what was
//! done ([`EmbedReport`]).
//!
//! Why: `exp(-v)` is a diffeomorphism of the sphere, so it turns over no
//! infinitesimal triangle; but a subject mesh carries the warp only at its
//! vertices, and a triangle much larger than the warp's detail (a coarse
//! mesh, or a triangle the conformal map has blown up) can be turned over
//! by a smooth warp whose bending inside it exceeds its height. The mesh
//! cannot represent the warp there anyway, so the warp is softened there.
//!
//! What stays true: in a local round each control vector is multiplied by
//! `1 - w/2` for every offending triangle whose smooth bump `w`
//! ([`wendland`]; reaching the triangle's vertices before and after the
//! warp, plus one and a half control spacings) covers it, so by at most a
//! half per offender, and the field stays continuous and unchanged away
//! from the offenders; after
//! [`MAX_LOCAL_ROUNDS`] rounds the whole field is halved until the mesh is
//! embedded, and a field that still fails after [`MAX_GLOBAL_HALVINGS`]
//! halvings is set to zero and the input directions are returned (the
//! identity; reported as `identity_fallback`), so the loop always ends and
//! the result never turns a triangle over. Triangles already squashed in
//! the input (area ratio under the identity at most [`MIN_AREA_RATIO`],
//! i.e. slivers decided by rounding) are left out of the check and
//! counted. Deterministic: offenders are taken in face order; every flow
//! is per point.
//!
//! The fold check on the subject's own mesh follows the practice of the
//! spherical registration literature (Yeo, Sabuncu, Vercauteren, Ayache,
//! Fischl, Golland, "Spherical demons: fast diffeomorphic landmark-free
//! surface registration", IEEE TMI 29 (2010) 650-668, which checks the
//! warped mesh for folds); the local attenuation is our own. The bump is
//! Wendland's C2 function (Wendland, "Piecewise polynomial, positive
//! definite and compactly supported radial functions of minimal degree",
//! Advances in Computational Mathematics 4 (1995) 389-396).

use super::field::{collapsed_faces, VelocityField};
use super::grid::{angle, unit, IcoGrid};
use crate::mesh::{scale, Vec3};
use serde::Serialize;

/// A subject triangle whose area ratio under the warp is at most this is
/// an offender (turned over, or squashed so far that single-precision
/// output could turn it over).
pub const MIN_AREA_RATIO: f64 = 1e-3;
/// Rounds of local attenuation before the whole field is halved.
pub const MAX_LOCAL_ROUNDS: usize = 12;
/// Halvings of the whole field before it is set to zero.
pub const MAX_GLOBAL_HALVINGS: usize = 40;

/// What [`embed_subject`] did.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct EmbedReport {
    /// Subject triangles that the unsoftened warp turned over or squashed.
    pub offenders_first: usize,
    /// Rounds of local attenuation (0: the warp was left as it was).
    pub local_rounds: usize,
    /// Halvings of the whole field (0 unless the local rounds failed).
    pub global_halvings: usize,
    /// Control vertices whose vector was scaled by less than 0.99.
    pub control_vertices_softened: usize,
    /// Subject triangles already squashed below the ratio before any warp
    /// (slivers of the input), left out of the check.
    pub exempt_triangles: usize,
    /// The warp was given up: the field is zero and the subject is left
    /// where it was (only after every softening failed).
    pub identity_fallback: bool,
}

/// Wendland's compactly supported C2 bump: `(1 - r)^4 (4 r + 1)` for
/// `r < 1`, else 0; 1 at `r = 0`.
pub fn wendland(r: f64) -> f64 {
    if r >= 1.0 {
        0.0
    } else {
        let s = 1.0 - r.max(0.0);
        s * s * s * s * (4.0 * r.max(0.0) + 1.0)
    }
}

/// Attenuate `v` until `exp(-v)` keeps the subject mesh (`directions`,
/// `faces`) embedded (module doc). Returns the warped directions (with
/// the final `v`) and the report.
pub fn embed_subject(
    grid: &IcoGrid,
    v: &mut VelocityField,
    directions: &[Vec3],
    faces: &[[u32; 3]],
) -> (Vec<Vec3>, EmbedReport) {
    let mut report = EmbedReport::default();
    let original = v.vectors.clone();
    let spacing = grid.spacing(v.level);
    // Triangles that are already squashed under the identity (slivers and
    // near-duplicate vertices of the input, where rounding alone decides
    // the ratio) cannot be helped by softening: they are left out.
    let identity: Vec<Vec3> = directions.iter().map(|d| unit(*d)).collect();
    let mut exempt = vec![false; faces.len()];
    for t in collapsed_faces(faces, directions, &identity, MIN_AREA_RATIO) {
        exempt[t] = true;
        report.exempt_triangles += 1;
    }
    let mut rounds = 0;
    loop {
        let moved = v.flow(grid, directions, -1.0, v.steps(grid));
        let bad: Vec<usize> = collapsed_faces(faces, directions, &moved, MIN_AREA_RATIO)
            .into_iter()
            .filter(|&t| !exempt[t])
            .collect();
        if rounds == 0 {
            report.offenders_first = bad.len();
        }
        if bad.is_empty() {
            report.control_vertices_softened = v
                .vectors
                .iter()
                .zip(&original)
                .filter(|(a, b)| norm2(**a) < 0.99 * 0.99 * norm2(**b))
                .count();
            return (moved, report);
        }
        if rounds < MAX_LOCAL_ROUNDS {
            report.local_rounds += 1;
            let cp = grid.level_points(v.level);
            // Each control vector is multiplied by `1 - w/2` for every
            // offender whose bump `w` reaches it (offenders in face order).
            let mut factor = vec![1.0f64; cp.len()];
            for &t in &bad {
                let pts: Vec<Vec3> = faces[t]
                    .iter()
                    .flat_map(|&i| [directions[i as usize], moved[i as usize]])
                    .collect();
                let mut c = [0.0; 3];
                for p in &pts {
                    for d in 0..3 {
                        c[d] += p[d];
                    }
                }
                let c = unit(c);
                let reach = pts.iter().map(|p| angle(c, *p)).fold(0.0, f64::max);
                let radius = reach + 1.5 * spacing;
                for (k, p) in cp.iter().enumerate() {
                    let w = wendland(angle(c, *p) / radius);
                    if w > 0.0 {
                        factor[k] *= 1.0 - 0.5 * w;
                    }
                }
            }
            for (vk, f) in v.vectors.iter_mut().zip(&factor) {
                *vk = scale(*vk, *f);
            }
        } else if report.global_halvings < MAX_GLOBAL_HALVINGS {
            report.global_halvings += 1;
            for vk in v.vectors.iter_mut() {
                *vk = scale(*vk, 0.5);
            }
        } else {
            // The identity: the input sphere, whose non-exempt triangles
            // are all above the ratio by construction.
            for vk in v.vectors.iter_mut() {
                *vk = [0.0; 3];
            }
            report.identity_fallback = true;
            report.control_vertices_softened = original.len();
            return (identity, report);
        }
        rounds += 1;
    }
}

fn norm2(a: Vec3) -> f64 {
    a[0] * a[0] + a[1] * a[1] + a[2] * a[2]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::register::grid::tangent;

    #[test]
    fn wendland_is_one_at_the_centre_and_zero_at_the_edge() {
        assert_eq!(wendland(0.0), 1.0);
        assert_eq!(wendland(1.0), 0.0);
        assert!((wendland(0.5) - 0.1875).abs() < 1e-15);
        assert!(wendland(0.3) > wendland(0.6));
    }

    /// A strong local swirl on a fine control grid folds a coarse subject
    /// mesh; after embedding no subject triangle is turned over, and the
    /// field far from the swirl is untouched.
    #[test]
    fn a_swirl_that_folds_a_coarse_mesh_is_softened_only_where_it_folds() {
        let grid = IcoGrid::new(4);
        let level = 4;
        let centre = unit([0.3, 0.2, 0.9]);
        let mut v = VelocityField::zero(&grid, level);
        for (k, p) in grid.level_points(level).iter().enumerate() {
            // Rotation about `centre`, 8 rad per unit time at the centre,
            // fading out within 30 degrees: a tight twist.
            let a = angle(*p, centre);
            let w = wendland(a / 30f64.to_radians());
            let r = crate::mesh::cross(centre, *p);
            v.vectors[k] = tangent(scale(r, 8.0 * w), *p);
        }
        // Subject: a level-2 icosphere (coarse triangles, about 17 degrees).
        let coarse = IcoGrid::new(2);
        let dirs = coarse.points.clone();
        let faces = coarse.faces[2].clone();
        let moved = v.flow(&grid, &dirs, -1.0, v.steps(&grid));
        let before = collapsed_faces(&faces, &dirs, &moved, 0.0);
        assert!(
            !before.is_empty(),
            "the test swirl must fold the coarse mesh"
        );
        let far: Vec<usize> = grid
            .level_points(level)
            .iter()
            .enumerate()
            .filter(|(_, p)| angle(**p, centre) > 80f64.to_radians())
            .map(|(k, _)| k)
            .collect();
        let mut w = v.clone();
        let (warped, rep) = embed_subject(&grid, &mut w, &dirs, &faces);
        assert!(rep.offenders_first >= before.len());
        assert!(rep.local_rounds >= 1);
        assert_eq!(rep.global_halvings, 0, "local softening should suffice");
        assert!(collapsed_faces(&faces, &dirs, &warped, MIN_AREA_RATIO).is_empty());
        assert!(collapsed_faces(&faces, &dirs, &warped, 0.0).is_empty());
        for k in far {
            assert_eq!(
                w.vectors[k], v.vectors[k],
                "control vertex {k} far away changed"
            );
        }
        // Near the centre the swirl was weakened, not removed everywhere.
        assert!(rep.control_vertices_softened > 0);
        assert!(w.max_speed() > 0.0);
    }

    /// The softening gives the same bits with one and with two threads.
    #[test]
    fn softening_does_not_depend_on_the_thread_count() {
        let grid = IcoGrid::new(4);
        let centre = unit([-0.5, 0.4, 0.6]);
        let mut v = VelocityField::zero(&grid, 4);
        for (k, p) in grid.level_points(4).iter().enumerate() {
            let w = wendland(angle(*p, centre) / 30f64.to_radians());
            v.vectors[k] = tangent(scale(crate::mesh::cross(centre, *p), 8.0 * w), *p);
        }
        let coarse = IcoGrid::new(2);
        let run = |threads: usize| {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .expect("a thread pool");
            pool.install(|| {
                let mut w = v.clone();
                let (moved, rep) = embed_subject(&grid, &mut w, &coarse.points, &coarse.faces[2]);
                (moved, rep, w)
            })
        };
        let (m1, r1, w1) = run(1);
        let (m2, r2, w2) = run(2);
        assert!(r1.local_rounds > 0, "the swirl must need softening");
        assert_eq!(r1, r2);
        assert_eq!(w1, w2);
        assert_eq!(m1, m2);
    }

    #[test]
    fn an_embedded_mesh_is_left_alone() {
        let grid = IcoGrid::new(3);
        let mut v = VelocityField::zero(&grid, 3);
        for (k, p) in grid.level_points(3).iter().enumerate() {
            v.vectors[k] = tangent(scale(crate::mesh::cross([0.0, 0.0, 1.0], *p), 0.2), *p);
        }
        let coarse = IcoGrid::new(2);
        let before = v.clone();
        let (_, rep) = embed_subject(&grid, &mut v, &coarse.points, &coarse.faces[2]);
        assert_eq!(rep, EmbedReport::default());
        assert_eq!(v, before);
    }
}
