//! The folded hemisphere: a star-shaped, cortex-like closed surface.
//!
//! In: [`SurfaceParams`] and a seed. Out: a [`FoldedSurface`]: the mesh in
//! millimetres (RAS+ world coordinates), each vertex's direction on the
//! base sphere, the fold depth and the folding field that made it.
//! Invariants: the mesh is closed, genus 0, one piece, outward, and free of
//! self-intersections; the same parameters and seed give the same bits.
//!
//! Construction. Every vertex of the base sphere ([`super::sphere`]),
//! warped towards the ellipsoid so that vertices spread evenly over it
//! ([`warp_direction`]), is a unit direction `u` in the *canonical frame*
//! (the left hemisphere's axes: `x` towards the midline, `y` anterior, `z`
//! superior). Its position is
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
//! - *secondary* sulci: the boundaries of the Voronoi cells of per-subject
//!   seed points spread over the unfolded envelope by dart throwing at the
//!   gyral spacing. Near the boundary of the cells of seeds `i` and `j` the
//!   distance to it is taken as `(d_j - d_i) / 2` (`d` the distances in mm
//!   from the point of the unfolded envelope to the seeds), which is
//!   continuous across cell boundaries; each boundary has its own random
//!   depth, and a fraction of them are left out so that neighbouring cells
//!   merge into longer, winding gyri.
//!
//! All distances (sulcus widths, spacings) are measured in mm between
//! points of the unfolded, flattened ellipsoid, so folds have the same
//! width everywhere on the elongated shape. Steep sulcal walls would get
//! long, thin triangles from an even spread of directions, so a few rounds
//! of stretch-weighted relaxation ([`SurfaceParams::relax_rounds`]) move
//! vertices into the walls before the final positions are taken.
//!
//! Why no self-intersections: the faces of the base sphere tile it as
//! spherical triangles (and still do after the warp, a positive diagonal
//! map followed by normalisation, and after relaxation, which undoes any
//! move that would turn a face over), so the cones from the centre over
//! the faces meet only along shared edges; a face displaced radially with positive radii
//! stays inside its own cone, so two faces can only meet where their cones
//! do, at shared vertices and edges. The right hemisphere is the mirror
//! image (`x -> -x`, faces reversed to stay outward) of a surface built in
//! the canonical frame with its own random stream.

use super::rng::{axis_angle, mat_vec, Rng};
use super::sphere::{base_sphere, unit};
use crate::error::{Error, Result};
use crate::mesh::topology::vertex_neighbours;
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
    /// Rounds of stretch-weighted relaxation that move vertices into the
    /// sulcal walls so that edges become more even in length (0: none).
    pub relax_rounds: usize,
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
            relax_rounds: 4,
            template_seed: 0x5EED_0FC0_27E5,
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
        if !self
            .semi_axes
            .iter()
            .all(|a| a.is_finite() && (10.0..=500.0).contains(a))
        {
            return bad(
                "semi-axes",
                format!("{:?}", self.semi_axes),
                "10 to 500 mm each",
            );
        }
        if !(0.3..=1.0).contains(&self.medial_cut) {
            return bad("medial cut", self.medial_cut.to_string(), "0.3 to 1");
        }
        let min_axis = self.semi_axes.iter().copied().fold(f64::INFINITY, f64::min);
        let deepest = self.primary_depth[1]
            .max(self.secondary_depth[1])
            .min(DEPTH_CAP);
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
        if self.relax_rounds > 50 {
            return bad(
                "relaxation rounds",
                self.relax_rounds.to_string(),
                "0 to 50",
            );
        }
        if self.primary_sulci > 200 {
            return bad("primary sulci", self.primary_sulci.to_string(), "0 to 200");
        }
        Ok(())
    }
}

/// One primary sulcus: an arc of the circle `{u : u . pole = cos(rho)}`
/// on the sphere of directions, from angle `-half_span` to `half_span`
/// about the pole measured from `e1` towards `e2` (`pole, e1, e2`
/// orthonormal, right-handed), carried to the unfolded envelope as the
/// polyline `path` (mm, relative to the centre). Distances to it are
/// measured in mm in space, so its width is the same everywhere.
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
    /// The arc on the envelope (mm from the centre), about 2 mm steps.
    #[serde(skip)]
    pub path: Vec<Vec3>,
    /// Arc length at each point of `path`, mm.
    #[serde(skip)]
    pub along: Vec<f64>,
    /// Length along the envelope, mm.
    pub length: f64,
    /// A ball holding `path`: centre and radius (mm).
    #[serde(skip)]
    pub bound: (Vec3, f64),
    /// Balls holding runs of 8 segments: (first point, centre, radius).
    #[serde(skip)]
    pub chunks: Vec<(usize, Vec3, f64)>,
}

