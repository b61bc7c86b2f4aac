//! Per-vertex maps and landmarks of a folded surface.
//!
//! In: a [`FoldedSurface`] (its vertex directions on the base sphere and
//! fold depths), a seed and, for thickness, an additive shift by direction
//! (the planted group effect and covariates). Out: cortical thickness (mm),
//! a depth map (mm below the unfolded envelope), region labels with their
//! table, and landmark vertices. Invariants: values depend only on the
//! inputs and the seed; thickness stays within [`ThicknessModel::range`];
//! a region or landmark is defined on the base sphere in the canonical
//! frame, so it falls at corresponding places in every subject.
//!
//! Thickness follows the facts of Fischl and Dale ("Measuring the thickness
//! of the human cerebral cortex from magnetic resonance images", PNAS 97,
//! 2000, 11050-11055): about 1 to 4.5 mm, mean about 2.5 mm, thinner in the
//! depths of sulci and thicker on gyral crowns. Our model is
//! `t = crown - drop * min(depth / 15 mm, 1) + smooth(u) + noise + shift(u)`,
//! clamped to the range, with `smooth` a sum of broad random bumps and
//! `noise` independent per vertex.

use super::rng::{axis_angle, mat_vec, Rng};
use super::sphere::unit;
use super::surface::FoldedSurface;
use crate::mesh::{cross, dot, Vec3};
use rayon::prelude::*;
use serde::Serialize;

/// Parameters of the thickness model (mm).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ThicknessModel {
    /// Thickness on gyral crowns (depth 0), before noise.
    pub crown: f64,
    /// Thinning from crown to a fundus 15 mm or more deep.
    pub fundus_drop: f64,
    /// Standard deviation of each broad random bump.
    pub smooth_sd: f64,
    /// Standard deviation of the independent per-vertex noise.
    pub vertex_sd: f64,
    /// Values are clamped to this range.
    pub range: [f64; 2],
}

impl Default for ThicknessModel {
    fn default() -> Self {
        ThicknessModel {
            crown: 2.95,
            fundus_drop: 0.9,
            smooth_sd: 0.12,
            vertex_sd: 0.12,
            range: [1.0, 4.5],
        }
    }
}

/// Cortical thickness of every vertex (mm); `shift(u)` is added at
/// canonical direction `u` before clamping.
pub fn thickness<F>(
    surface: &FoldedSurface,
    model: &ThicknessModel,
    seed: u64,
    shift: F,
) -> Vec<f64>
where
    F: Fn(Vec3) -> f64 + Sync,
{
    let mut rng = Rng::stream(seed, &format!("thickness-{}", surface.hemi.label()));
    let bumps: Vec<(Vec3, f64, f64)> = (0..24)
        .map(|_| {
            let c = rng.unit_vector();
            let kappa = 1.0 / rng.range(0.2, 0.4).powi(2);
            (c, kappa, model.smooth_sd * rng.normal())
        })
        .collect();
    let noise: Vec<f64> = (0..surface.directions.len())
        .map(|_| model.vertex_sd * rng.normal())
        .collect();
    surface
        .directions
        .par_iter()
        .zip(surface.depth.par_iter())
        .zip(noise.par_iter())
        .with_min_len(1024)
        .map(|((&u, &d), &e)| {
            let smooth: f64 = bumps
                .iter()
                .map(|(c, k, a)| a * (k * (dot(u, *c) - 1.0)).exp())
                .sum();
            let t = model.crown - model.fundus_drop * (d / 15.0).min(1.0) + smooth + e + shift(u);
            t.clamp(model.range[0], model.range[1])
        })
        .collect()
}

/// The depth map: mm below the unfolded envelope (0 on crowns, positive
/// in sulci).
pub fn depth_map(surface: &FoldedSurface) -> Vec<f64> {
    surface.depth.clone()
}

