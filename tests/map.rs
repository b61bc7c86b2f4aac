//! Integration tests of the spherical conformal mapper (issue 4).
//!
//! Index:
//! - `inscribed_*`: convex polyhedra inscribed in the sphere, moved by a
//!   Moebius transformation, come back up to a Moebius transformation
//!   (Bobenko, Pinkall, Springborn, "Discrete conformal maps and ideal
//!   hyperbolic polyhedra", Geom. Topol. 19 (2015)).
//! - `revolution_*`: surfaces of revolution against the classical conformal
//!   map `ln tan(theta/2) = int ds/r + C` (do Carmo, "Differential geometry of
//!   curves and surfaces", 1976), error falling under refinement (Gu, Luo,
//!   Wu, "Convergence of discrete conformal geometry and computation of
//!   uniformization maps", Asian J. Math. 23 (2019)).
//! - `robust_*`: the robustness set of the issue.
//! - `synthetic_cortex_surfaces`: the synthetic hemispheres of crate::synth.
//! - `rejects_*`, `command_line_*`: bad input and the command.
//!
//! Every output also passes `common_checks` (the tolerances of the issue).

use horosphere::error::Error;
use horosphere::map::{map_to_sphere, MapOptions, PoleChoice, SphereMap};
use horosphere::mesh::halfedge::{next, prev, Halfedges};
use horosphere::mesh::shapes::{icosphere, torus};
use horosphere::mesh::TriMesh;
use std::collections::HashSet;
use std::f64::consts::PI;

// ---------------------------------------------------------------- helpers

struct Rng(u64);
impl Rng {
    fn f(&mut self) -> f64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let (u, v) = (self.f().max(1e-300), self.f());
        (-2.0 * u.ln()).sqrt() * (2.0 * PI * v).cos()
    }
}

type V3 = [f64; 3];
fn sub(a: V3, b: V3) -> V3 {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}
fn dot(a: V3, b: V3) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}
fn cross(a: V3, b: V3) -> V3 {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}
fn norm(a: V3) -> f64 {
    dot(a, a).sqrt()
}
fn unit(a: V3) -> V3 {
    let n = norm(a);
    [a[0] / n, a[1] / n, a[2] / n]
}

/// Complex numbers for the Moebius helpers.
#[derive(Clone, Copy, Debug)]
struct C(f64, f64);
impl C {
    fn add(self, o: C) -> C {
        C(self.0 + o.0, self.1 + o.1)
    }
    fn sub(self, o: C) -> C {
        C(self.0 - o.0, self.1 - o.1)
    }
    fn mul(self, o: C) -> C {
        C(self.0 * o.0 - self.1 * o.1, self.0 * o.1 + self.1 * o.0)
    }
    fn conj(self) -> C {
        C(self.0, -self.1)
    }
    fn abs2(self) -> f64 {
        self.0 * self.0 + self.1 * self.1
    }
    fn neg(self) -> C {
        C(-self.0, -self.1)
    }
}

/// Homogeneous coordinates `(a : b)` of the stereographic image of `p` from
/// the north pole, `z = a / b` (Needham 1997, ch. 3); the representative
/// with the larger denominator is used.
fn homog(p: V3) -> (C, C) {
    if p[2] < 0.0 {
        (C(p[0], p[1]), C(1.0 - p[2], 0.0))
    } else {
        (C(1.0 + p[2], 0.0), C(p[0], -p[1]))
    }
}

/// Back to the sphere.
fn from_homog(a: C, b: C) -> V3 {
    let ab = a.mul(b.conj());
    let (na, nb) = (a.abs2(), b.abs2());
    let s = na + nb;
    [2.0 * ab.0 / s, 2.0 * ab.1 / s, (na - nb) / s]
}

/// A Moebius transformation as a complex 2x2 matrix acting on `(a : b)`.
#[derive(Clone, Copy, Debug)]
struct Mob([C; 4]);
impl Mob {
    fn apply(&self, p: V3) -> V3 {
        let (a, b) = homog(p);
        let m = &self.0;
        from_homog(m[0].mul(a).add(m[1].mul(b)), m[2].mul(a).add(m[3].mul(b)))
    }
    fn compose(&self, o: &Mob) -> Mob {
        let (a, b) = (&self.0, &o.0);
        Mob([
            a[0].mul(b[0]).add(a[1].mul(b[2])),
            a[0].mul(b[1]).add(a[1].mul(b[3])),
            a[2].mul(b[0]).add(a[3].mul(b[2])),
            a[2].mul(b[1]).add(a[3].mul(b[3])),
        ])
    }
    /// Adjugate (inverse up to a scalar, which does not matter projectively).
    fn inverse(&self) -> Mob {
        let m = &self.0;
        Mob([m[3], m[1].neg(), m[2].neg(), m[0]])
    }
    /// The map taking `z1, z2, z3` to `0, 1, inf` (cross-ratio closed form,
    /// Needham 1997, ch. 3): `T(z) = [z, z1][z2, z3] / ([z, z3][z2, z1])`
    /// with `[z, w] = a_z b_w - b_z a_w`.
    fn to_standard(p1: V3, p2: V3, p3: V3) -> Mob {
        let (a1, b1) = homog(p1);
        let (a2, b2) = homog(p2);
        let (a3, b3) = homog(p3);
        let br = |a: C, b: C, c: C, d: C| a.mul(d).sub(b.mul(c));
        let cn = br(a2, b2, a3, b3);
        let cd = br(a2, b2, a1, b1);
        Mob([cn.mul(b1), cn.mul(a1).neg(), cd.mul(b3), cd.mul(a3).neg()])
    }
}

fn random_moebius(rng: &mut Rng, strength: f64) -> Mob {
    let mut m = [C(0.0, 0.0); 4];
    for (k, x) in m.iter_mut().enumerate() {
        let diag = if k == 0 || k == 3 { 1.0 } else { 0.0 };
        *x = C(diag + strength * rng.normal(), strength * rng.normal());
    }
    Mob(m)
}