/// Segments per bounding ball of a sulcus path.
const CHUNK: usize = 8;

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

/// The secondary sulci: boundaries of the Voronoi cells of the seed points
/// `seeds` (on the unfolded envelope, mm from the centre). `neighbours[i]`
/// lists `(j, depth)` for the seeds `j` near seed `i` and the depth of the
/// sulcus between them (0: none); the list is symmetric.
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
/// Length over which a primary sulcus tapers in at each end (mm).
const END_RAMP: f64 = 10.0;
/// Exponent of the warp of the base sphere towards the ellipsoid (see
/// [`warp_direction`]).
pub const WARP_POWER: f64 = 0.6;

/// `0` below `a`, `1` above `b`, cubic in between.
#[inline]
pub(crate) fn smoothstep(a: f64, b: f64, x: f64) -> f64 {
    let t = ((x - a) / (b - a)).clamp(0.0, 1.0);
    t * t * (3.0 - 2.0 * t)
}

/// Smooth minimum `-k ln(exp(-a/k) + exp(-b/k))`.
#[inline]
fn soft_min(a: f64, b: f64, k: f64) -> f64 {
    let (lo, hi) = (a.min(b), a.max(b));
    lo - k * (-(hi - lo) / k).exp().ln_1p()
}

/// Warp a direction of the uniform base sphere so that vertices spread
/// about evenly over the elongated envelope: `u -> normalise(u * s^p)`
/// componentwise, `s` the semi-axes, `p` = [`WARP_POWER`]. (`p = 0` keeps
/// the directions, whose density on an ellipsoid of semi-axes 35, 80, 55
/// mm varies five-fold; `p = 1` is the affine map, which spreads areas
/// better but stretches triangles up to 2.3 times; 0.6 keeps the area
/// ratio between the 5th and 95th percentile under 1.6 and shapes near
/// equilateral, as measured on 20k-point sets.) A positive diagonal map
/// keeps every face's orientation about the centre.
pub fn warp_direction(u: Vec3, semi_axes: [f64; 3]) -> Vec3 {
    let s = semi_axes.map(|a| a.powf(WARP_POWER));
    unit([u[0] * s[0], u[1] * s[1], u[2] * s[2]])
}

