//! The folded hemisphere: a star-shaped, cortex-like closed surface.
//!
//! In: [`SurfaceParams`] and a seed. Out: a [`FoldedSurface`]: the mesh in
//! millimetres (RAS+ world coordinates), each vertex's direction on the
//! base sphere, the fold depth and the folding field that made it.
//! Invariants: the mesh is closed, genus 0, one piece, outward, and free of
//! self-intersections; the same parameters and seed give the same bits.
//!
//! Construction. Every vertex of the base sphere ([`super::sphere`]) is a
//! unit direction `u` in the *canonical frame* (the left hemisphere's axes:
//! `x` towards the midline, `y` anterior, `z` superior). Its position is
//! `c + r(u) u` with
//!
//! `r(u) = E(u) + B(u) - D(u)`,
//!
//! where `E` is the radius of an ellipsoid with semi-axes `(a, b, c)`
//! flattened on the medial side by a smooth minimum with the plane
//! `x = m` (the medial wall), `B` is a sum of broad random bumps (von
//! Mises-shaped, a few mm) and `D >= 0` is the fold depth: a smooth maximum
//! (4-norm) of two kinds of sulci, both with the biweight profile
//! `depth * (1 - (d/w)^2)^2` across (`d` the distance to the sulcus line in
//! mm, `w` the half-width):
//!
//! - *primary* sulci: arcs of circles on the sphere (great circles or
//!   smaller ones, for curved sulci) tapering to zero at both ends, from a
//!   template shared by all subjects and moved by a few degrees and rescaled
//!   per subject, so they correspond across a cohort;
//! - *secondary* sulci: the boundaries of the spherical Voronoi cells of
//!   per-subject seed points spread by dart throwing at the gyral spacing.
//!   Near the boundary of the cells of seeds `i` and `j` the distance to it
//!   is taken as `(theta_j - theta_i) / 2` (angles to the seeds, times the
//!   envelope radius), which is continuous across cell boundaries; each
//!   boundary has its own random depth, and a fraction of them are left out
//!   so that neighbouring cells merge into longer, winding gyri.
//!
//! Why no self-intersections: the faces of the base sphere tile it as
//! spherical triangles, so the cones from the centre over the faces meet
//! only along shared edges; a face displaced radially with positive radii
//! stays inside its own cone, so two faces can only meet where their cones
//! do, at shared vertices and edges. The right hemisphere is the mirror
//! image (`x -> -x`, faces reversed to stay outward) of a surface built in
//! the canonical frame with its own random stream.

use super::rng::{axis_angle, mat_vec, Rng};
use super::sphere::{base_sphere, unit};
use crate::error::{Error, Result};
use crate::mesh::{add, cross, dot, norm, scale, sub, TriMesh, Vec3};
use rayon::prelude::*;
use serde::Serialize;

/// Which hemisphere.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Hemi {
    /// Left: the canonical frame itself.
    #[serde(rename = "L")]
    Left,
    /// Right: the mirror image (`x -> -x`) of the canonical frame.
    #[serde(rename = "R")]
    Right,
}

impl Hemi {
    /// The BIDS `hemi` entity value: `L` or `R`.
    pub fn label(self) -> &'static str {
        match self {
            Hemi::Left => "L",
            Hemi::Right => "R",
        }
    }

    /// World direction of a canonical-frame direction.
    pub fn to_world(self, u: Vec3) -> Vec3 {
        match self {
            Hemi::Left => u,
            Hemi::Right => [-u[0], u[1], u[2]],
        }
    }
}

