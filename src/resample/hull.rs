//! Convex hull of points on a sphere: the spherical Delaunay triangulation
//! of a subject's sphere points.
//!
//! In: points near a sphere centred at the origin (any radius). Out: a
//! [`Hull`]: triangles (vertex indices into the input, counter-clockwise
//! seen from outside), the neighbour of each triangle across each edge, and
//! the list of input points that are not hull vertices (exact duplicates,
//! and points that rounding put inside the hull of the others). What stays
//! true: the triangles form a closed triangulated sphere (`F = 2V - 4` over
//! the hull vertices), every input point is on or below every hull plane
//! (exact predicates, [`super::predicates::orient`]), and the output depends
//! only on the input (a fixed seed orders the insertions), never on the
//! thread count.
//!
//! For points on a sphere, the faces of the convex hull are exactly the
//! triangles of the spherical Delaunay triangulation (Brown, "Voronoi
//! diagrams from convex hulls", Information Processing Letters 9 (1979)
//! 223-228), which is why this triangulation is valid wherever the subject's
//! own connectivity folds on the sphere.
//!
//! Algorithm: incremental construction in a biased randomized insertion
//! order (Amenta, Choi, Rote, "Incremental constructions con BRIO",
//! Symposium on Computational Geometry 2003): the points are shuffled
//! with a fixed seed, split into rounds of doubling size, and each round is
//! sorted along a Morton (Z-order) curve, so that each point is close to
//! the one before. A new point `p` is located by a visibility walk
//! (Devillers, Pion, Teillaud 2002, see [`super::locate`]) from the last
//! new triangle to the triangle whose central projection contains the
//! direction of `p` seen from a projection centre strictly inside the hull
//! (the origin, or else the first tetrahedron's centroid). That triangle is
//! visible from `p` exactly when `p` is outside the hull (the ray from the
//! centre to `p` crosses it before reaching `p`); otherwise `p` is on or
//! inside the hull and is excluded. The visible region is then found by a
//! search across edges, removed, and its horizon joined to `p` (the
//! beneath-beyond step; Preparata and Hong, "Convex hulls of finite sets
//! of points in two and three dimensions", Comm. ACM 20 (1977) 87-93).
//! A triangle is visible from `q` only when
//! `q` is strictly above its plane; co-planar configurations (co-spherical
//! points, such as the symmetric quadrilaterals of an icosahedral sphere)
//! therefore keep the older triangles and stay valid without symbolic
//! perturbation: a point on a sphere is strictly outside the hull of other
//! points of that sphere, so it strictly sees at least one triangle.

use super::predicates::orient;
use crate::error::{Error, Result};
use crate::mesh::{dot, sub, Vec3};

/// No triangle / no point.
const NONE: u32 = u32::MAX;

/// Why an input point is not a vertex of the hull.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Excluded {
    /// Same coordinates as the hull vertex `of`.
    Duplicate { of: u32 },
    /// On or inside the hull of the other points (only possible for points
    /// that are not exactly on the sphere).
    Interior,
}

/// The convex hull triangulation.
#[derive(Debug, Clone, PartialEq)]
pub struct Hull {
    /// Triangles, counter-clockwise seen from outside.
    pub faces: Vec<[u32; 3]>,
    /// `neighbours[f][i]`: the triangle across the edge from corner `i` to
    /// corner `i + 1` of triangle `f`.
    pub neighbours: Vec<[u32; 3]>,
    /// Input points that are not hull vertices, by index, with the reason.
    pub excluded: Vec<(u32, Excluded)>,
}

/// Small deterministic generator (SplitMix64, Steele, Lea, Flood,
/// "Fast splittable pseudorandom number generators", OOPSLA 2014).
struct SplitMix(u64);
impl SplitMix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }
}

struct Builder<'a> {
    pts: &'a [Vec3],
    faces: Vec<[u32; 3]>,
    nbr: Vec<[u32; 3]>,
    alive: Vec<bool>,
    /// Scratch per vertex: the new triangle whose base edge starts there.
    start_of: Vec<u32>,
    /// Scratch per triangle: visited in the current insertion.
    mark: Vec<u32>,
    /// Projection centre of the walks: a point strictly inside the hull
    /// (the origin when the first tetrahedron holds it).
    centre: Vec3,
    centre_is_origin: bool,
    /// Scratch lists of one insertion.
    visible: Vec<u32>,
    horizon: Vec<(u32, u32, u32)>,
}