/// Nearest point of a sulcus path to `p` if nearer than `cutoff`:
/// (distance, arc length there); runs of segments whose bounding ball is
/// farther are skipped.
fn polyline_distance(s: &Sulcus, p: Vec3, cutoff: f64) -> (f64, f64) {
    let (path, along) = (&s.path, &s.along);
    let mut best = (cutoff, 0.0);
    for &(first, c, r) in &s.chunks {
        if norm(sub(p, c)) - r >= best.0 {
            continue;
        }
        for k in first + 1..(first + CHUNK + 1).min(path.len()) {
            let (a, b) = (path[k - 1], path[k]);
            let ab = sub(b, a);
            let l2 = dot(ab, ab);
            let t = if l2 > 0.0 {
                (dot(sub(p, a), ab) / l2).clamp(0.0, 1.0)
            } else {
                0.0
            };
            let q = add(a, scale(ab, t));
            let d = norm(sub(p, q));
            if d < best.0 {
                best = (d, along[k - 1] + t * (along[k] - along[k - 1]));
            }
        }
    }
    best
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
        soft_min(re, self.medial_plane / u[0], MEDIAL_SOFTNESS)
    }

    /// Point of the flattened ellipsoid (no bumps, no folds) in direction
    /// `u`, mm from the centre: where sulcus distances are measured.
    pub fn base_point(&self, u: Vec3) -> Vec3 {
        scale(u, self.ellipsoid_radius(u))
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

    /// Weight of folds and bumps by direction: 0 on the medial wall, 1
    /// elsewhere.
    pub fn fold_weight(u: Vec3) -> f64 {
        1.0 - smoothstep(0.45, 0.7, u[0])
    }

    /// Fold depth `D(u) >= 0` in mm.
    pub fn depth(&self, u: Vec3) -> f64 {
        self.depth_near(u, None).0
    }

    /// Fold depth at `u` and the index of the network seed nearest to it.
    /// With `hint` (a seed near `u`, e.g. the answer for a nearby point) the
    /// nearest seed is found by a greedy walk over the seeds' neighbour
    /// lists instead of a scan of all seeds; the lists hold every seed
    /// within three spacings, which includes the Delaunay neighbours of a
    /// dart-throwing set, and on a Delaunay graph the greedy walk ends at
    /// the nearest seed.
    pub fn depth_near(&self, u: Vec3, hint: Option<usize>) -> (f64, usize) {
        let w = Self::fold_weight(u);
        if w <= 0.0 {
            // No folds here, but the nearest seed is still reported.
            let p = self.base_point(u);
            let near = match hint {
                Some(h) if h < self.network.seeds.len() => {
                    Some(walk_to_nearest(&self.network, p, h))
                }
                _ => nearest_seed(&self.network.seeds, p),
            };
            return (0.0, near.map_or(0, |n| n.0));
        }
        let p = self.base_point(u);
        let mut acc = 0.0;
        let mut best = 0.0f64;
        let mut hits = 0;
        let mut take = |v: f64| {
            if v > 0.0 {
                acc += v.powf(SMOOTH_MAX_P);
                best = best.max(v);
                hits += 1;
            }
        };
        for s in &self.sulci {
            if norm(sub(p, s.bound.0)) > s.bound.1 + s.half_width {
                continue;
            }
            let (d, at) = polyline_distance(s, p, s.half_width);
            if d >= s.half_width {
                continue;
            }
            let ends = smoothstep(0.0, END_RAMP, at) * smoothstep(0.0, END_RAMP, s.length - at);
            let x = d / s.half_width;
            take(s.depth * ends * (1.0 - x * x).powi(2));
        }
        // The secondary network: nearest seed i, then every neighbour j.
        let net = &self.network;
        let near = match hint {
            Some(h) if h < net.seeds.len() => Some(walk_to_nearest(net, p, h)),
            _ => nearest_seed(&net.seeds, p),
        };
        let nearest = near.map_or(0, |n| n.0);
        if let Some((i, di)) = near {
            let w = net.half_width;
            for &(j, dep) in &net.neighbours[i] {
                if dep <= 0.0 {
                    continue;
                }
                let Some(sj) = net.seeds.get(j as usize) else {
                    continue;
                };
                let d = 0.5 * (norm(sub(p, *sj)) - di);
                if d >= w {
                    continue;
                }
                let x = d / w;
                take(dep * (1.0 - x * x).powi(2));
            }
        }
        let d = if hits > 1 {
            acc.powf(1.0 / SMOOTH_MAX_P)
        } else {
            best
        };
        // A soft ceiling where sulci cross.
        (
            w * soft_min(d, DEPTH_CAP, DEPTH_CAP_SOFTNESS).max(0.0),
            nearest,
        )
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
    /// Unit direction of each vertex from the centre, canonical frame.
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

/// Greedy walk from seed `start` to the seed nearest `p`: move to the
/// nearest listed neighbour while it is nearer (lowest index on ties).
fn walk_to_nearest(net: &Network, p: Vec3, start: usize) -> (usize, f64) {
    let d2 = |i: usize| {
        let d = sub(p, net.seeds[i]);
        dot(d, d)
    };
    // (squared distance, index) decreases strictly at every step.
    let mut cur = (d2(start), start);
    loop {
        let mut next = cur;
        for &(j, _) in &net.neighbours[cur.1] {
            let cand = (d2(j as usize), j as usize);
            if cand.0 < next.0 || (cand.0 == next.0 && cand.1 < next.1) {
                next = cand;
            }
        }
        if next == cur {
            return (cur.1, cur.0.sqrt());
        }
        cur = next;
    }
}

/// Index and distance of the seed nearest to `p` (lowest index on ties).
fn nearest_seed(seeds: &[Vec3], p: Vec3) -> Option<(usize, f64)> {
    let mut best: Option<(usize, f64)> = None;
    for (i, s) in seeds.iter().enumerate() {
        let d = sub(p, *s);
        let d2 = dot(d, d);
        if best.is_none_or(|(_, b)| d2 < b) {
            best = Some((i, d2));
        }
    }
    best.map(|(i, d2)| (i, d2.sqrt()))
}

/// A random direction, spread about evenly over the envelope.
fn random_envelope_direction(rng: &mut Rng, field: &FoldField) -> Vec3 {
    warp_direction(rng.unit_vector(), field.semi_axes)
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
    let s2 = spacing * spacing;
    while misses < 2_000 {
        let q = field.base_point(random_envelope_direction(rng, field));
        if seeds.iter().all(|p| dot(sub(*p, q), sub(*p, q)) >= s2) {
            seeds.push(q);
            misses = 0;
        } else {
            misses += 1;
        }
    }
    let n = seeds.len();
    let mut neighbours: Vec<Vec<(u32, f64)>> = vec![Vec::new(); n];
    let reach2 = (3.0 * spacing).powi(2);
    for i in 0..n {
        for j in i + 1..n {
            let d = sub(seeds[i], seeds[j]);
            if dot(d, d) < reach2 {
                let dep = if rng.uniform() < dropout {
                    0.0
                } else {
                    rng.range(depth[0], depth[1])
                };
                neighbours[i].push((j as u32, dep));
                neighbours[j].push((i as u32, dep));
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
    params
        .hemi
        .to_world([x, params.centre_yz[0], params.centre_yz[1]])
}

/// Point of the circle of `s` at angle `theta` (unit direction).
fn arc_point(pole: Vec3, e1: Vec3, e2: Vec3, rho: f64, theta: f64) -> Vec3 {
    let (sr, cr) = rho.sin_cos();
    let (st, ct) = theta.sin_cos();
    unit(add(
        scale(pole, cr),
        scale(add(scale(e1, ct), scale(e2, st)), sr),
    ))
}

/// Build `path`, `along`, `length` and `bound` of a sulcus from its circle.
fn trace(s: &mut Sulcus, field: &FoldField) {
    let r = field.ellipsoid_radius(s.e1);
    let approx = 2.0 * s.half_span * r * s.rho.sin();
    let n = ((approx / 2.0).ceil() as usize).clamp(4, 400);
    s.path = (0..=n)
        .map(|i| {
            let th = -s.half_span + 2.0 * s.half_span * i as f64 / n as f64;
            field.base_point(arc_point(s.pole, s.e1, s.e2, s.rho, th))
        })
        .collect();
    s.along = Vec::with_capacity(s.path.len());
    let mut acc = 0.0;
    for (k, p) in s.path.iter().enumerate() {
        if k > 0 {
            acc += norm(sub(*p, s.path[k - 1]));
        }
        s.along.push(acc);
    }
    s.length = acc;
    let c = scale(
        s.path.iter().fold([0.0; 3], |a, p| add(a, *p)),
        1.0 / s.path.len() as f64,
    );
    let rad = s.path.iter().map(|p| norm(sub(*p, c))).fold(0.0, f64::max);
    s.bound = (c, rad);
    s.chunks = (0..s.path.len().saturating_sub(1))
        .step_by(CHUNK)
        .map(|first| {
            let pts = &s.path[first..(first + CHUNK + 1).min(s.path.len())];
            let c = scale(
                pts.iter().fold([0.0; 3], |a, p| add(a, *p)),
                1.0 / pts.len() as f64,
            );
            let r = pts.iter().map(|p| norm(sub(*p, c))).fold(0.0, f64::max);
            (first, c, r)
        })
        .collect();
}

/// A random sulcus centred at a random lateral direction.
fn random_sulcus(
    rng: &mut Rng,
    field: &FoldField,
    depth: [f64; 2],
    length: [f64; 2],
    half_width: f64,
) -> Sulcus {
    let c = loop {
        let c = random_envelope_direction(rng, field);
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
    let mut s = Sulcus {
        pole,
        e1,
        e2,
        rho,
        half_span,
        depth: rng.range(depth[0], depth[1]),
        half_width: half_width * rng.range(0.8, 1.2),
        path: Vec::new(),
        along: Vec::new(),
        length: 0.0,
        bound: ([0.0; 3], 0.0),
        chunks: Vec::new(),
    };
    trace(&mut s, field);
    s
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

/// Place up to `count` primary sulci by rejection sampling: a candidate is
/// kept when every point of its path is at least `spacing` mm from the
/// paths already kept and off the medial wall.
fn place_primaries(rng: &mut Rng, field: &FoldField, params: &SurfaceParams) -> Vec<Sulcus> {
    let mut kept: Vec<Sulcus> = Vec::new();
    let s2 = params.sulcus_spacing.powi(2);
    for _ in 0..200 * params.primary_sulci.max(1) {
        if kept.len() >= params.primary_sulci {
            break;
        }
        let s = random_sulcus(
            rng,
            field,
            params.primary_depth,
            params.primary_length,
            1.1 * params.sulcus_half_width,
        );
        let clear = s.path.iter().all(|q| {
            FoldField::fold_weight(unit(*q)) > 0.2
                && kept
                    .iter()
                    .all(|k| k.path.iter().all(|p| dot(sub(*p, *q), sub(*p, *q)) >= s2))
        });
        if clear {
            kept.push(s);
        }
    }
    kept
}

/// The folding field of one surface: template primaries moved per subject,
/// then the subject's secondary network, then bumps.
pub fn fold_field(params: &SurfaceParams, seed: u64) -> FoldField {
    let mut field = FoldField {
        semi_axes: params.semi_axes,
        medial_plane: params.medial_cut * params.semi_axes[0],
        sulci: Vec::new(),
        network: Network::default(),
        bumps: Vec::new(),
    };
    // The shared template (same for every subject of a cohort).
    let mut trng = Rng::stream(params.template_seed, "primary-sulci");
    let template = place_primaries(&mut trng, &field, params);
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
        trace(&mut s, &field);
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

/// One round of stretch-weighted relaxation on the sphere of directions.
///
/// Each vertex moves half-way towards the weighted mean of its neighbours'
/// directions, with weights `L / l` (`L` the edge's length on the surface,
/// `l` its chord on the unit sphere): a weighted neighbour average, of the
/// family of convex combination maps of Floater ("Parametrization and
/// smooth approximation of surface triangulations", Comput. Aided Geom.
/// Des. 14, 1997). Edges on steep sulcal walls are long, so vertices gather
/// there and surface edges even out. (Weights `(L / l)^2`, which minimise
/// the squared edge lengths for fixed stretch, even them out faster but
/// pull vertices out of fundi and crowns, so triangles bridge sulci and
/// the area drops by several per cent; measured on 40k-vertex surfaces.)
/// A move that would turn a face over on the sphere is undone, so the
/// faces keep tiling the sphere and the surface stays embedded.
fn relax_round(
    dirs: &mut [Vec3],
    radii: &[f64],
    nbrs: &(Vec<usize>, Vec<u32>),
    faces: &[[u32; 3]],
) {
    let (start, list) = nbrs;
    let old: Vec<Vec3> = dirs.to_vec();
    let pos: Vec<Vec3> = old.iter().zip(radii).map(|(u, r)| scale(*u, *r)).collect();
    let moved: Vec<Vec3> = (0..old.len())
        .into_par_iter()
        .with_min_len(1024)
        .map(|i| {
            let (u, p) = (old[i], pos[i]);
            let mut acc = [0.0; 3];
            let mut wsum = 0.0;
            for &j in &list[start[i]..start[i + 1]] {
                let j = j as usize;
                let l = norm(sub(old[j], u));
                if l <= 0.0 {
                    continue;
                }
                let w = norm(sub(pos[j], p)) / l;
                acc = add(acc, scale(old[j], w));
                wsum += w;
            }
            if wsum <= 0.0 || norm(acc) <= 0.0 {
                return u;
            }
            let target = unit(acc);
            unit(add(u, scale(sub(target, u), 0.5)))
        })
        .collect();
    dirs.copy_from_slice(&moved);
    loop {
        let mut changed = false;
        for t in faces {
            let [a, b, c] = t.map(|v| dirs[v as usize]);
            if super::sphere::det3(a, b, c) <= 1e-12 {
                for &v in t {
                    if dirs[v as usize] != old[v as usize] {
                        dirs[v as usize] = old[v as usize];
                        changed = true;
                    }
                }
            }
        }
        if !changed {
            break;
        }
    }
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
    let mut directions: Vec<Vec3> = sphere
        .positions
        .iter()
        .map(|&u| warp_direction(u, params.semi_axes))
        .collect();
    // Radius, depth and nearest network seed of every vertex; after the
    // first pass each vertex starts its seed search from its last answer.
    let radius_and_depth = |dirs: &[Vec3], hints: Option<&[usize]>| -> Vec<(f64, f64, usize)> {
        dirs.par_iter()
            .enumerate()
            .with_min_len(1024)
            .map(|(i, &u)| {
                let (d, near) = field.depth_near(u, hints.and_then(|h| h.get(i).copied()));
                (field.envelope(u) - d, d, near)
            })
            .collect()
    };
    let mut rdn = radius_and_depth(&directions, None);
    if params.relax_rounds > 0 {
        let nbrs = vertex_neighbours(directions.len(), &sphere.faces);
        for _ in 0..params.relax_rounds {
            let radii: Vec<f64> = rdn.iter().map(|r| r.0).collect();
            relax_round(&mut directions, &radii, &nbrs, &sphere.faces);
            let hints: Vec<usize> = rdn.iter().map(|r| r.2).collect();
            rdn = radius_and_depth(&directions, Some(&hints));
        }
    }
    let radii: Vec<(f64, f64)> = rdn.iter().map(|r| (r.0, r.1)).collect();
    if let Some((i, _)) = radii
        .iter()
        .enumerate()
        .find(|(_, r)| r.0.is_nan() || r.0 <= 0.5)
    {
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