/// Options of the folded surface. Lengths in mm, angles in degrees.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SurfaceParams {
    /// Vertex count (exact), 500 to 4,000,000.
    pub vertices: usize,
    /// Hemisphere.
    pub hemi: Hemi,
    /// Semi-axes of the envelope ellipsoid: medial-lateral, anterior-posterior,
    /// superior-inferior.
    pub semi_axes: [f64; 3],
    /// The medial wall is the plane at this fraction of the first semi-axis
    /// from the centre (1 = no flattening).
    pub medial_cut: f64,
    /// Distance of the medial wall from the mid-sagittal plane `x = 0`.
    pub midline_gap: f64,
    /// `y` and `z` of the hemisphere centre.
    pub centre_yz: [f64; 2],
    /// Number of primary sulci (shared template).
    pub primary_sulci: usize,
    /// Depth range of primary sulci.
    pub primary_depth: [f64; 2],
    /// Length range of primary sulci.
    pub primary_length: [f64; 2],
    /// Depth range of secondary sulci.
    pub secondary_depth: [f64; 2],
    /// Half-width of a sulcus (support of its profile), mean value.
    pub sulcus_half_width: f64,
    /// Least distance between the centre lines of two primary sulci.
    pub sulcus_spacing: f64,
    /// Spacing of the secondary network's seed points (about the width of
    /// a gyrus plus its sulcus).
    pub gyral_spacing: f64,
    /// Fraction of the secondary network's boundaries left without a sulcus.
    pub sulcus_dropout: f64,
    /// Amplitude (standard deviation) of the broad bumps.
    pub bump_amplitude: f64,
    /// Per-subject variability of the primary sulci: rotation, degrees (s.d.).
    pub variability_deg: f64,
    /// Tangential jitter of the base sphere's vertices, in edge lengths (s.d.).
    pub sphere_jitter: f64,
    /// Seed of the template shared by all subjects of a cohort.
    pub template_seed: u64,
}

impl Default for SurfaceParams {
    /// An adult-sized hemisphere at the resolution of a 1 mm scan.
    fn default() -> Self {
        SurfaceParams {
            vertices: 150_000,
            hemi: Hemi::Left,
            semi_axes: [35.0, 80.0, 55.0],
            medial_cut: 0.72,
            midline_gap: 4.0,
            centre_yz: [-18.0, 12.0],
            primary_sulci: 12,
            primary_depth: [16.0, 24.0],
            primary_length: [60.0, 110.0],
            secondary_depth: [11.0, 21.0],
            sulcus_half_width: 4.0,
            sulcus_spacing: 14.0,
            gyral_spacing: 11.5,
            sulcus_dropout: 0.25,
            bump_amplitude: 2.5,
            variability_deg: 4.0,
            sphere_jitter: 0.15,
            template_seed: 0x5EED_0F_C0_27E5,
        }
    }
}

impl SurfaceParams {
    /// Check ranges; the error names the option.
    pub fn validate(&self) -> Result<()> {
        let bad = |what: &str, v: String, want: &str| {
            Err(Error::Invalid(format!("{what} is {v}; expected {want}")))
        };
        if !(super::sphere::MIN_VERTICES..=super::sphere::MAX_VERTICES).contains(&self.vertices) {
            return bad(
                "vertex count",
                self.vertices.to_string(),
                "500 to 4,000,000",
            );
        }
        if !self.semi_axes.iter().all(|a| a.is_finite() && (10.0..=500.0).contains(a)) {
            return bad("semi-axes", format!("{:?}", self.semi_axes), "10 to 500 mm each");
        }
        if !(0.3..=1.0).contains(&self.medial_cut) {
            return bad("medial cut", self.medial_cut.to_string(), "0.3 to 1");
        }
        let min_axis = self.semi_axes.iter().copied().fold(f64::INFINITY, f64::min);
        let deepest = self.primary_depth[1].max(self.secondary_depth[1]).min(DEPTH_CAP);
        let ranges = [
            ("primary depth", self.primary_depth),
            ("primary length", self.primary_length),
            ("secondary depth", self.secondary_depth),
        ];
        for (name, r) in ranges {
            if !(r[0].is_finite() && r[1].is_finite() && 0.0 <= r[0] && r[0] <= r[1]) {
                return bad(name, format!("{r:?}"), "0 <= low <= high, finite");
            }
        }
        // Radii must stay positive: the deepest fold plus a few bumps must fit
        // inside the ellipsoid (the flattened medial wall carries no folds).
        let least_radius = min_axis - 3.0;
        if deepest + 3.0 * self.bump_amplitude >= least_radius {
            return bad(
                "deepest sulcus",
                format!("{deepest} mm"),
                &format!("well below the smallest envelope radius ({least_radius:.1} mm)"),
            );
        }
        let w = [
            ("sulcus half-width", self.sulcus_half_width, 0.5, 30.0),
            ("sulcus spacing", self.sulcus_spacing, 1.0, 100.0),
            ("gyral spacing", self.gyral_spacing, 4.0, 100.0),
            ("sulcus dropout", self.sulcus_dropout, 0.0, 1.0),
            ("bump amplitude", self.bump_amplitude, 0.0, 20.0),
            ("variability", self.variability_deg, 0.0, 45.0),
            ("sphere jitter", self.sphere_jitter, 0.0, 0.3),
            ("midline gap", self.midline_gap, 0.0, 100.0),
        ];
        for (name, v, lo, hi) in w {
            if !(v.is_finite() && lo <= v && v <= hi) {
                return bad(name, v.to_string(), &format!("{lo} to {hi}"));
            }
        }
        if self.primary_sulci > 200 {
            return bad("primary sulci", self.primary_sulci.to_string(), "0 to 200");
        }
        Ok(())
    }
}