/// Largest chordal distance after the best Moebius fit taking `from` to
/// `to`: exact fit on three well-spread points (cross-ratio closed form),
/// then Levenberg-Marquardt refinement of the 8 real matrix entries on all
/// points (least squares).
fn moebius_fit_residual(from: &[V3], to: &[V3]) -> (f64, f64) {
    // Three well-spread points of `from`.
    let n = from.len();
    let a = 0;
    let b = (0..n)
        .max_by(|&i, &j| norm(sub(from[i], from[a])).total_cmp(&norm(sub(from[j], from[a]))))
        .unwrap();
    let c = (0..n)
        .max_by(|&i, &j| {
            let di = norm(sub(from[i], from[a])).min(norm(sub(from[i], from[b])));
            let dj = norm(sub(from[j], from[a])).min(norm(sub(from[j], from[b])));
            di.total_cmp(&dj)
        })
        .unwrap();
    let t1 = Mob::to_standard(from[a], from[b], from[c]);
    let t2 = Mob::to_standard(to[a], to[b], to[c]);
    let mut m = t2.inverse().compose(&t1);
    // Normalise the matrix scale.
    let scale = m.0.iter().map(|x| x.abs2()).sum::<f64>().sqrt();
    for x in &mut m.0 {
        *x = C(x.0 / scale, x.1 / scale);
    }
    let resid = |m: &Mob| -> (f64, f64) {
        let mut mx: f64 = 0.0;
        let mut ss = 0.0;
        for i in 0..n {
            let d = norm(sub(m.apply(from[i]), to[i]));
            mx = mx.max(d);
            ss += d * d;
        }
        (mx, ss)
    };
    let three = resid(&m).0;
    // Levenberg-Marquardt on the 8 real parameters.
    let params = |m: &Mob| -> [f64; 8] {
        let mut p = [0.0; 8];
        for k in 0..4 {
            p[2 * k] = m.0[k].0;
            p[2 * k + 1] = m.0[k].1;
        }
        p
    };
    let build = |p: &[f64; 8]| Mob([C(p[0], p[1]), C(p[2], p[3]), C(p[4], p[5]), C(p[6], p[7])]);
    let mut p = params(&m);
    let mut cur = resid(&m).1;
    let mut mu = 1e-6;
    for _ in 0..30 {
        let mb = build(&p);
        let r0: Vec<f64> = (0..n).flat_map(|i| sub(mb.apply(from[i]), to[i])).collect();
        let mut jac = vec![[0.0; 8]; 3 * n];
        for k in 0..8 {
            let mut q = p;
            let h = 1e-7;
            q[k] += h;
            let mq = build(&q);
            for i in 0..n {
                let d = sub(mq.apply(from[i]), to[i]);
                for c in 0..3 {
                    jac[3 * i + c][k] = (d[c] - r0[3 * i + c]) / h;
                }
            }
        }
        let mut jtj = nalgebra::SMatrix::<f64, 8, 8>::zeros();
        let mut jtr = nalgebra::SVector::<f64, 8>::zeros();
        for (row, r) in jac.iter().zip(&r0) {
            for x in 0..8 {
                jtr[x] += row[x] * r;
                for y in 0..8 {
                    jtj[(x, y)] += row[x] * row[y];
                }
            }
        }
        let trace = jtj.trace();
        let mut improved = false;
        for _ in 0..10 {
            let mut a = jtj;
            for x in 0..8 {
                a[(x, x)] += mu * trace + 1e-300;
            }
            let Some(ch) = a.cholesky() else {
                mu *= 10.0;
                continue;
            };
            let step = ch.solve(&(-jtr));
            let mut q = p;
            for x in 0..8 {
                q[x] += step[x];
            }
            let val = resid(&build(&q)).1;
            if val < cur {
                p = q;
                cur = val;
                mu = (mu * 0.3).max(1e-15);
                improved = true;
                break;
            }
            mu *= 10.0;
        }
        if !improved {
            break;
        }
    }
    (resid(&build(&p)).0.min(three), three)
}

/// Tolerances of the issue on every output.
fn common_checks(r: &SphereMap) {
    let v = &r.report.verification;
    for p in &r.points {
        assert!((norm(*p) - 1.0).abs() <= 1e-12, "point off the sphere");
    }
    assert_eq!(r.points[r.pole as usize], [0.0, 0.0, 1.0]);
    assert!(
        v.max_interior_angle_error < 1e-9,
        "interior angle error {}",
        v.max_interior_angle_error
    );
    assert!(
        v.max_boundary_angle_excess <= 1e-9,
        "boundary excess {}",
        v.max_boundary_angle_excess
    );
    // The hull triangulation: no inverted face (outward normal), and it is
    // a closed genus-0 surface on the points.
    let he = Halfedges::from_faces(r.points.len(), &r.hull_faces)
        .expect("hull faces form a closed surface");
    assert_eq!(he.euler_characteristic(), 2);
    // Every hull face has all points on its inner side (outward normal);
    // all pairs for small meshes, the face's neighbours' far corners (local
    // convexity) otherwise.
    let small = r.points.len() <= 3000;
    for t in &r.hull_faces {
        let [a, b, c] = t.map(|i| r.points[i as usize]);
        let nrm = cross(sub(b, a), sub(c, a));
        let scale = norm(nrm);
        assert!(scale > 0.0, "degenerate hull face {t:?}");
        if small {
            for p in &r.points {
                assert!(
                    dot(nrm, sub(*p, a)) <= 1e-9 * scale,
                    "inverted or non-convex hull face {t:?}"
                );
            }
        }
    }
}