impl Builder<'_> {
    fn sees(&self, f: u32, q: u32) -> bool {
        let [a, b, c] = self.faces[f as usize];
        let p = |i: u32| self.pts[i as usize];
        orient(p(a), p(b), p(c), p(q)) > 0
    }

    fn add_face(&mut self, v: [u32; 3]) -> u32 {
        self.faces.push(v);
        self.nbr.push([NONE; 3]);
        self.alive.push(true);
        self.mark.push(0);
        (self.faces.len() - 1) as u32
    }

    /// Insert point `p`, which sees triangle `f0`.
    /// Returns the first new triangle.
    fn insert(&mut self, p: u32, f0: u32, stamp: u32) -> Result<u32> {
        // Visible region: connected, found by a search from f0.
        let mut visible = std::mem::take(&mut self.visible);
        let mut horizon = std::mem::take(&mut self.horizon); // (a, b, outer face)
        visible.clear();
        horizon.clear();
        visible.push(f0);
        self.mark[f0 as usize] = stamp;
        let mut k = 0;
        while k < visible.len() {
            let f = visible[k];
            k += 1;
            for i in 0..3 {
                let g = self.nbr[f as usize][i];
                if g == NONE {
                    return Err(Error::Algorithm {
                        stage: "convex hull",
                        message: format!("triangle {f} lacks a neighbour across edge {i}"),
                    });
                }
                if self.mark[g as usize] == stamp {
                    continue;
                }
                if self.sees(g, p) {
                    self.mark[g as usize] = stamp;
                    visible.push(g);
                } else {
                    let v = self.faces[f as usize];
                    horizon.push((v[i], v[(i + 1) % 3], g));
                }
            }
        }
        // A triangle that is not visible but was reached from two visible
        // ones gives two horizon edges; that is fine. New cone triangles:
        let first_new = self.faces.len() as u32;
        for &(a, b, g) in &horizon {
            let nf = self.add_face([a, b, p]);
            if self.start_of[a as usize] != NONE {
                return Err(Error::Algorithm {
                    stage: "convex hull",
                    message: format!(
                        "the horizon of point {p} passes vertex {a} twice; expected a simple cycle"
                    ),
                });
            }
            self.start_of[a as usize] = nf;
            self.nbr[nf as usize][0] = g;
            let gv = self.faces[g as usize];
            let slot = (0..3).find(|&j| gv[j] == b && gv[(j + 1) % 3] == a);
            match slot {
                Some(j) => self.nbr[g as usize][j] = nf,
                None => {
                    return Err(Error::Algorithm {
                        stage: "convex hull",
                        message: format!("triangle {g} does not share edge {a}-{b}"),
                    })
                }
            }
        }
        for &(_, b, _) in &horizon {
            let nf_b = self.start_of[b as usize];
            if nf_b == NONE {
                return Err(Error::Algorithm {
                    stage: "convex hull",
                    message: format!("the horizon of point {p} is not closed at vertex {b}"),
                });
            }
        }
        for &(a, b, _) in &horizon {
            let nf = self.start_of[a as usize];
            let nf_b = self.start_of[b as usize];
            // Edge (b, p) of nf is edge (p, b) of nf_b, its corner 2.
            self.nbr[nf as usize][1] = nf_b;
            self.nbr[nf_b as usize][2] = nf;
        }
        for &(a, _, _) in &horizon {
            self.start_of[a as usize] = NONE;
        }
        for &f in &visible {
            self.alive[f as usize] = false;
        }
        self.visible = visible;
        self.horizon = horizon;
        Ok(first_new)
    }

    /// True when `t` is on the outer side of the plane through the
    /// projection centre and edge `k` of `f` (exact).
    fn edge_outside(&self, f: u32, k: usize, t: Vec3) -> bool {
        let v = self.faces[f as usize];
        let (a, b) = (self.pts[v[k] as usize], self.pts[v[(k + 1) % 3] as usize]);
        if !self.centre_is_origin {
            return orient(self.centre, a, b, t) < 0;
        }
        // Float triple product first: its rounding error is below
        // 1e-14 |a| |b| |t| (a few roundings of the products), so a larger
        // value has a certain sign; otherwise decide exactly.
        let d = dot(crate::mesh::cross(a, b), t);
        let scale = crate::mesh::norm(a) * crate::mesh::norm(b) * crate::mesh::norm(t);
        if d.abs() > 1e-13 * scale {
            return d < 0.0;
        }
        orient([0.0; 3], a, b, t) < 0
    }

    /// Walk from `start` to the triangle whose central projection holds the
    /// direction of `t`; `None` after `limit` steps.
    fn walk(&self, t: Vec3, start: u32, limit: usize) -> Option<u32> {
        let mut f = start;
        for step in 0..limit {
            let r = step % 3;
            match (0..3)
                .map(|k| (k + r) % 3)
                .find(|&k| self.edge_outside(f, k, t))
            {
                Some(k) => f = self.nbr[f as usize][k],
                None => return Some(f),
            }
        }
        None
    }

    /// A live triangle visible from `p`, by a scan.
    fn scan_visible(&self, p: u32) -> Option<u32> {
        (0..self.faces.len() as u32).find(|&f| self.alive[f as usize] && self.sees(f, p))
    }

    /// True when `c` is strictly below every live triangle.
    fn holds(&self, c: Vec3) -> bool {
        (0..self.faces.len()).all(|f| {
            !self.alive[f] || {
                let [a, b, d] = self.faces[f];
                let q = |i: u32| self.pts[i as usize];
                orient(q(a), q(b), q(d), c) < 0
            }
        })
    }
}