/// One entry of the label table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Region {
    /// Key stored in the label map.
    pub key: i32,
    /// Our own region name.
    pub name: &'static str,
    /// Colour, red, green, blue, alpha in `[0, 1]`.
    pub rgba: [f32; 4],
    /// Centre direction on the base sphere (canonical frame); `None` for
    /// regions not defined by a centre.
    pub centre: Option<Vec3>,
}

/// Key of vertices that belong to no region (stray pieces).
pub const UNLABELLED: i32 = 0;
/// Key of the medial wall.
pub const MEDIAL_WALL: i32 = 1;

/// The label table: unlabelled, the medial wall, and six invented regions
/// named after parts of a boat, each the set of directions nearer to its
/// centre than to the other centres (a spherical Voronoi partition) outside
/// the medial wall (`x > 0.75` in the canonical frame).
pub fn region_table() -> Vec<Region> {
    let c = |v: Vec3| Some(unit(v));
    vec![
        Region {
            key: UNLABELLED,
            name: "unlabelled",
            rgba: [0.0, 0.0, 0.0, 0.0],
            centre: None,
        },
        Region {
            key: MEDIAL_WALL,
            name: "medial-wall",
            rgba: [0.55, 0.55, 0.55, 1.0],
            centre: None,
        },
        Region {
            key: 2,
            name: "prow",
            rgba: [0.89, 0.42, 0.20, 1.0],
            centre: c([-0.2, 0.95, 0.1]),
        },
        Region {
            key: 3,
            name: "crest",
            rgba: [0.96, 0.80, 0.25, 1.0],
            centre: c([0.0, 0.1, 1.0]),
        },
        Region {
            key: 4,
            name: "flank",
            rgba: [0.30, 0.65, 0.45, 1.0],
            centre: c([-1.0, 0.0, 0.1]),
        },
        Region {
            key: 5,
            name: "keel",
            rgba: [0.25, 0.45, 0.80, 1.0],
            centre: c([-0.3, 0.1, -0.95]),
        },
        Region {
            key: 6,
            name: "stern",
            rgba: [0.60, 0.35, 0.70, 1.0],
            centre: c([-0.1, -1.0, 0.0]),
        },
        Region {
            key: 7,
            name: "shoulder",
            rgba: [0.85, 0.45, 0.60, 1.0],
            centre: c([-0.5, -0.55, 0.65]),
        },
    ]
}

/// Region key of every vertex. The region centres are turned by a small
/// random rotation per subject (`jitter_deg` standard deviation) so that
/// borders vary a little between subjects.
pub fn region_labels(surface: &FoldedSurface, seed: u64, jitter_deg: f64) -> Vec<i32> {
    let mut rng = Rng::stream(seed, &format!("regions-{}", surface.hemi.label()));
    let table = region_table();
    let centres: Vec<(i32, Vec3)> = table
        .iter()
        .filter_map(|r| r.centre.map(|c| (r.key, jitter(&mut rng, c, jitter_deg))))
        .collect();
    surface
        .directions
        .iter()
        .map(|&u| {
            if u[0] > 0.75 {
                return MEDIAL_WALL;
            }
            let mut best = (UNLABELLED, f64::NEG_INFINITY);
            for &(k, c) in &centres {
                let d = dot(u, c);
                if d > best.1 {
                    best = (k, d);
                }
            }
            best.0
        })
        .collect()
}