/// Convex hull of points on the unit sphere, starting from a triangulation
/// `faces` of the same points that is a valid spherical triangulation: flip
/// reflex edges until every edge is locally convex (Lawson's flip algorithm
/// on the sphere, where local convexity is the empty-circle condition).
fn hull_by_flips(points: &[V3], faces: &[[u32; 3]]) -> Vec<[u32; 3]> {
    let mut he = Halfedges::from_faces(points.len(), faces).unwrap();
    let mut edges: HashSet<(u32, u32)> = HashSet::new();
    for h in 0..he.n_halfedges() as u32 {
        let (a, b) = (he.tail[h as usize], he.head(h));
        edges.insert((a.min(b), a.max(b)));
    }
    loop {
        let mut changed = false;
        for e in 0..he.n_edges() as u32 {
            let h0 = he.edge_half[e as usize];
            let h1 = he.twin[h0 as usize];
            let (a, b) = (he.tail[h0 as usize], he.head(h0));
            let c = he.tail[prev(h0) as usize];
            let d = he.tail[prev(h1) as usize];
            let p = |v: u32| points[v as usize];
            let nrm = cross(sub(p(b), p(a)), sub(p(c), p(a)));
            if dot(nrm, sub(p(d), p(a))) > 0.0 && !edges.contains(&(c.min(d), c.max(d))) {
                he.flip(e);
                edges.remove(&(a.min(b), a.max(b)));
                edges.insert((c.min(d), c.max(d)));
                changed = true;
            }
        }
        if !changed {
            break;
        }
    }
    // The result must be convex: check every edge (the helper's own guard).
    for e in 0..he.n_edges() as u32 {
        let h0 = he.edge_half[e as usize];
        let h1 = he.twin[h0 as usize];
        let (a, b, c, d) = (
            he.tail[h0 as usize],
            he.head(h0),
            he.tail[prev(h0) as usize],
            he.tail[prev(h1) as usize],
        );
        let p = |v: u32| points[v as usize];
        let nrm = cross(sub(p(b), p(a)), sub(p(c), p(a)));
        assert!(
            dot(nrm, sub(p(d), p(a))) <= 1e-15,
            "hull_by_flips: reflex edge left"
        );
    }
    let _ = next;
    (0..he.n_faces())
        .map(|f| [he.tail[3 * f], he.tail[3 * f + 1], he.tail[3 * f + 2]])
        .collect()
}

fn jittered_inscribed(level: u32, jitter: f64, seed: u64) -> TriMesh {
    let m = icosphere(level, 1.0);
    let mut rng = Rng(seed);
    let h = 1.0 / (2f64.powi(level as i32) * 1.5);
    let pts: Vec<V3> = m
        .positions
        .iter()
        .map(|p| {
            unit([
                p[0] + jitter * h * rng.normal(),
                p[1] + jitter * h * rng.normal(),
                p[2] + jitter * h * rng.normal(),
            ])
        })
        .collect();
    let faces = hull_by_flips(&pts, &m.faces);
    TriMesh::new(pts, faces).unwrap()
}

fn run(mesh: &TriMesh) -> SphereMap {
    match map_to_sphere(mesh, &MapOptions::default()) {
        Ok(r) => {
            common_checks(&r);
            r
        }
        Err(e) => panic!("mapping failed: {e}"),
    }
}

/// Both paths (fast with its certificate, and the full method) must
/// converge to the tolerances and agree.
fn run_both(mesh: &TriMesh) -> SphereMap {
    let fast = run(mesh);
    let opts = MapOptions {
        fast_path: false,
        ..MapOptions::default()
    };
    let full = map_to_sphere(mesh, &opts).unwrap_or_else(|e| panic!("full method failed: {e}"));
    common_checks(&full);
    let worst = fast
        .points
        .iter()
        .zip(&full.points)
        .map(|(p, q)| norm(sub(*p, *q)))
        .fold(0.0, f64::max);
    assert!(worst < 1e-8, "fast and full paths differ by {worst}");
    fast
}

// ---------------------------------------------------------------- inscribed

#[test]
fn inscribed_polyhedra_come_back_up_to_moebius() {
    // Bobenko, Pinkall, Springborn (2015): a convex polyhedron inscribed in
    // the sphere and its Moebius images are discretely conformally
    // equivalent, and the inscribed realisation is unique up to Moebius.
    let mut rng = Rng(0x5eed);
    for (level, seed, strength) in [(1u32, 1u64, 0.3), (2, 2, 0.5), (2, 3, 0.8), (3, 4, 0.4)] {
        let base = jittered_inscribed(level, 0.1, seed);
        let mob = random_moebius(&mut rng, strength);
        let moved: Vec<V3> = base.positions.iter().map(|p| mob.apply(*p)).collect();
        let mesh = TriMesh::new(moved.clone(), base.faces.clone()).unwrap();
        let r = run(&mesh);
        let (fit, three) = moebius_fit_residual(&r.points, &moved);
        eprintln!("inscribed level {level}: Moebius residual {fit:.3e} (three-point {three:.3e}), iterations {}", r.report.iterations);
        assert!(fit < 1e-8, "level {level}: residual {fit:.3e}");
        // The hull is the input triangulation (unique Delaunay up to ties).
        let canon = |f: &[[u32; 3]]| -> HashSet<[u32; 3]> {
            f.iter()
                .map(|t| {
                    let k = (0..3).min_by_key(|&k| t[k]).unwrap();
                    [t[k], t[(k + 1) % 3], t[(k + 2) % 3]]
                })
                .collect()
        };
        assert_eq!(canon(&r.hull_faces), canon(&mesh.faces));
    }
}

#[test]
fn both_starting_points_reach_the_same_polyhedron() {
    // The solution is unique up to Moebius (Springborn 2020): starting on the
    // bounds (uniformization.md section 5) or from the input metric must
    // give the same points (same pole, same normalisation).
    let m = jittered_inscribed(2, 0.1, 12);
    let mut rng = Rng(4);
    let mob = random_moebius(&mut rng, 0.5);
    let moved: Vec<V3> = m.positions.iter().map(|p| mob.apply(*p)).collect();
    let mut bumpy = moved.clone();
    for p in &mut bumpy {
        let s = 1.0 + 0.2 * rng.f();
        *p = [p[0] * s, p[1] * s, p[2] * s];
    }
    let mesh = TriMesh::new(bumpy, m.faces.clone()).unwrap();
    let a = map_to_sphere(
        &mesh,
        &MapOptions {
            fast_path: false,
            ..MapOptions::default()
        },
    )
    .unwrap();
    common_checks(&a);
    let mut opts = MapOptions {
        fast_path: false,
        ..MapOptions::default()
    };
    opts.solver.start = horosphere::map::solver::Start::Bounds;
    let b = map_to_sphere(&mesh, &opts).unwrap();
    common_checks(&b);
    let worst = a
        .points
        .iter()
        .zip(&b.points)
        .map(|(p, q)| norm(sub(*p, *q)))
        .fold(0.0, f64::max);
    assert!(worst < 1e-9, "{worst}");
    assert!(b.report.iterations >= a.report.iterations);
}