/// The convex hull of `points` (see the module doc). Needs at least four
/// points not all on one plane; the hull must contain the origin strictly
/// inside (checked), as it does for points spread over a sphere centred at
/// the origin.
pub fn convex_hull(points: &[Vec3]) -> Result<Hull> {
    let hull = any_hull(points)?;
    // The origin must be strictly inside: below every hull plane.
    let origin = [0.0; 3];
    if let Some(f) = hull.faces.iter().position(|v| {
        orient(
            points[v[0] as usize],
            points[v[1] as usize],
            points[v[2] as usize],
            origin,
        ) >= 0
    }) {
        return Err(Error::Invalid(format!(
            "the sphere points do not surround the centre (hull triangle {f} faces it); expected points spread over the whole sphere"
        )));
    }
    Ok(hull)
}

/// The convex hull of any point set in general enough position (four
/// points not on one plane), wherever the origin is.
fn any_hull(points: &[Vec3]) -> Result<Hull> {
    let n = points.len();
    if n < 4 {
        return Err(Error::Invalid(format!(
            "{n} sphere points; expected at least 4 for a triangulation"
        )));
    }
    if n >= NONE as usize {
        return Err(Error::Invalid(format!("{n} sphere points; too many")));
    }
    if let Some(i) = points.iter().position(|p| !p.iter().all(|c| c.is_finite())) {
        return Err(Error::Invalid(format!(
            "sphere point {i} has a non-finite coordinate"
        )));
    }
    // Exact duplicates: keep the lowest index.
    let mut order: Vec<u32> = (0..n as u32).collect();
    order.sort_unstable_by(|&i, &j| {
        let (p, q) = (points[i as usize], points[j as usize]);
        p[0].total_cmp(&q[0])
            .then(p[1].total_cmp(&q[1]))
            .then(p[2].total_cmp(&q[2]))
            .then(i.cmp(&j))
    });
    let mut excluded = Vec::new();
    let mut is_dup = vec![false; n];
    for w in order.windows(2) {
        let (i, j) = (w[0], w[1]);
        if points[i as usize] == points[j as usize] {
            // j follows i in the sort; the first of a run is the kept one.
            let of = if is_dup[i as usize] {
                match excluded.last() {
                    Some(&(_, Excluded::Duplicate { of })) => of,
                    _ => i,
                }
            } else {
                i
            };
            is_dup[j as usize] = true;
            excluded.push((j, Excluded::Duplicate { of }));
        }
    }
    let distinct: Vec<u32> = (0..n as u32).filter(|&i| !is_dup[i as usize]).collect();
    let tet = initial_tetrahedron(points, &distinct)?;

    let mut b = Builder {
        pts: points,
        faces: Vec::with_capacity(2 * n + 16),
        nbr: Vec::with_capacity(2 * n + 16),
        alive: Vec::with_capacity(2 * n + 16),
        start_of: vec![NONE; n],
        mark: Vec::with_capacity(2 * n + 16),
        visible: Vec::new(),
        horizon: Vec::new(),
        centre: [0.0; 3],
        centre_is_origin: true,
    };
    // Orient the tetrahedron so that every face is counter-clockwise from outside.
    let [t0, t1, t2, t3] = tet;
    let (t1, t2) = if orient(
        points[t0 as usize],
        points[t1 as usize],
        points[t2 as usize],
        points[t3 as usize],
    ) > 0
    {
        (t2, t1)
    } else {
        (t1, t2)
    };
    // Now t3 is below face (t0, t1, t2).
    let f0 = b.add_face([t0, t1, t2]);
    let f1 = b.add_face([t0, t3, t1]);
    let f2 = b.add_face([t1, t3, t2]);
    let f3 = b.add_face([t2, t3, t0]);
    b.nbr[f0 as usize] = [f1, f2, f3];
    b.nbr[f1 as usize] = [f3, f2, f0];
    b.nbr[f2 as usize] = [f1, f3, f0];
    b.nbr[f3 as usize] = [f2, f1, f0];

    // Biased randomized insertion order (fixed seed).
    let mut rest: Vec<u32> = distinct
        .iter()
        .copied()
        .filter(|i| !tet.contains(i))
        .collect();
    let mut rng = SplitMix(0x686f_726f_7370_6865);
    for i in (1..rest.len()).rev() {
        let j = rng.below(i + 1);
        rest.swap(i, j);
    }
    let mut end = rest.len();
    let mut rounds = Vec::new();
    while end > 0 {
        let start = if end > 64 { end / 2 } else { 0 };
        rounds.push((start, end));
        end = start;
    }
    for &(a, b) in &rounds {
        if let Some(r) = rest.get_mut(a..b) {
            r.sort_by_cached_key(|&i| morton(points[i as usize]));
        }
    }
    let limit = 1000 + 20 * (n as f64).sqrt() as usize;
    let mut stamp = 0u32;
    // Projection centre: the origin when the tetrahedron holds it (then the
    // hull triangulation is Delaunay on the sphere and walks are short),
    // else the tetrahedron's centroid; if rounding puts even that outside,
    // visible triangles are found by scans.
    let use_walk = if b.holds([0.0; 3]) {
        true
    } else {
        let c = tet.map(|i| points[i as usize]);
        b.centre = [0, 1, 2].map(|k| (c[0][k] + c[1][k] + c[2][k] + c[3][k]) / 4.0);
        b.centre_is_origin = false;
        b.holds(b.centre)
    };
    let mut last = f0;
    for &q in &rest {
        let found = if use_walk {
            let t = points[q as usize];
            let f = match b.walk(t, last, limit) {
                Some(f) => Some(f),
                None => {
                    // Not seen on hulls of sphere points; kept as a safeguard.
                    (0..b.faces.len() as u32)
                        .filter(|&f| b.alive[f as usize])
                        .find(|&f| (0..3).all(|k| !b.edge_outside(f, k, t)))
                }
            };
            f.filter(|&f| b.sees(f, q))
        } else {
            b.scan_visible(q)
        };
        let Some(f) = found else {
            excluded.push((q, Excluded::Interior));
            continue;
        };
        stamp += 1;
        last = b.insert(q, f, stamp)?;
    }

    // Compact the live triangles.
    let mut new_id = vec![NONE; b.faces.len()];
    let mut faces = Vec::with_capacity(2 * n);
    for (f, v) in b.faces.iter().enumerate() {
        if b.alive[f] {
            new_id[f] = faces.len() as u32;
            faces.push(*v);
        }
    }
    let mut neighbours = Vec::with_capacity(faces.len());
    for (f, nb) in b.nbr.iter().enumerate() {
        if b.alive[f] {
            let mut m = [NONE; 3];
            for k in 0..3 {
                m[k] = new_id.get(nb[k] as usize).copied().unwrap_or(NONE);
            }
            if m.contains(&NONE) {
                return Err(Error::Algorithm {
                    stage: "convex hull",
                    message: format!("triangle {f} has a removed neighbour"),
                });
            }
            neighbours.push(m);
        }
    }
    // Points inserted early can end up inside the hull of later ones when
    // they are not in convex position (rounding): they lose every triangle.
    let mut used = vec![false; n];
    for v in faces.iter().flatten() {
        used[*v as usize] = true;
    }
    for e in &excluded {
        used[e.0 as usize] = true;
    }
    for (i, u) in used.iter().enumerate() {
        if !u {
            excluded.push((i as u32, Excluded::Interior));
        }
    }
    excluded.sort_unstable_by_key(|e| e.0);
    Ok(Hull {
        faces,
        neighbours,
        excluded,
    })
}