/// One sulcus: an arc of the circle `{u : u . pole = cos(rho)}`, from angle
/// `-half_span` to `half_span` about the pole measured from `e1` towards
/// `e2` (`pole, e1, e2` orthonormal, right-handed).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Sulcus {
    pub pole: Vec3,
    pub e1: Vec3,
    pub e2: Vec3,
    /// Angular radius of the circle (pi/2: a great circle).
    pub rho: f64,
    /// Half the arc's angle about the pole (radians, below pi).
    pub half_span: f64,
    /// Deepest point, mm.
    pub depth: f64,
    /// Half-width of the profile, mm.
    pub half_width: f64,
    /// Length along the envelope, mm (approximate).
    pub length: f64,
    /// From the shared template.
    pub primary: bool,
}

/// A broad bump `amplitude * exp(kappa (u . centre - 1))` in mm.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Bump {
    pub centre: Vec3,
    pub kappa: f64,
    pub amplitude: f64,
}

/// The radius function `r(u) = E(u) + B(u) - D(u)` of one surface.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FoldField {
    pub semi_axes: [f64; 3],
    /// Medial wall plane `x = medial_plane` (canonical frame, from the centre).
    pub medial_plane: f64,
    pub sulci: Vec<Sulcus>,
    /// The secondary network.
    pub network: Network,
    pub bumps: Vec<Bump>,
}

/// The secondary sulci: boundaries of the spherical Voronoi cells of
/// `seeds`. `neighbours[i]` lists `(j, depth)` for the seeds `j` near seed
/// `i` and the depth of the sulcus between them (0: none); the list is
/// symmetric.
#[derive(Debug, Clone, PartialEq, Serialize, Default)]
pub struct Network {
    pub seeds: Vec<Vec3>,
    pub neighbours: Vec<Vec<(u32, f64)>>,
    pub half_width: f64,
}

/// Softness of the medial flattening (mm).
const MEDIAL_SOFTNESS: f64 = 3.0;
/// Fold depth never exceeds this (mm): the deepest human sulci are a
/// little deeper than 20 mm.
pub const DEPTH_CAP: f64 = 25.0;
/// Softness of the depth ceiling (mm).
const DEPTH_CAP_SOFTNESS: f64 = 1.5;
/// Exponent of the smooth maximum of overlapping sulci.
const SMOOTH_MAX_P: f64 = 4.0;

/// `0` below `a`, `1` above `b`, cubic in between.
#[inline]
pub(crate) fn smoothstep(a: f64, b: f64, x: f64) -> f64 {
    let t = ((x - a) / (b - a)).clamp(0.0, 1.0);
    t * t * (3.0 - 2.0 * t)
}