#[test]
fn fast_path_agrees_with_the_full_method() {
    // uniformization.md section 10: the guessed boundary is accepted only
    // after verification; the full method (distances, bounds) must give the
    // same points, since the answer is unique up to Moebius and both use the
    // same normalisation.
    for (k, mesh) in [folded_sphere(3, 0.2, 11), jittered_inscribed(3, 0.1, 6)]
        .iter()
        .enumerate()
    {
        let fast = run(mesh);
        assert_eq!(
            fast.report.path, "fast",
            "case {k}: {:?}",
            fast.report.fast_path_rejected
        );
        let opts = MapOptions {
            fast_path: false,
            ..MapOptions::default()
        };
        let full = map_to_sphere(mesh, &opts).unwrap();
        common_checks(&full);
        assert_eq!(full.report.path, "full");
        assert!(full.report.flips_horocycles > 0);
        let worst = fast
            .points
            .iter()
            .zip(&full.points)
            .map(|(p, q)| norm(sub(*p, *q)))
            .fold(0.0, f64::max);
        assert!(worst < 1e-9, "case {k}: {worst}");
    }
}

#[test]
fn the_fit_helper_detects_a_non_moebius_change() {
    // Guard for the helper itself: a point moved off its Moebius image by
    // 1e-4 must show up as a residual of that order.
    let m = jittered_inscribed(2, 0.2, 9);
    let mut rng = Rng(77);
    let mob = random_moebius(&mut rng, 0.4);
    let mut moved: Vec<V3> = m.positions.iter().map(|p| mob.apply(*p)).collect();
    let (ok, _) = moebius_fit_residual(&m.positions, &moved);
    assert!(ok < 1e-10, "{ok}");
    moved[40] = unit([moved[40][0] + 1e-4, moved[40][1], moved[40][2]]);
    let (bad, _) = moebius_fit_residual(&m.positions, &moved);
    assert!(bad > 2e-5, "{bad}");
}

// ---------------------------------------------------------------- revolution

/// A profile curve `(r(t), z(t))`, `t in [0, pi]`, of a surface of revolution
/// about the z axis, with its speed `|(r', z')|`.
#[derive(Clone, Copy, Debug)]
enum Profile {
    /// Ellipsoid with axes 1 : 1 : 2: `r = sin t`, `z = 2 cos t`.
    Ellipsoid,
    /// Dumbbell-like star-shaped profile in polar form
    /// `R(t) = 1 + 0.5 cos 2t`: `r = R sin t`, `z = R cos t`.
    Dumbbell,
}

impl Profile {
    fn name(self) -> &'static str {
        match self {
            Profile::Ellipsoid => "ellipsoid_1_1_2",
            Profile::Dumbbell => "dumbbell_polar_1_plus_half_cos_2t",
        }
    }
    fn rz(self, t: f64) -> (f64, f64) {
        match self {
            Profile::Ellipsoid => (t.sin(), 2.0 * t.cos()),
            Profile::Dumbbell => {
                let rr = 1.0 + 0.5 * (2.0 * t).cos();
                (rr * t.sin(), rr * t.cos())
            }
        }
    }
    /// `ds / r` as a function of `t`.
    fn integrand(self, t: f64) -> f64 {
        match self {
            Profile::Ellipsoid => (t.cos().powi(2) + 4.0 * t.sin().powi(2)).sqrt() / t.sin(),
            Profile::Dumbbell => {
                let rr = 1.0 + 0.5 * (2.0 * t).cos();
                let dr = -(2.0 * t).sin();
                (rr * rr + dr * dr).sqrt() / (rr * t.sin())
            }
        }
    }
}

/// Adaptive Simpson quadrature (Lyness' error estimate with Richardson
/// correction) of `f` on `[a, b]` to absolute tolerance `tol`.
fn adaptive_simpson(f: &dyn Fn(f64) -> f64, a: f64, b: f64, tol: f64) -> f64 {
    #[allow(clippy::too_many_arguments)]
    fn rec(
        f: &dyn Fn(f64) -> f64,
        a: f64,
        b: f64,
        fa: f64,
        fm: f64,
        fb: f64,
        whole: f64,
        tol: f64,
        depth: u32,
    ) -> f64 {
        let m = 0.5 * (a + b);
        let (lm, rm) = (0.5 * (a + m), 0.5 * (m + b));
        let (flm, frm) = (f(lm), f(rm));
        let left = (m - a) / 6.0 * (fa + 4.0 * flm + fm);
        let right = (b - m) / 6.0 * (fm + 4.0 * frm + fb);
        let delta = left + right - whole;
        if depth == 0 || delta.abs() <= 15.0 * tol {
            return left + right + delta / 15.0;
        }
        rec(f, a, m, fa, flm, fm, left, 0.5 * tol, depth - 1)
            + rec(f, m, b, fm, frm, fb, right, 0.5 * tol, depth - 1)
    }
    let (fa, fb, fm) = (f(a), f(b), f(0.5 * (a + b)));
    let whole = (b - a) / 6.0 * (fa + 4.0 * fm + fb);
    rec(f, a, b, fa, fm, fb, whole, tol, 50)
}

/// `int_{pi/2}^t ds / r`: the classical conformal coordinate, so that
/// `ln tan(theta/2) = F(t)` (do Carmo 1976; symmetric profiles give C = 0).
fn conformal_coordinate(p: Profile, t: f64) -> f64 {
    adaptive_simpson(&|x| p.integrand(x), PI / 2.0, t, 1e-13)
}