/// Morton (Z-order) code of a point of the unit cube `[-1, 1]^3`, 21 bits
/// per axis (Morton, "A computer oriented geodetic data base and a new
/// technique in file sequencing", IBM report, 1966).
fn morton(p: Vec3) -> u64 {
    let l = crate::mesh::norm(p);
    let p = if l > 0.0 {
        [p[0] / l, p[1] / l, p[2] / l]
    } else {
        p
    };
    let spread = |x: f64| {
        let v = (((x.clamp(-1.0, 1.0) + 1.0) / 2.0) * ((1u64 << 21) - 1) as f64) as u64;
        let mut r = 0u64;
        for bit in 0..21 {
            r |= ((v >> bit) & 1) << (3 * bit);
        }
        r
    };
    spread(p[0]) | (spread(p[1]) << 1) | (spread(p[2]) << 2)
}

/// Four of the `candidates` spanning a tetrahedron (exact test), chosen by
/// extremes so that it is large.
fn initial_tetrahedron(points: &[Vec3], candidates: &[u32]) -> Result<[u32; 4]> {
    let p = |i: u32| points[i as usize];
    // First choice: four of the extreme points in 14 directions (axes and
    // diagonals) whose tetrahedron holds the origin strictly inside, so
    // that the walk-based location works from the start.
    let mut dirs: Vec<Vec3> = Vec::with_capacity(14);
    for k in 0..3 {
        for sgn in [1.0, -1.0] {
            let mut d = [0.0; 3];
            d[k] = sgn;
            dirs.push(d);
        }
    }
    for sx in [1.0, -1.0] {
        for sy in [1.0, -1.0] {
            for sz in [1.0, -1.0] {
                dirs.push([sx, sy, sz]);
            }
        }
    }
    let mut ext: Vec<u32> = dirs
        .iter()
        .filter_map(|&d| {
            candidates
                .iter()
                .copied()
                .max_by(|&i, &j| dot(d, p(i)).total_cmp(&dot(d, p(j))).then(j.cmp(&i)))
        })
        .collect();
    ext.dedup();
    let holds_origin = |t: [u32; 4]| {
        let [a, b, c, d] = t.map(p);
        let s = orient(a, b, c, d);
        s != 0
            && [(a, b, c, d), (a, b, d, c), (a, c, d, b), (b, c, d, a)]
                .iter()
                .all(|&(x, y, z, w)| {
                    let sw = orient(x, y, z, w);
                    sw != 0 && orient(x, y, z, [0.0; 3]) == sw
                })
    };
    let m = ext.len();
    for i in 0..m {
        for j in i + 1..m {
            for k in j + 1..m {
                for l in k + 1..m {
                    let t = [ext[i], ext[j], ext[k], ext[l]];
                    let mut u = t;
                    u.sort_unstable();
                    if u.windows(2).all(|w| w[0] != w[1]) && holds_origin(t) {
                        return Ok(t);
                    }
                }
            }
        }
    }
    let flat = || {
        Error::Invalid(
            "the sphere points lie on one plane (or a line); expected points spread over a sphere"
                .into(),
        )
    };
    let a = *candidates.first().ok_or_else(flat)?;
    let far = |score: &dyn Fn(Vec3) -> f64| {
        candidates
            .iter()
            .copied()
            .max_by(|&i, &j| score(p(i)).total_cmp(&score(p(j))).then(j.cmp(&i)))
    };
    let b = far(&|q| {
        let d = sub(q, p(a));
        dot(d, d)
    })
    .ok_or_else(flat)?;
    let ab = sub(p(b), p(a));
    let c = far(&|q| {
        let n = crate::mesh::cross(ab, sub(q, p(a)));
        dot(n, n)
    })
    .ok_or_else(flat)?;
    let nrm = crate::mesh::cross(ab, sub(p(c), p(a)));
    let d = far(&|q| dot(nrm, sub(q, p(a))).abs()).ok_or_else(flat)?;
    if orient(p(a), p(b), p(c), p(d)) == 0 {
        // The float scores can mislead only for (nearly) degenerate input:
        // look for any point off the plane, exactly.
        let d2 = candidates
            .iter()
            .copied()
            .find(|&q| orient(p(a), p(b), p(c), p(q)) != 0)
            .ok_or_else(flat)?;
        return Ok([a, b, c, d2]);
    }
    Ok([a, b, c, d])
}