impl FoldField {
    /// Radius of the flattened ellipsoid in direction `u` (unit).
    pub fn ellipsoid_radius(&self, u: Vec3) -> f64 {
        let [a, b, c] = self.semi_axes;
        let q = (u[0] / a).powi(2) + (u[1] / b).powi(2) + (u[2] / c).powi(2);
        let re = 1.0 / q.sqrt();
        if u[0] <= 1e-9 {
            return re;
        }
        let rp = self.medial_plane / u[0];
        // Smooth minimum: -k ln(exp(-re/k) + exp(-rp/k)).
        let (lo, hi) = (re.min(rp), re.max(rp));
        lo - MEDIAL_SOFTNESS * (-(hi - lo) / MEDIAL_SOFTNESS).exp().ln_1p()
    }

    /// The envelope `E(u) + B(u)`: the surface without its folds.
    pub fn envelope(&self, u: Vec3) -> f64 {
        let b: f64 = self
            .bumps
            .iter()
            .map(|k| k.amplitude * (k.kappa * (dot(u, k.centre) - 1.0)).exp())
            .sum();
        self.ellipsoid_radius(u) + Self::fold_weight(u) * b
    }

    /// Weight of sulci by direction: 0 on the medial wall, 1 elsewhere.
    pub fn fold_weight(u: Vec3) -> f64 {
        1.0 - smoothstep(0.45, 0.7, u[0])
    }

    /// Fold depth `D(u) >= 0` in mm.
    pub fn depth(&self, u: Vec3) -> f64 {
        let w = Self::fold_weight(u);
        if w <= 0.0 {
            return 0.0;
        }
        let r = self.ellipsoid_radius(u);
        let mut acc = 0.0;
        let mut best = 0.0f64;
        let mut hits = 0;
        for s in &self.sulci {
            let cos_rho = s.rho.cos();
            let c = dot(u, s.pole);
            // |cos(rho + delta) - cos(rho)| <= |delta|: cheap rejection.
            let reach = s.half_width / r;
            if (c - cos_rho).abs() > reach {
                continue;
            }
            let delta = c.clamp(-1.0, 1.0).acos() - s.rho;
            let d = delta.abs() * r;
            if d >= s.half_width {
                continue;
            }
            let theta = dot(u, s.e2).atan2(dot(u, s.e1));
            if theta.abs() >= s.half_span {
                continue;
            }
            let t = 0.5 * (theta / s.half_span + 1.0);
            let ramp = (10.0 / s.length.max(1.0)).min(0.45);
            let along = smoothstep(0.0, ramp, t) * smoothstep(0.0, ramp, 1.0 - t);
            let x = d / s.half_width;
            let across = (1.0 - x * x).powi(2);
            let v = s.depth * along * across;
            if v > 0.0 {
                acc += v.powf(SMOOTH_MAX_P);
                best = best.max(v);
                hits += 1;
            }
        }
        // The secondary network: nearest seed i, then every neighbour j.
        if let Some((i, ci)) = nearest_seed(&self.network.seeds, u) {
            let ti = ci.clamp(-1.0, 1.0).acos();
            let w = self.network.half_width;
            for &(j, dep) in &self.network.neighbours[i] {
                if dep <= 0.0 {
                    continue;
                }
                let Some(sj) = self.network.seeds.get(j as usize) else {
                    continue;
                };
                let tj = dot(u, *sj).clamp(-1.0, 1.0).acos();
                let d = 0.5 * (tj - ti) * r;
                if d >= w {
                    continue;
                }
                let x = d / w;
                let v = dep * (1.0 - x * x).powi(2);
                acc += v.powf(SMOOTH_MAX_P);
                best = best.max(v);
                hits += 1;
            }
        }
        let d = if hits > 1 {
            acc.powf(1.0 / SMOOTH_MAX_P)
        } else {
            best
        };
        // A soft ceiling where sulci cross: smooth minimum with the cap.
        let (lo, hi) = (d.min(DEPTH_CAP), d.max(DEPTH_CAP));
        let capped = lo - DEPTH_CAP_SOFTNESS * (-(hi - lo) / DEPTH_CAP_SOFTNESS).exp().ln_1p();
        w * capped.max(0.0)
    }