/// The profile parameter `t` of colatitude `theta`: safeguarded Newton on
/// the monotone `F(t) - ln tan(theta/2)` (`F' = ds/r`), bisection fallback.
fn parameter_of_colatitude(p: Profile, theta: f64) -> f64 {
    let y = (theta / 2.0).tan().ln();
    let (mut lo, mut hi) = (1e-12, PI - 1e-12);
    let mut t = theta;
    for _ in 0..100 {
        let f = conformal_coordinate(p, t) - y;
        if f.abs() < 1e-13 {
            break;
        }
        if f < 0.0 {
            lo = t;
        } else {
            hi = t;
        }
        let step = t - f / p.integrand(t);
        t = if step > lo && step < hi {
            step
        } else {
            0.5 * (lo + hi)
        };
    }
    t
}

/// The icosphere of `level` turned so that vertex 0 is at +z, and the
/// surface of revolution whose classical conformal map is that icosphere
/// (uniformization.md section 8): returns (sphere points, surface, t per vertex).
fn revolution_mesh(p: Profile, level: u32) -> (Vec<V3>, TriMesh, Vec<f64>) {
    let ico = icosphere(level, 1.0);
    let a = ico.positions[0];
    // Orthonormal frame (e1, e2, a).
    let e1 = unit(cross(a, [0.0, 0.0, 1.0]));
    let e2 = cross(a, e1);
    let sphere: Vec<V3> = ico
        .positions
        .iter()
        .map(|q| [dot(*q, e1), dot(*q, e2), dot(*q, a)])
        .collect();
    let mut ts = Vec::with_capacity(sphere.len());
    let surf: Vec<V3> = sphere
        .iter()
        .map(|q| {
            let theta = q[2].clamp(-1.0, 1.0).acos();
            let phi = q[1].atan2(q[0]);
            let t = if theta < 1e-12 {
                0.0
            } else if theta > PI - 1e-12 {
                PI
            } else {
                parameter_of_colatitude(p, theta)
            };
            ts.push(t);
            let (r, z) = p.rz(t);
            [r * phi.cos(), r * phi.sin(), z]
        })
        .collect();
    (sphere.clone(), TriMesh::new(surf, ico.faces).unwrap(), ts)
}

#[test]
fn revolution_surfaces_converge_to_the_classical_map() {
    let mut artifacts = Vec::new();
    for p in [Profile::Ellipsoid, Profile::Dumbbell] {
        let mut errs = Vec::new();
        for level in [2u32, 3, 4] {
            let (sphere, mesh, ts) = revolution_mesh(p, level);
            let r = run(&mesh);
            // Best Moebius fit of the output to the classical image, then the
            // colatitude error.
            let (chordal, _) = moebius_fit_residual(&r.points, &sphere);
            errs.push(chordal);
            // Colatitudes: the chordal error bounds the angular one,
            // |d theta| <= asin(chord/2) * 2.
            let colat_bound = 2.0 * (chordal / 2.0).asin();
            eprintln!(
                "{} level {level} ({} vertices): chordal error after Moebius fit {chordal:.3e} (colatitude error <= {colat_bound:.3e} rad), iterations {}",
                p.name(),
                mesh.n_vertices(),
                r.report.iterations
            );
            if level == 3 {
                let samples: Vec<[f64; 2]> = ts
                    .iter()
                    .zip(&sphere)
                    .step_by(5)
                    .map(|(t, q)| [*t, q[2].clamp(-1.0, 1.0).acos()])
                    .collect();
                artifacts.push(serde_json::json!({
                    "profile": p.name(),
                    "samples_t_theta": samples,
                    "chordal_error_after_moebius_fit": chordal,
                }));
            }
        }
        // Error falls with refinement (about h^2 in the prototype: 2.6e-3 at
        // 162 vertices, 7.1e-4 at 642 for the ellipsoid).
        assert!(
            errs[1] < 0.6 * errs[0] && errs[2] < 0.6 * errs[1],
            "{}: {errs:?}",
            p.name()
        );
        assert!(errs[2] < 2e-3, "{}: {errs:?}", p.name());
    }
    // The profile integral itself against a closed form: for the unit sphere
    // (r = sin t) int_{pi/2}^t dt / sin t = ln tan(t/2).
    let exact = (0.3f64 / 2.0).tan().ln();
    let num = adaptive_simpson(&|x: f64| 1.0 / x.sin(), PI / 2.0, 0.3, 1e-13);
    assert!((num - exact).abs() < 1e-11);
    if let Ok(dir) = std::env::var("HOROSPHERE_ARTIFACTS") {
        let path = std::path::Path::new(&dir).join("map_revolution_profiles.json");
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(&path, serde_json::to_string_pretty(&artifacts).unwrap()).unwrap();
    }
}

// ---------------------------------------------------------------- robustness

/// A folded sphere: radial displacement by a sum of smooth waves, the
/// stand-in for a synthetic cortex.
fn folded_sphere(level: u32, amplitude: f64, seed: u64) -> TriMesh {
    let mut m = icosphere(level, 1.0);
    let mut rng = Rng(seed);
    let waves: Vec<(V3, f64, f64)> = (0..12)
        .map(|_| {
            (
                unit([rng.normal(), rng.normal(), rng.normal()]),
                4.0 + 8.0 * rng.f(),
                2.0 * PI * rng.f(),
            )
        })
        .collect();
    for p in &mut m.positions {
        let mut r = 1.0;
        for (d, k, ph) in &waves {
            r += amplitude / waves.len() as f64 * 3.0 * (k * dot(*p, *d) + ph).sin();
        }
        *p = [p[0] * r, p[1] * r * 1.2, p[2] * r * 0.9];
    }
    m
}