/// Turn the unit vector `d` by an angle of about `sd_deg` degrees (each
/// tangent component normal with that standard deviation) in a random
/// direction.
pub fn jitter(rng: &mut Rng, d: Vec3, sd_deg: f64) -> Vec3 {
    let (gx, gy) = (rng.normal(), rng.normal());
    if sd_deg <= 0.0 {
        return d;
    }
    let a = if d[0].abs() < 0.9 {
        [1.0, 0.0, 0.0]
    } else {
        [0.0, 1.0, 0.0]
    };
    let t1 = unit(cross(d, a));
    let t2 = cross(d, t1);
    let (sx, sy) = (gx * sd_deg.to_radians(), gy * sd_deg.to_radians());
    let angle = (sx * sx + sy * sy).sqrt();
    if angle == 0.0 {
        return d;
    }
    // Rotate about the axis perpendicular to d and to the step direction.
    let step = unit([
        t1[0] * sx + t2[0] * sy,
        t1[1] * sx + t2[1] * sy,
        t1[2] * sx + t2[2] * sy,
    ]);
    let axis = cross(d, step);
    unit(mat_vec(&axis_angle(axis, angle), d))
}

/// A named anatomical-like point on the base sphere (canonical frame).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Landmark {
    /// Our own name.
    pub name: &'static str,
    /// Unit direction.
    pub direction: Vec3,
}

/// The landmark template: seven invented points, named after parts of a boat.
pub fn landmark_template() -> Vec<Landmark> {
    let l = |name, v: Vec3| Landmark {
        name,
        direction: unit(v),
    };
    vec![
        l("bow-tip", [-0.25, 1.0, 0.05]),
        l("stern-tip", [-0.2, -1.0, 0.1]),
        l("masthead", [-0.15, 0.0, 1.0]),
        l("beam", [-1.0, -0.1, 0.15]),
        l("bilge", [-0.7, 0.3, -0.7]),
        l("hatch", [-0.55, 0.55, 0.6]),
        l("rudder", [-0.45, -0.65, -0.6]),
    ]
}

/// Vertex whose direction is nearest to `d` (largest dot product; lowest
/// index on ties). `None` for an empty list.
pub fn nearest_vertex(directions: &[Vec3], d: Vec3) -> Option<u32> {
    let mut best: Option<(usize, f64)> = None;
    for (i, u) in directions.iter().enumerate() {
        let c = dot(*u, d);
        if best.is_none_or(|(_, b)| c > b) {
            best = Some((i, c));
        }
    }
    best.map(|(i, _)| i as u32)
}

/// A landmark as placed in one subject.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PlacedLandmark {
    pub name: &'static str,
    /// The subject's jittered direction (canonical frame).
    pub direction: Vec3,
    /// The vertex nearest to it.
    pub vertex: u32,
}

/// Place the landmark template in one surface: each direction jittered by
/// `jitter_deg` (standard deviation per tangent component), then snapped
/// to the nearest vertex.
pub fn place_landmarks(surface: &FoldedSurface, seed: u64, jitter_deg: f64) -> Vec<PlacedLandmark> {
    let mut rng = Rng::stream(seed, &format!("landmarks-{}", surface.hemi.label()));
    landmark_template()
        .into_iter()
        .map(|l| {
            let d = jitter(&mut rng, l.direction, jitter_deg);
            let vertex = nearest_vertex(&surface.directions, d).unwrap_or(0);
            PlacedLandmark {
                name: l.name,
                direction: d,
                vertex,
            }
        })
        .collect()
}

/// The planted group effect: a spherical cap of the base sphere.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CapEffect {
    /// Centre direction (canonical frame).
    pub centre: Vec3,
    /// Angular radius, degrees.
    pub angular_radius_deg: f64,
    /// Change of thickness inside the cap, mm (negative: thinner).
    pub change_mm: f64,
}

impl CapEffect {
    /// Whether direction `u` lies in the cap.
    pub fn contains(&self, u: Vec3) -> bool {
        dot(u, self.centre) >= self.angular_radius_deg.to_radians().cos()
    }
}

impl Default for CapEffect {
    /// A cap of 18 degrees on the lateral, upper back part (in the
    /// "shoulder" region), 0.3 mm thinner.
    fn default() -> Self {
        CapEffect {
            centre: unit([-0.75, -0.25, 0.6]),
            angular_radius_deg: 18.0,
            change_mm: -0.3,
        }
    }
}