    /// The radius `r(u) = E(u) + B(u) - D(u)`.
    pub fn radius(&self, u: Vec3) -> f64 {
        self.envelope(u) - self.depth(u)
    }
}

/// A generated surface and what made it.
#[derive(Debug, Clone)]
pub struct FoldedSurface {
    /// The surface in world millimetres (RAS+), outward faces.
    pub mesh: TriMesh,
    /// Unit direction of each vertex on the base sphere, canonical frame.
    pub directions: Vec<Vec3>,
    /// Fold depth of each vertex (mm below the envelope), `>= 0`.
    pub depth: Vec<f64>,
    /// Hemisphere centre (world mm).
    pub centre: Vec3,
    /// Which hemisphere.
    pub hemi: Hemi,
    /// The radius function.
    pub field: FoldField,
}

impl FoldedSurface {
    /// World position of canonical direction `u` at radius `r` from the centre.
    pub fn world_point(&self, u: Vec3, r: f64) -> Vec3 {
        add(self.centre, scale(self.hemi.to_world(u), r))
    }

    /// Canonical direction of a world point (inverse of [`Self::world_point`]).
    pub fn canonical_direction(&self, p: Vec3) -> Vec3 {
        let d = sub(p, self.centre);
        let d = self.hemi.to_world(d); // the mirror is its own inverse
        let n = norm(d);
        if n > 0.0 {
            scale(d, 1.0 / n)
        } else {
            [0.0, 0.0, 1.0]
        }
    }
}

/// Index and cosine of the seed nearest to `u` (largest dot product; the
/// lowest index wins a tie).
fn nearest_seed(seeds: &[Vec3], u: Vec3) -> Option<(usize, f64)> {
    let mut best: Option<(usize, f64)> = None;
    for (i, s) in seeds.iter().enumerate() {
        let c = dot(u, *s);
        if best.is_none_or(|(_, b)| c > b) {
            best = Some((i, c));
        }
    }
    best
}

/// Seeds by dart throwing (at least `spacing` mm apart on the envelope)
/// and the sulcus depth between each pair of near seeds.
fn secondary_network(
    rng: &mut Rng,
    field: &FoldField,
    spacing: f64,
    depth: [f64; 2],
    dropout: f64,
    half_width: f64,
) -> Network {
    let mut seeds: Vec<Vec3> = Vec::new();
    let mut misses = 0;
    while misses < 2_000 {
        let q = rng.unit_vector();
        let r = field.ellipsoid_radius(q);
        let lim = 1.0 - 0.5 * (spacing / r).powi(2);
        if seeds.iter().all(|p| dot(*p, q) < lim) {
            seeds.push(q);
            misses = 0;
        } else {
            misses += 1;
        }
    }
    let n = seeds.len();
    let mut neighbours: Vec<Vec<(u32, f64)>> = vec![Vec::new(); n];
    for i in 0..n {
        for j in i + 1..n {
            let r = field.ellipsoid_radius(seeds[i]).max(field.ellipsoid_radius(seeds[j]));
            let lim = 1.0 - 0.5 * (3.0 * spacing / r).powi(2);
            if dot(seeds[i], seeds[j]) > lim {
                let d = if rng.uniform() < dropout {
                    0.0
                } else {
                    rng.range(depth[0], depth[1])
                };
                neighbours[i].push((j as u32, d));
                neighbours[j].push((i as u32, d));
            }
        }
    }
    Network {
        seeds,
        neighbours,
        half_width,
    }
}

/// Hemisphere centre in world coordinates.
pub fn hemisphere_centre(params: &SurfaceParams) -> Vec3 {
    let x = -(params.midline_gap + params.medial_cut * params.semi_axes[0]);
    params.hemi.to_world([x, params.centre_yz[0], params.centre_yz[1]])
}