#[test]
fn robust_noisy_bumpy_sphere_with_slivers_and_needles() {
    let mut m = icosphere(3, 1.0);
    let mut rng = Rng(21);
    for p in &mut m.positions {
        let r = 1.0 + 0.3 * (rng.f() - 0.5);
        *p = [p[0] * r, p[1] * r, p[2] * r];
    }
    // Slivers: move some vertices almost onto the midpoint of one of their
    // edges (needles and caps around them).
    let faces = m.faces.clone();
    for (k, t) in faces.iter().enumerate().step_by(9) {
        let (a, b) = (t[0] as usize, t[1] as usize);
        if k % 2 == 0 {
            let (pa, pb) = (m.positions[a], m.positions[b]);
            m.positions[a] = [
                pb[0] + 1e-3 * (pa[0] - pb[0]),
                pb[1] + 1e-3 * (pa[1] - pb[1]),
                pb[2] + 1e-3 * (pa[2] - pb[2]),
            ];
        }
    }
    let r = run_both(&m);
    assert!(r.report.flips_delaunay > 0);
}

#[test]
fn robust_edge_length_ratio_1000() {
    // A Moebius image of an inscribed polyhedron with strong dilation: edge
    // lengths range over more than 1000:1; still inscribed and convex, so
    // the output must again match up to Moebius.
    let base = jittered_inscribed(3, 0.1, 31);
    let k = 80.0f64.sqrt();
    let mob = Mob([C(k, 0.0), C(0.0, 0.0), C(0.0, 0.0), C(1.0 / k, 0.0)]);
    let moved: Vec<V3> = base.positions.iter().map(|p| mob.apply(*p)).collect();
    let mesh = TriMesh::new(moved.clone(), base.faces.clone()).unwrap();
    let lens: Vec<f64> = mesh
        .faces
        .iter()
        .flat_map(|t| (0..3).map(move |k| (t[k], t[(k + 1) % 3])))
        .map(|(a, b)| norm(sub(moved[a as usize], moved[b as usize])))
        .collect();
    let ratio = lens.iter().cloned().fold(0.0, f64::max)
        / lens.iter().cloned().fold(f64::INFINITY, f64::min);
    assert!(ratio > 1000.0, "ratio {ratio}");
    let r = run_both(&mesh);
    let (fit, _) = moebius_fit_residual(&r.points, &moved);
    assert!(fit < 1e-8, "{fit}");
    // Also with bumps (no longer inscribed): converges.
    let mut rng = Rng(5);
    let bumpy: Vec<V3> = moved
        .iter()
        .map(|p| {
            let s = 1.0 + 0.05 * rng.f();
            [p[0] * s, p[1] * s, p[2] * s]
        })
        .collect();
    run_both(&TriMesh::new(bumpy, base.faces.clone()).unwrap());
}

#[test]
fn robust_ellipsoid_10_to_1() {
    let mut m = icosphere(3, 1.0);
    for p in &mut m.positions {
        p[2] *= 10.0;
    }
    run_both(&m);
}

#[test]
fn robust_strongly_non_delaunay_triangulation() {
    // Random combinatorial flips of a bumpy sphere's triangulation (keeping
    // an indexed manifold mesh): long thin triangles everywhere.
    let m = folded_sphere(3, 0.1, 3);
    let mut he = Halfedges::from_faces(m.n_vertices(), &m.faces).unwrap();
    let mut edges: HashSet<(u32, u32)> = HashSet::new();
    for h in 0..he.n_halfedges() as u32 {
        let (a, b) = (he.tail[h as usize], he.head(h));
        edges.insert((a.min(b), a.max(b)));
    }
    let mut rng = Rng(99);
    let mut flips = 0;
    for _ in 0..4 * he.n_edges() {
        let e = (rng.f() * he.n_edges() as f64) as u32;
        let h0 = he.edge_half[e as usize];
        let h1 = he.twin[h0 as usize];
        let (a, b) = (he.tail[h0 as usize], he.head(h0));
        let (c, d) = (he.tail[prev(h0) as usize], he.tail[prev(h1) as usize]);
        if c != d
            && he.degree(a) > 3
            && he.degree(b) > 3
            && !edges.contains(&(c.min(d), c.max(d)))
            && he.flip(e)
        {
            edges.remove(&(a.min(b), a.max(b)));
            edges.insert((c.min(d), c.max(d)));
            flips += 1;
        }
    }
    assert!(flips > 1000);
    let faces: Vec<[u32; 3]> = (0..he.n_faces())
        .map(|f| [he.tail[3 * f], he.tail[3 * f + 1], he.tail[3 * f + 2]])
        .collect();
    let mesh = TriMesh::new(m.positions.clone(), faces).unwrap();
    let r = run_both(&mesh);
    assert!(r.report.flips_delaunay > 500, "{}", r.report.flips_delaunay);
}

#[test]
fn robust_folded_surfaces_and_every_pole_rule() {
    for (level, amp, seed) in [(3u32, 0.15, 1u64), (4, 0.2, 2), (4, 0.3, 3)] {
        let m = folded_sphere(level, amp, seed);
        let r = run_both(&m);
        eprintln!(
            "folded level {level} amp {amp}: {} path, {} iterations, boundary {}, inverted {}, angle distortion p50 {:.3}",
            r.report.path,
            r.report.iterations, r.report.boundary_vertices, r.report.inverted_faces, r.report.angle_distortion.p50
        );
    }
    // A forced pole and a restricted candidate list.
    let m = folded_sphere(3, 0.15, 4);
    let opts = MapOptions {
        pole: PoleChoice::Vertex(17),
        ..MapOptions::default()
    };
    let r = map_to_sphere(&m, &opts).unwrap();
    common_checks(&r);
    assert_eq!(r.pole, 17);
    let opts = MapOptions {
        pole: PoleChoice::Among(vec![100, 200, 300]),
        ..MapOptions::default()
    };
    let r = map_to_sphere(&m, &opts).unwrap();
    common_checks(&r);
    assert!([100, 200, 300].contains(&r.pole));
}

#[test]
fn deterministic_output_whatever_the_thread_count() {
    // Team rule: byte-identical output whatever the thread count.
    let m = folded_sphere(4, 0.2, 8);
    let with = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| map_to_sphere(&m, &MapOptions::default()).unwrap())
    };
    let a = with(1);
    let b = with(3);
    assert_eq!(a.points, b.points);
    assert_eq!(a.hull_faces, b.hull_faces);
    assert_eq!(a.report.iterations, b.report.iterations);
}