impl Hull {
    /// Check the invariants (closed, consistent neighbours, convex with
    /// every point on or below every plane: the last check is O(n F) and
    /// meant for tests).
    pub fn check(&self, points: &[Vec3], full: bool) -> Result<()> {
        let bad = |m: String| Error::Algorithm {
            stage: "convex hull check",
            message: m,
        };
        for (f, v) in self.faces.iter().enumerate() {
            for i in 0..3 {
                let g = self.neighbours[f][i] as usize;
                let gv = self.faces.get(g).ok_or_else(|| bad(format!("face {f}")))?;
                let (a, b) = (v[i], v[(i + 1) % 3]);
                let ok = (0..3).any(|j| {
                    gv[j] == b && gv[(j + 1) % 3] == a && self.neighbours[g][j] == f as u32
                });
                if !ok {
                    return Err(bad(format!("face {f} edge {i} neighbour {g} inconsistent")));
                }
            }
        }
        if full {
            for (f, v) in self.faces.iter().enumerate() {
                let (a, b, c) = (
                    points[v[0] as usize],
                    points[v[1] as usize],
                    points[v[2] as usize],
                );
                if let Some(q) = points.iter().position(|&q| orient(a, b, c, q) > 0) {
                    return Err(bad(format!("point {q} is above hull face {f}")));
                }
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;

    fn fibonacci(n: usize, jitter: f64) -> Vec<Vec3> {
        let mut rng = SplitMix(7);
        let ga = std::f64::consts::PI * (3.0 - 5f64.sqrt());
        (0..n)
            .map(|i| {
                let z = 1.0 - (2.0 * i as f64 + 1.0) / n as f64;
                let r = (1.0 - z * z).sqrt();
                let t = ga * i as f64;
                let mut p = [r * t.cos(), r * t.sin(), z];
                for c in &mut p {
                    *c += jitter * ((rng.next() >> 11) as f64 / (1u64 << 53) as f64 - 0.5);
                }
                let l = crate::mesh::norm(p);
                [100.0 * p[0] / l, 100.0 * p[1] / l, 100.0 * p[2] / l]
            })
            .collect()
    }

    #[test]
    fn hull_of_sphere_points_is_a_closed_convex_triangulation() {
        // Euler's formula for a triangulated sphere: F = 2V - 4 (Massey 1991).
        for &n in &[4usize, 5, 50, 2000] {
            let pts = fibonacci(n, 0.01);
            let h = convex_hull(&pts).unwrap();
            assert!(h.excluded.is_empty());
            assert_eq!(h.faces.len(), 2 * n - 4, "n = {n}");
            h.check(&pts, true).unwrap();
        }
    }

    #[test]
    fn co_spherical_icosphere_points_keep_every_vertex() {
        // Icosahedral spheres are full of co-circular quadruples (symmetric
        // quadrilaterals): the exact predicates must still give F = 2V - 4
        // and a convex hull, with every vertex kept.
        for k in 0..7 {
            let m = icosphere(k, 100.0);
            let h = convex_hull(&m.positions).unwrap();
            assert!(h.excluded.is_empty(), "level {k}: {:?}", h.excluded);
            assert_eq!(h.faces.len(), 20 * 4usize.pow(k));
            h.check(&m.positions, k < 3).unwrap();
        }
        // The octahedron: six points, each quadruple of an equator exactly
        // co-planar.
        let o = vec![
            [1.0, 0.0, 0.0],
            [-1.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [0.0, -1.0, 0.0],
            [0.0, 0.0, 1.0],
            [0.0, 0.0, -1.0],
        ];
        let h = convex_hull(&o).unwrap();
        assert_eq!(h.faces.len(), 8);
        h.check(&o, true).unwrap();
    }

    #[test]
    fn duplicates_and_bad_input() {
        let mut pts = fibonacci(100, 0.0);
        pts.push(pts[10]);
        pts.push(pts[10]);
        let h = convex_hull(&pts).unwrap();
        assert_eq!(
            h.excluded,
            vec![
                (100, Excluded::Duplicate { of: 10 }),
                (101, Excluded::Duplicate { of: 10 })
            ]
        );
        assert_eq!(h.faces.len(), 2 * 100 - 4);
        // A flat set, too few points, a hemisphere that misses the centre.
        let flat: Vec<Vec3> = (0..10).map(|i| [i as f64, (i * i) as f64, 0.0]).collect();
        assert!(convex_hull(&flat).is_err());
        assert!(convex_hull(&pts[..3]).is_err());
        let cap: Vec<Vec3> = fibonacci(400, 0.0)
            .into_iter()
            .filter(|p| p[2] > 10.0)
            .collect();
        let e = convex_hull(&cap).unwrap_err().to_string();
        assert!(e.contains("centre"), "{e}");
    }

    #[test]
    fn clustered_and_rounded_points_stay_a_valid_hull() {
        // A conformal map can squeeze many vertices into a tiny cap; stored
        // as 32-bit floats, such points are no longer in convex position.
        // The hull must stay valid, drop only such points, and report them.
        let mut pts = icosphere(3, 100.0).positions;
        let mut rng = SplitMix(99);
        let mut unit = || (rng.next() >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
        for &spread in &[1e-3, 1e-6, 1e-9] {
            for _ in 0..300 {
                let p = [1.0 + 0.0 * unit(), spread * unit(), spread * unit()];
                let l = crate::mesh::norm(p);
                pts.push([100.0 * p[0] / l, 100.0 * p[1] / l, 100.0 * p[2] / l]);
            }
        }
        let rounded: Vec<Vec3> = pts.iter().map(|p| p.map(|c| f64::from(c as f32))).collect();
        for set in [&pts, &rounded] {
            let h = convex_hull(set).unwrap();
            h.check(set, true).unwrap();
            let used = set.len() - h.excluded.len();
            assert_eq!(h.faces.len(), 2 * used - 4);
            // The well-separated icosphere points are all kept.
            assert!(h.excluded.iter().all(|e| e.0 >= 642));
        }
    }

    #[test]
    fn hull_away_from_the_origin_uses_an_inner_centre() {
        // Sphere points centred at (1000, -500, 20): the origin is outside,
        // so the walks project from the first tetrahedron's centroid.
        for pts in [fibonacci(3000, 0.02), icosphere(3, 100.0).positions] {
            let shifted: Vec<Vec3> = pts
                .iter()
                .map(|p| [p[0] + 1000.0, p[1] - 500.0, p[2] + 20.0])
                .collect();
            let h = any_hull(&shifted).unwrap();
            assert!(h.excluded.is_empty());
            assert_eq!(h.faces.len(), 2 * shifted.len() - 4);
            h.check(&shifted, shifted.len() < 1000).unwrap();
            assert!(convex_hull(&shifted).is_err());
        }
    }

    #[test]
    fn deterministic() {
        let pts = fibonacci(3000, 0.02);
        assert_eq!(convex_hull(&pts).unwrap(), convex_hull(&pts).unwrap());
    }
}