/// Sample points of a sulcus, about `step` mm apart: (direction, envelope radius).
fn sulcus_points(s: &Sulcus, field: &FoldField, step: f64) -> Vec<Vec3> {
    let n = ((s.length / step).ceil() as usize).max(2);
    (0..=n)
        .map(|i| {
            let th = -s.half_span + 2.0 * s.half_span * i as f64 / n as f64;
            let _ = field;
            arc_point(s, th)
        })
        .collect()
}

/// Point of the sulcus circle at angle `theta`.
fn arc_point(s: &Sulcus, theta: f64) -> Vec3 {
    let (sr, cr) = s.rho.sin_cos();
    let (st, ct) = theta.sin_cos();
    unit(add(
        scale(s.pole, cr),
        scale(add(scale(s.e1, ct), scale(s.e2, st)), sr),
    ))
}

/// A random sulcus centred at a random lateral direction.
fn random_sulcus(
    rng: &mut Rng,
    field: &FoldField,
    depth: [f64; 2],
    length: [f64; 2],
    half_width: f64,
    primary: bool,
) -> Sulcus {
    let c = loop {
        let c = rng.unit_vector();
        if FoldField::fold_weight(c) > 0.9 {
            break c;
        }
    };
    // A tangent at c, and the circle through c with that tangent.
    let g = rng.unit_vector();
    let t = unit_or(sub(g, scale(c, dot(g, c))), perpendicular(c));
    let b = cross(c, t);
    // Curvature: from a great circle (rho = pi/2) to rho = 0.45 rad.
    let rho = rng.range(0.45, std::f64::consts::FRAC_PI_2);
    let pole = unit(add(scale(c, rho.cos()), scale(b, rho.sin())));
    let e1 = unit(sub(c, scale(pole, dot(c, pole))));
    let e2 = cross(pole, e1);
    let len = rng.range(length[0], length[1]);
    let r = field.ellipsoid_radius(c);
    let half_span = (0.5 * len / (r * rho.sin())).min(0.9 * std::f64::consts::PI);
    Sulcus {
        pole,
        e1,
        e2,
        rho,
        half_span,
        depth: rng.range(depth[0], depth[1]),
        half_width: half_width * rng.range(0.8, 1.2),
        length: 2.0 * half_span * r * rho.sin(),
        primary,
    }
}

fn unit_or(v: Vec3, fallback: Vec3) -> Vec3 {
    let n = norm(v);
    if n > 1e-12 {
        scale(v, 1.0 / n)
    } else {
        fallback
    }
}

/// Some unit vector perpendicular to the unit vector `c`.
fn perpendicular(c: Vec3) -> Vec3 {
    let a = if c[0].abs() < 0.9 {
        [1.0, 0.0, 0.0]
    } else {
        [0.0, 1.0, 0.0]
    };
    unit(cross(c, a))
}

/// Place sulci by rejection sampling: a candidate is kept when all its
/// sample points are at least `spacing` mm from those already kept.
/// Stops at `total_length` mm, `max_count` sulci or after `attempts` tries.
#[allow(clippy::too_many_arguments)]
fn place_sulci(
    rng: &mut Rng,
    field: &FoldField,
    kept: &mut Vec<Sulcus>,
    depth: [f64; 2],
    length: [f64; 2],
    half_width: f64,
    spacing: f64,
    total_length: f64,
    max_count: usize,
    attempts: usize,
    primary: bool,
) {
    let step = 0.5 * spacing;
    let mut points: Vec<Vec3> = kept
        .iter()
        .flat_map(|s| sulcus_points(s, field, step))
        .collect();
    let mut have: f64 = kept.iter().map(|s| s.length).sum();
    let added_at_start = kept.len();
    for k in 0..attempts {
        if have >= total_length || kept.len() - added_at_start >= max_count {
            break;
        }
        // Long candidates first, shorter ones later to fill the gaps
        // (random sequential adsorption with shrinking pieces).
        let f = k as f64 / attempts as f64;
        let hi = length[1] + (length[0] - length[1]) * f;
        let lo = length[0] + (0.5 * length[0] - length[0]) * f;
        let s = random_sulcus(rng, field, depth, [lo.min(hi), hi], half_width, primary);
        let cand = sulcus_points(&s, field, step);
        let clear = cand.iter().all(|q| {
            let r = field.ellipsoid_radius(*q);
            let lim = 1.0 - 0.5 * (spacing / r).powi(2);
            FoldField::fold_weight(*q) > 0.2 && points.iter().all(|p| dot(*p, *q) < lim)
        });
        if clear {
            have += s.length;
            points.extend(cand);
            kept.push(s);
        }
    }
}