// ---------------------------------------------------------------- bad input

fn expect_not_ready(m: &TriMesh, needle: &str) {
    match map_to_sphere(m, &MapOptions::default()) {
        Err(Error::NotReady(msg)) => {
            assert!(msg.contains(needle), "{msg}");
            assert!(
                msg.contains("horosphere inspect") && msg.contains("horosphere repair"),
                "{msg}"
            );
        }
        Err(e) => panic!("expected NotReady, got {e}"),
        Ok(_) => panic!("expected an error"),
    }
}

#[test]
fn rejects_bad_surfaces() {
    let base = icosphere(2, 1.0);
    // Open.
    let mut m = base.clone();
    m.faces.pop();
    expect_not_ready(&m, "not closed");
    // Two components.
    let mut m = base.clone();
    let n = m.n_vertices() as u32;
    m.positions
        .extend(base.positions.iter().map(|p| [p[0] + 5.0, p[1], p[2]]));
    m.faces
        .extend(base.faces.iter().map(|t| [t[0] + n, t[1] + n, t[2] + n]));
    expect_not_ready(&m, "2 connected components");
    // Genus 1.
    expect_not_ready(&torus(3.0, 1.0, 24, 12), "genus 1");
    // Non-manifold edge: a fin face on an existing edge.
    let mut m = base.clone();
    let t = m.faces[0];
    m.positions.push([2.0, 2.0, 2.0]);
    m.faces.push([t[0], t[1], n]);
    expect_not_ready(&m, "not a 2-manifold");
    // Zero-length edge: two vertices at one position.
    let mut m = base.clone();
    let t = m.faces[3];
    m.positions[t[1] as usize] = m.positions[t[0] as usize];
    expect_not_ready(&m, "length 0");
    // NaN coordinate.
    let mut m = base.clone();
    m.positions[5][1] = f64::NAN;
    expect_not_ready(&m, "non-finite");
    // A pole outside the mesh is invalid input, not a panic.
    let opts = MapOptions {
        pole: PoleChoice::Vertex(1_000_000),
        ..MapOptions::default()
    };
    assert!(matches!(
        map_to_sphere(&base, &opts),
        Err(Error::Invalid(_))
    ));
}

#[test]
fn a_failed_solve_keeps_its_iteration_log() {
    // The issue: a solver that does not converge stops with diagnostics (the
    // iteration log) and gives no points.
    let m = folded_sphere(3, 0.2, 5);
    let mut opts = MapOptions::default();
    opts.solver.max_iter_per_stage = 2;
    match horosphere::map::map_to_sphere_diagnosed(&m, &opts) {
        Ok(_) => panic!("two iterations cannot converge"),
        Err(f) => {
            assert!(matches!(f.error, Error::Algorithm { .. }));
            assert_eq!(f.report.status, "failed");
            assert_eq!(f.report.iteration_log.len(), 2);
            assert!(f
                .report
                .error
                .as_deref()
                .unwrap_or("")
                .contains("no convergence"));
            assert!(
                f.report.iteration_log[0].max_projected_gradient
                    > f.report.iteration_log[1].max_projected_gradient
            );
        }
    }
}

// ---------------------------------------------------------------- command line

fn temp_dir(tag: &str) -> std::path::PathBuf {
    let d = std::env::temp_dir().join(format!("horosphere-map-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn horosphere(args: &[&std::ffi::OsStr]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_horosphere"))
        .args(args)
        .output()
        .unwrap()
}

#[test]
fn command_line_maps_and_reports() {
    let dir = temp_dir("cli");
    let surf = dir.join("sub-ana_hemi-L_white.surf.gii");
    let m = folded_sphere(3, 0.2, 2);
    horosphere::io::write_mesh(&surf, &m).unwrap();
    let sphere = dir.join("sphere.surf.gii");
    let hull = dir.join("hull.ply");
    let report = dir.join("map.json");
    let out = horosphere(&[
        "map".as_ref(),
        surf.as_os_str(),
        "-o".as_ref(),
        sphere.as_os_str(),
        "--pole".as_ref(),
        "12".as_ref(),
        "--radius".as_ref(),
        "50".as_ref(),
        "--report".as_ref(),
        report.as_os_str(),
        "--hull-out".as_ref(),
        hull.as_os_str(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let s = horosphere::io::read_mesh(&sphere).unwrap();
    assert_eq!(s.faces, m.faces);
    assert_eq!(s.n_vertices(), m.n_vertices());
    for p in &s.positions {
        // GIFTI stores float32: radius 50 to float precision.
        assert!((norm(*p) - 50.0).abs() < 1e-4);
    }
    assert!((norm(sub(s.positions[12], [0.0, 0.0, 50.0]))) < 1e-4);
    let h = horosphere::io::read_mesh(&hull).unwrap();
    assert_eq!(h.n_vertices(), m.n_vertices());
    assert_eq!(h.n_faces(), m.n_faces());
    let rep: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&report).unwrap()).unwrap();
    assert_eq!(rep["status"], "ok");
    assert_eq!(rep["pole"], 12);
    assert!(
        rep["verification"]["max_interior_angle_error"]
            .as_f64()
            .unwrap()
            < 1e-9
    );
    assert!(rep["iteration_log"].as_array().unwrap().len() >= 2);
    assert_eq!(rep["inverted_faces"], 0);
}

#[test]
fn command_line_refuses_bad_input_and_writes_nothing() {
    let dir = temp_dir("bad");
    let surf = dir.join("open.obj");
    let mut m = icosphere(2, 1.0);
    m.faces.pop();
    horosphere::io::write_mesh(&surf, &m).unwrap();
    let sphere = dir.join("sphere.surf.gii");
    let out = horosphere(&[
        "map".as_ref(),
        surf.as_os_str(),
        "-o".as_ref(),
        sphere.as_os_str(),
    ]);
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("open.obj") && err.contains("not closed") && err.contains("horosphere repair"),
        "{err}"
    );
    assert!(!sphere.exists());
    // A bad --pole value.
    let ok = dir.join("ok.obj");
    horosphere::io::write_mesh(&ok, &icosphere(1, 1.0)).unwrap();
    let out = horosphere(&[
        "map".as_ref(),
        ok.as_os_str(),
        "-o".as_ref(),
        sphere.as_os_str(),
        "--pole".as_ref(),
        "north".as_ref(),
    ]);
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--pole north"));
    assert!(!sphere.exists());
}

#[test]
fn verification_rejects_a_wrong_result() {
    // The pieces of the pipeline, then the checks of uniformization.md
    // section 7 on a correct and on deliberately broken results.
    use horosphere::map::intrinsic::{FlipWork, Scaling};
    use horosphere::map::{check_input, horocycle, layout, solver, verify};
    let m = folded_sphere(3, 0.2, 13);
    let mut input = check_input(&m).unwrap();
    let zero = vec![0.0; m.n_vertices()];
    let mut work = FlipWork::default();
    input
        .flip_to_delaunay(&Scaling::plain(&zero), &mut work)
        .unwrap();
    let pole = 7;
    let horo = horocycle::horocyclic_distances(&input, pole, &mut work).unwrap();
    let mut log = Vec::new();
    let sol = solver::solve(
        &input,
        pole,
        &horo.d,
        &solver::SolverOptions::default(),
        &mut log,
    )
    .unwrap();
    let u: Vec<f64> = sol.s.iter().zip(&horo.d).map(|(s, d)| s - d).collect();
    let sc = Scaling {
        u: &u,
        pole,
        t: sol.t,
    };
    let lay = layout::layout_disk(&sol.tri, &sc).unwrap();
    let pts = layout::project(&lay.z, pole);
    let tol = verify::VerifyTolerances::default();
    let ok = verify::verify(
        &sol.tri,
        &sc,
        &sol.eval.angle,
        &sol.eval.sums,
        &lay.z,
        &pts,
        &tol,
    )
    .unwrap();
    assert!(ok.max_cross_ratio_error < 1e-9);
    // A point moved in the plane by 1e-6: cross-ratios no longer match.
    let mut z = lay.z.clone();
    let v = (0..z.len())
        .find(|&v| {
            v as u32 != pole
                && !sol
                    .tri
                    .he
                    .outgoing(pole)
                    .any(|h| sol.tri.he.head(h) == v as u32)
        })
        .unwrap();
    z[v][0] += 1e-6;
    let pts2 = layout::project(&z, pole);
    let err = verify::verify(
        &sol.tri,
        &sc,
        &sol.eval.angle,
        &sol.eval.sums,
        &z,
        &pts2,
        &tol,
    )
    .unwrap_err();
    assert!(err.to_string().contains("cross-ratio"), "{err}");
    // A point off the sphere.
    let mut pts3 = pts.clone();
    pts3[v] = [pts3[v][0] * (1.0 + 1e-9), pts3[v][1], pts3[v][2]];
    let err = verify::verify(
        &sol.tri,
        &sc,
        &sol.eval.angle,
        &sol.eval.sums,
        &lay.z,
        &pts3,
        &tol,
    )
    .unwrap_err();
    assert!(err.to_string().contains("off the sphere"), "{err}");
    // Angle sums of a non-converged state: the interior check fails.
    let mut sums = sol.eval.sums.clone();
    sums[v] += 1e-6;
    let err =
        verify::verify(&sol.tri, &sc, &sol.eval.angle, &sums, &lay.z, &pts, &tol).unwrap_err();
    assert!(err.to_string().contains("interior angle sums"), "{err}");
}

#[test]
fn smallest_closed_surfaces() {
    // Tetrahedron and octahedron (inscribed, so they come back up to
    // Moebius): the disk has no interior vertex or one.
    let s3 = 1.0 / 3f64.sqrt();
    let tet = TriMesh::new(
        vec![[s3, s3, s3], [s3, -s3, -s3], [-s3, s3, -s3], [-s3, -s3, s3]],
        vec![[0, 1, 2], [0, 3, 1], [0, 2, 3], [1, 3, 2]],
    )
    .unwrap();
    let oct = TriMesh::new(
        vec![
            [1.0, 0.0, 0.0],
            [-1.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [0.0, -1.0, 0.0],
            [0.0, 0.0, 1.0],
            [0.0, 0.0, -1.0],
        ],
        vec![
            [0, 2, 4],
            [2, 1, 4],
            [1, 3, 4],
            [3, 0, 4],
            [2, 0, 5],
            [1, 2, 5],
            [3, 1, 5],
            [0, 3, 5],
        ],
    )
    .unwrap();
    for m in [tet, oct] {
        assert!(m.signed_volume() > 0.0);
        let r = run(&m);
        let (fit, _) = moebius_fit_residual(&r.points, &m.positions);
        assert!(fit < 1e-8, "{fit}");
    }
}

#[test]
fn synthetic_cortex_surfaces() {
    // The synthetic hemispheres of crate::synth (folded, cortex-like, in mm):
    // both hemispheres, two subjects; every output passes the checks and
    // folds under 1% of the input faces (none at this resolution so far).
    use horosphere::synth::surface::{folded_surface, Hemi, SurfaceParams};
    for (seed, hemi) in [(1u64, Hemi::Left), (2, Hemi::Right)] {
        let params = SurfaceParams {
            vertices: 2562,
            hemi,
            ..SurfaceParams::default()
        };
        let s = folded_surface(&params, seed).unwrap();
        let r = run(&s.mesh);
        eprintln!(
            "synthetic cortex seed {seed}: {} path, {} iterations, angle distortion p50/p95 {:.3}/{:.3}, inverted {}",
            r.report.path, r.report.iterations, r.report.angle_distortion.p50, r.report.angle_distortion.p95, r.report.inverted_faces
        );
        assert!(r.report.inverted_faces < s.mesh.n_faces() / 100);
    }
}