/// The folding field of one surface: template primaries moved per subject,
/// then subject-specific secondaries, then bumps.
pub fn fold_field(params: &SurfaceParams, seed: u64) -> FoldField {
    let mut field = FoldField {
        semi_axes: params.semi_axes,
        medial_plane: params.medial_cut * params.semi_axes[0],
        sulci: Vec::new(),
        network: Network::default(),
        bumps: Vec::new(),
    };
    // The shared template (same for every subject of a cohort).
    let mut template = Vec::new();
    let mut trng = Rng::stream(params.template_seed, "primary-sulci");
    place_sulci(
        &mut trng,
        &field,
        &mut template,
        params.primary_depth,
        params.primary_length,
        params.sulcus_half_width * 1.1,
        params.sulcus_spacing,
        f64::INFINITY,
        params.primary_sulci,
        200 * params.primary_sulci.max(1),
        true,
    );
    let mut rng = Rng::stream(seed, &format!("fold-{}", params.hemi.label()));
    for s in &template {
        let axis = rng.unit_vector();
        let angle = params.variability_deg.to_radians() * rng.normal();
        let m = axis_angle(axis, angle);
        let mut s = s.clone();
        s.pole = unit(mat_vec(&m, s.pole));
        s.e1 = unit(mat_vec(&m, s.e1));
        s.e2 = cross(s.pole, s.e1);
        s.depth *= (1.0 + 0.1 * rng.normal()).clamp(0.7, 1.3);
        field.sulci.push(s);
    }
    field.network = secondary_network(
        &mut rng,
        &field,
        params.gyral_spacing,
        params.secondary_depth,
        params.sulcus_dropout,
        params.sulcus_half_width,
    );
    for _ in 0..10 {
        field.bumps.push(Bump {
            centre: rng.unit_vector(),
            kappa: 1.0 / rng.range(0.35, 0.6).powi(2),
            amplitude: params.bump_amplitude * rng.normal(),
        });
    }
    field
}

/// A folded, closed, genus-0, self-intersection-free hemisphere surface
/// (see the module documentation). Errors only on out-of-range parameters.
pub fn folded_surface(params: &SurfaceParams, seed: u64) -> Result<FoldedSurface> {
    params.validate()?;
    let mut srng = Rng::stream(seed, &format!("sphere-{}", params.hemi.label()));
    let sphere = base_sphere(params.vertices, params.sphere_jitter, &mut srng)?;
    let field = fold_field(params, seed);
    let centre = hemisphere_centre(params);
    let hemi = params.hemi;
    let directions = sphere.positions;
    let radii: Vec<(f64, f64)> = directions
        .par_iter()
        .with_min_len(1024)
        .map(|&u| {
            let d = field.depth(u);
            (field.envelope(u) - d, d)
        })
        .collect();
    if let Some((i, _)) = radii.iter().enumerate().find(|(_, r)| !(r.0 > 0.5)) {
        return Err(Error::Algorithm {
            stage: "synth",
            message: format!("radius at vertex {i} is not positive; reduce sulcal depth or bumps"),
        });
    }
    let positions: Vec<Vec3> = directions
        .iter()
        .zip(&radii)
        .map(|(&u, &(r, _))| add(centre, scale(hemi.to_world(u), r)))
        .collect();
    let mut faces = sphere.faces;
    if hemi == Hemi::Right {
        for t in &mut faces {
            t.swap(1, 2);
        }
    }
    let depth = radii.iter().map(|r| r.1).collect();
    Ok(FoldedSurface {
        mesh: TriMesh { positions, faces },
        directions,
        depth,
        centre,
        hemi,
        field,
    })
}
