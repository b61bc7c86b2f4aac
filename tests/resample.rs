//! The resampling stage: target spheres, resampling, masks, smoothing, the
//! cohort matrix and the commands.
//!
//! Index of this file:
//! - targets: icosahedral vertex counts (Kenner 1976), points on the
//!   sphere, no inverted faces;
//! - spherical harmonics: real Y_lm (our own, checked against closed forms
//!   here and against scipy.special.sph_harm_y in
//!   tests/reference/test_sph_harm_scipy.py) resampled from jittered,
//!   rotated subject spheres: error within the linear-interpolation bound
//!   and falling with the square of the mesh spacing;
//! - identical spheres: exact values; labels keep their set and table;
//!   majority equals nearest;
//! - masks: never blended, NaN counted;
//! - smoothing: the FWHM of a smoothed impulse on a fine flat patch, the
//!   area-weighted mean, masks;
//! - bad input; the `sphere`, `resample` and `matrix` commands.

use horosphere::io::gifti::{self, Label, LabelTable, MetaData};
use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::{cross, dot, norm, sub, Vec3};
use horosphere::resample::locate::Locator;
use horosphere::resample::smooth::{lumped_mass, smooth_maps, SmoothOptions, FWHM_PER_SIGMA};
use horosphere::resample::target::Target;
use horosphere::resample::{
    resample_located, resample_maps, InputMap, MapValues, Method, ResampleOptions,
};
use horosphere::synth::rng::{mat_vec, quaternion_matrix, SplitMix64 as SeededRng};
use horosphere::TriMesh;
use std::f64::consts::PI;
use std::path::{Path, PathBuf};

// ---------------------------------------------------------------- helpers

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!(
        "horosphere-resample-test-{}-{name}",
        std::process::id()
    ));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Rotation matrix of a random unit quaternion (Shoemake, "Uniform random
/// rotations", Graphics Gems III, 1992): a normalised Gaussian 4-vector.
fn random_rotation(rng: &mut SeededRng) -> [[f64; 3]; 3] {
    let q: Vec<f64> = (0..4).map(|_| rng.normal()).collect();
    let l = q.iter().map(|x| x * x).sum::<f64>().sqrt();
    quaternion_matrix([q[1] / l, q[2] / l, q[3] / l, q[0] / l])
}

/// Icosahedral sphere of `level`, each vertex moved in a random tangent
/// direction by up to `jitter` times the level's edge length, re-projected
/// to radius `radius`, then rotated at random.
fn jittered_sphere(level: u32, radius: f64, jitter: f64, seed: u64) -> TriMesh {
    let mut m = icosphere(level, 1.0);
    let mut rng = SeededRng::new(seed);
    let edge = 1.1 / 2f64.powi(level as i32);
    let rot = random_rotation(&mut rng);
    for p in &mut m.positions {
        let d = [rng.normal(), rng.normal(), rng.normal()];
        let t = sub(d, [p[0] * dot(d, *p), p[1] * dot(d, *p), p[2] * dot(d, *p)]);
        let tl = norm(t).max(1e-12);
        let s = jitter * edge * rng.uniform();
        let q = [
            p[0] + s * t[0] / tl,
            p[1] + s * t[1] / tl,
            p[2] + s * t[2] / tl,
        ];
        let q = mat_vec(&rot, q);
        let l = norm(q);
        *p = [radius * q[0] / l, radius * q[1] / l, radius * q[2] / l];
    }
    m
}

/// Associated Legendre function P_l^m(x), m >= 0, without the
/// Condon-Shortley phase, by the standard three-term recurrence in l
/// (Abramowitz and Stegun, "Handbook of mathematical functions", 1964,
/// 8.5.3 and 8.6.18).
fn legendre(l: u32, m: u32, x: f64) -> f64 {
    let s = (1.0 - x * x).max(0.0).sqrt();
    let mut pmm = 1.0;
    for k in 1..=m {
        pmm *= (2 * k - 1) as f64 * s;
    }
    if l == m {
        return pmm;
    }
    let mut p1 = x * (2 * m + 1) as f64 * pmm;
    if l == m + 1 {
        return p1;
    }
    let mut p0 = pmm;
    for ll in (m + 2)..=l {
        let p2 = ((2 * ll - 1) as f64 * x * p1 - (ll + m - 1) as f64 * p0) / (ll - m) as f64;
        p0 = p1;
        p1 = p2;
    }
    p1
}

/// Real orthonormal spherical harmonic Y_lm at the direction of `p`:
/// sqrt(2) N P_l^m cos(m phi) for m > 0, sqrt(2) N P_l^|m| sin(|m| phi) for
/// m < 0, N P_l for m = 0, N = sqrt((2l+1)/(4 pi) (l-m)!/(l+m)!).
fn real_ylm(l: u32, m: i32, p: Vec3) -> f64 {
    let r = norm(p);
    let cos_t = (p[2] / r).clamp(-1.0, 1.0);
    let phi = p[1].atan2(p[0]);
    let am = m.unsigned_abs();
    let mut ratio = 1.0;
    for k in (l - am + 1)..=(l + am) {
        ratio /= k as f64;
    }
    let n = ((2 * l + 1) as f64 / (4.0 * PI) * ratio).sqrt();
    let p = legendre(l, am, cos_t);
    match m.cmp(&0) {
        std::cmp::Ordering::Equal => n * p,
        std::cmp::Ordering::Greater => 2f64.sqrt() * n * p * (am as f64 * phi).cos(),
        std::cmp::Ordering::Less => 2f64.sqrt() * n * p * (am as f64 * phi).sin(),
    }
}

/// Circumradius of the flat triangle `a b c`.
fn circumradius(a: Vec3, b: Vec3, c: Vec3) -> f64 {
    let (ab, bc, ca) = (norm(sub(b, a)), norm(sub(c, b)), norm(sub(a, c)));
    let area2 = norm(cross(sub(b, a), sub(c, a)));
    ab * bc * ca / (2.0 * area2)
}

/// Largest first and second derivatives of Y_lm along great circles,
/// sampled by central differences at the vertices of a level-5 sphere in
/// four tangent directions each.
fn derivative_bounds(l: u32, m: i32) -> (f64, f64) {
    let pts = icosphere(5, 1.0).positions;
    let h = 1e-4;
    let (mut m1, mut m2) = (0.0f64, 0.0f64);
    for u in &pts {
        let e = if u[0].abs() < 0.9 {
            [1.0, 0.0, 0.0]
        } else {
            [0.0, 1.0, 0.0]
        };
        let d1 = cross(*u, e);
        let d1 = [d1[0] / norm(d1), d1[1] / norm(d1), d1[2] / norm(d1)];
        let d2 = cross(*u, d1);
        let r = std::f64::consts::FRAC_1_SQRT_2;
        for (a, b) in [(1.0, 0.0), (0.0, 1.0), (r, r), (r, -r)] {
            let d = [
                a * d1[0] + b * d2[0],
                a * d1[1] + b * d2[1],
                a * d1[2] + b * d2[2],
            ];
            let at = |s: f64| {
                real_ylm(
                    l,
                    m,
                    [
                        s.cos() * u[0] + s.sin() * d[0],
                        s.cos() * u[1] + s.sin() * d[1],
                        s.cos() * u[2] + s.sin() * d[2],
                    ],
                )
            };
            let (fp, f0, fm) = (at(h), at(0.0), at(-h));
            m1 = m1.max(((fp - fm) / (2.0 * h)).abs());
            m2 = m2.max(((fp + fm - 2.0 * f0) / (h * h)).abs());
        }
    }
    (m1, m2)
}

/// A reference row: target point, exact value, resampled value, bound.
type Row = (Vec3, f64, f64, f64);

const HARMONICS: [(u32, i32); 6] = [(1, 0), (1, 1), (2, -1), (3, 2), (4, -3), (4, 4)];

/// Max error, max of error / bound, over the target vertices, for one
/// subject sphere; and rows for the reference file.
fn harmonic_errors(subject: &TriMesh, target: &TriMesh, l: u32, m: i32) -> (f64, f64, Vec<Row>) {
    let locator = Locator::new(&subject.positions, None, 1e-9).unwrap();
    let location = locator.locate(&target.positions).unwrap();
    assert_eq!(location.n_fallback, 0);
    let values: Vec<f64> = subject
        .positions
        .iter()
        .map(|&p| real_ylm(l, m, p))
        .collect();
    let maps = [InputMap {
        name: format!("Y{l}{m}"),
        values: MapValues::Continuous(values),
    }];
    let (out, _) = resample_located(&locator, &location, &maps, None, None).unwrap();
    let MapValues::Continuous(v) = &out[0].values else {
        panic!("continuous output expected")
    };
    let (m1, m2) = derivative_bounds(l, m);
    let unit = |i: u32| {
        let p = subject.positions[i as usize];
        let r = norm(p);
        [p[0] / r, p[1] / r, p[2] / r]
    };
    let (mut worst, mut worst_ratio) = (0.0f64, 0.0f64);
    let mut rows = Vec::new();
    for (k, (p, loc)) in target.positions.iter().zip(&location.points).enumerate() {
        let exact = real_ylm(l, m, *p);
        let err = (v[k] - exact).abs();
        let [a, b, c] = loc.vertices.map(unit);
        let r = circumradius(a, b, c);
        let hmax = norm(sub(b, a)).max(norm(sub(c, b))).max(norm(sub(a, c)));
        // Waldron (1998) (memory): |f - I f| <= R^2 / 2 max|D^2 f| on a
        // triangle of circumradius R. Here f is Y_lm seen through the
        // central projection on the flat triangle, whose second derivative
        // along a line is the great-circle one plus at most 2 h |f'| (the
        // projection's own curvature); sampled maxima get 20% headroom.
        let bound = 1.2 * 0.5 * r * r * (m2 + 2.0 * hmax * m1);
        worst = worst.max(err);
        worst_ratio = worst_ratio.max(err / bound);
        if k % 5 == 0 {
            rows.push((*p, exact, v[k], bound));
        }
    }
    (worst, worst_ratio, rows)
}

// ---------------------------------------------------------------- targets

#[test]
fn icosahedral_targets_count_lie_on_the_sphere_and_face_outwards() {
    // V = 10*4^k + 2, E = 30*4^k, F = 20*4^k (Kenner, "Geodesic math and
    // how to use it", 1976; Euler's formula). Levels 0..=7 are checked in
    // full here (level 7 is 163,842 vertices); level 8 (655,362) by its
    // counts in the next test.
    for k in 0..=7u32 {
        let m = Target::Icosphere(k).mesh(1e-9).unwrap();
        assert_eq!(m.n_vertices(), 10 * 4usize.pow(k) + 2, "level {k}");
        assert_eq!(m.n_faces(), 20 * 4usize.pow(k), "level {k}");
        assert!(m.positions.iter().all(|p| (norm(*p) - 100.0).abs() < 1e-9));
        // No inverted face: every normal points away from the centre.
        for f in 0..m.n_faces() {
            let [a, b, c] = m.corners(f);
            let n = cross(sub(b, a), sub(c, a));
            assert!(dot(n, a) > 0.0, "level {k} face {f} inverted");
        }
        // Closed: V - E + F = 2 with E = 3F/2.
        assert_eq!(
            m.n_vertices() as i64 - (3 * m.n_faces() / 2) as i64 + m.n_faces() as i64,
            2
        );
    }
}

#[test]
fn level_eight_count() {
    // Building level 8 takes about 1.2 s in the test profile: counts only.
    let m = Target::Icosphere(8).mesh(1e-9).unwrap();
    assert_eq!(m.n_vertices(), 655_362);
    assert_eq!(m.n_faces(), 1_310_720);
}

// ---------------------------------------------------------------- harmonics

#[test]
fn own_spherical_harmonics_match_closed_forms() {
    // Y_1^0 = sqrt(3/(4 pi)) cos(theta); real Y_2^2 = sqrt(15/(16 pi))
    // sin^2(theta) cos(2 phi); real Y_1^-1 = sqrt(3/(4 pi)) sin(theta)
    // sin(phi) (standard tables, e.g. Jackson, "Classical
    // electrodynamics", 3rd ed. 1999, section 3.6, made real).
    let mut rng = SeededRng::new(3);
    for _ in 0..100 {
        let p = [rng.normal(), rng.normal(), rng.normal()];
        let r = norm(p);
        let (ct, st) = (p[2] / r, (p[0] * p[0] + p[1] * p[1]).sqrt() / r);
        let phi = p[1].atan2(p[0]);
        let c = (3.0 / (4.0 * PI)).sqrt();
        assert!((real_ylm(1, 0, p) - c * ct).abs() < 1e-14);
        assert!((real_ylm(1, -1, p) - c * st * phi.sin()).abs() < 1e-14);
        let y22 = (15.0 / (16.0 * PI)).sqrt() * st * st * (2.0 * phi).cos();
        assert!((real_ylm(2, 2, p) - y22).abs() < 1e-14);
    }
}

#[test]
fn harmonics_resample_within_the_interpolation_bound_and_scale_with_h_squared() {
    let target = icosphere(5, 100.0);
    let fine = jittered_sphere(5, 100.0, 0.3, 11);
    let coarse = jittered_sphere(4, 100.0, 0.3, 12);
    let mut rows_out = Vec::new();
    for (l, m) in HARMONICS {
        let (e_fine, r_fine, rows) = harmonic_errors(&fine, &target, l, m);
        let (e_coarse, r_coarse, _) = harmonic_errors(&coarse, &target, l, m);
        assert!(
            r_fine <= 1.0,
            "Y{l},{m}: error {e_fine} over the bound (ratio {r_fine})"
        );
        assert!(
            r_coarse <= 1.0,
            "Y{l},{m}: error {e_coarse} over the bound (ratio {r_coarse})"
        );
        // Halving the spacing divides the error by about 4 (h^2); an O(h)
        // method would give about 2.
        let ratio = e_coarse / e_fine;
        eprintln!(
            "Y{l},{m}: max error level 5 {e_fine:.3e} (error/bound {r_fine:.3}), level 4 {e_coarse:.3e} ({r_coarse:.3}), ratio {ratio:.2}"
        );
        assert!((2.8..6.0).contains(&ratio), "Y{l},{m}: error ratio {ratio}");
        rows_out.extend(rows.into_iter().map(|r| (l, m, r)));
    }
    // Rows for the scipy cross-check (tests/reference/test_sph_harm_scipy.py).
    if let Ok(dir) = std::env::var("HOROSPHERE_ARTIFACTS") {
        let mut s = String::from("l,m,x,y,z,own_y,resampled,bound\n");
        for (l, m, (p, y, v, b)) in rows_out {
            s.push_str(&format!(
                "{l},{m},{:.17e},{:.17e},{:.17e},{:.17e},{:.17e},{:.17e}\n",
                p[0], p[1], p[2], y, v, b
            ));
        }
        let dir = PathBuf::from(dir);
        std::fs::create_dir_all(&dir).unwrap();
        horosphere::io::atomic::write_bytes(&dir.join("resample_sph_harm.csv"), s.as_bytes())
            .unwrap();
    }
}

// ---------------------------------------------------------------- identical spheres, labels

fn octant_labels(m: &TriMesh) -> (Vec<i32>, LabelTable) {
    let keys: Vec<i32> = m
        .positions
        .iter()
        .map(|p| 1 + i32::from(p[0] > 0.0) + 2 * i32::from(p[1] > 0.0) + 4 * i32::from(p[2] > 0.0))
        .collect();
    let table = LabelTable {
        labels: (1..=8)
            .map(|k| Label {
                key: k,
                name: format!("octant {k}"),
                rgba: Some([k as f64 / 8.0, 0.5, 0.25, 1.0]),
            })
            .collect(),
    };
    (keys, table)
}

#[test]
fn identical_spheres_give_the_input_exactly() {
    let m = jittered_sphere(4, 100.0, 0.3, 5);
    let mut rng = SeededRng::new(9);
    let x: Vec<f64> = (0..m.n_vertices()).map(|_| rng.normal()).collect();
    let (keys, table) = octant_labels(&m);
    let maps = [
        InputMap {
            name: "x".into(),
            values: MapValues::Continuous(x.clone()),
        },
        InputMap {
            name: "labels".into(),
            values: MapValues::Labels {
                keys: keys.clone(),
                table: table.clone(),
            },
        },
    ];
    for method in [None, Some(Method::Nearest)] {
        let opts = ResampleOptions {
            method,
            ..Default::default()
        };
        let sub_maps: &[InputMap] = if method.is_none() { &maps } else { &maps[1..] };
        let (out, rep) =
            resample_maps(&m.positions, None, &m.positions, sub_maps, None, &opts).unwrap();
        assert_eq!(rep.n_duplicate_vertices + rep.n_interior_vertices, 0);
        // Both majority (the default for labels) and nearest give the input
        // labels, so they are equal to each other.
        for (o, i) in out.iter().zip(sub_maps) {
            assert_eq!(o.values, i.values, "{method:?} {}", i.name);
            assert!(o.mask.iter().all(|&b| !b));
        }
    }
    // With the mapper's faces (here the icosphere's own) instead of the hull.
    let (out, _) = resample_maps(
        &m.positions,
        Some(&m.faces),
        &m.positions,
        &maps[..1],
        None,
        &ResampleOptions::default(),
    )
    .unwrap();
    assert_eq!(out[0].values, maps[0].values);
}

#[test]
fn labels_keep_their_set_and_table_and_majority_is_close_to_nearest() {
    let subject = jittered_sphere(5, 100.0, 0.3, 21);
    let target = icosphere(4, 100.0);
    let (keys, table) = octant_labels(&subject);
    let map = |_| InputMap {
        name: "octants".into(),
        values: MapValues::Labels {
            keys: keys.clone(),
            table: table.clone(),
        },
    };
    let maps = [map(0)];
    let get = |method| {
        let opts = ResampleOptions {
            method: Some(method),
            ..Default::default()
        };
        let (out, _) = resample_maps(
            &subject.positions,
            None,
            &target.positions,
            &maps,
            None,
            &opts,
        )
        .unwrap();
        match out.into_iter().next().map(|o| o.values) {
            Some(MapValues::Labels { keys, table }) => (keys, table),
            other => panic!("labels expected, got {other:?}"),
        }
    };
    let (maj, maj_table) = get(Method::Majority);
    let (near, near_table) = get(Method::Nearest);
    assert_eq!(maj_table, table);
    assert_eq!(near_table, table);
    let set = |k: &[i32]| {
        let mut s = k.to_vec();
        s.sort_unstable();
        s.dedup();
        s
    };
    assert_eq!(set(&maj), (1..=8).collect::<Vec<_>>());
    assert_eq!(set(&near), (1..=8).collect::<Vec<_>>());
    // Away from the octant borders both give the target's own octant.
    let (truth, _) = octant_labels(&target);
    for (k, p) in target.positions.iter().enumerate() {
        if p.iter().all(|c| c.abs() > 5.0) {
            assert_eq!(maj[k], truth[k]);
            assert_eq!(near[k], truth[k]);
        }
    }
    // They may differ only at a border.
    let differ = maj.iter().zip(&near).filter(|(a, b)| a != b).count();
    assert!(differ < target.n_vertices() / 20, "{differ}");
    // Linear on labels is refused.
    let opts = ResampleOptions {
        method: Some(Method::Linear),
        ..Default::default()
    };
    let e = resample_maps(
        &subject.positions,
        None,
        &target.positions,
        &maps,
        None,
        &opts,
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("labels") && e.contains("majority"), "{e}");
}

// ---------------------------------------------------------------- masks

#[test]
fn masked_vertices_never_blend_and_nan_is_masked_and_counted() {
    let subject = jittered_sphere(4, 100.0, 0.3, 31);
    let target = icosphere(5, 100.0);
    let n = subject.n_vertices();
    // A smooth map in [-1, 1]; masked vertices (a polar cap, z > 60) hold
    // 1e6, which must never show up; a few NaN elsewhere.
    let mask: Vec<bool> = subject.positions.iter().map(|p| p[2] > 60.0).collect();
    let mut x: Vec<f64> = subject.positions.iter().map(|p| p[0] / 100.0).collect();
    for v in 0..n {
        if mask[v] {
            x[v] = 1e6;
        }
    }
    let nan_at: Vec<usize> = (0..n).filter(|v| v % 97 == 3 && !mask[*v]).collect();
    for &v in &nan_at {
        x[v] = f64::NAN;
    }
    let (keys, table) = octant_labels(&subject);
    let maps = [
        InputMap {
            name: "x".into(),
            values: MapValues::Continuous(x),
        },
        InputMap {
            name: "octants".into(),
            values: MapValues::Labels { keys, table },
        },
    ];
    let (out, rep) = resample_maps(
        &subject.positions,
        None,
        &target.positions,
        &maps,
        Some(&mask),
        &ResampleOptions::default(),
    )
    .unwrap();
    assert_eq!(rep.n_user_masked, mask.iter().filter(|&&b| b).count());
    assert_eq!(rep.maps[0].n_nan_input, nan_at.len());
    assert_eq!(rep.maps[0].n_masked_input, rep.n_user_masked + nan_at.len());
    let MapValues::Continuous(v) = &out[0].values else {
        panic!()
    };
    for (k, p) in target.positions.iter().enumerate() {
        if out[0].mask[k] {
            assert!(v[k].is_nan());
        } else {
            assert!(
                v[k].abs() <= 1.0 + 1e-12,
                "vertex {k}: {} blended a masked value",
                v[k]
            );
            // Measured values only: close to the smooth map.
            assert!((v[k] - p[0] / 100.0).abs() < 0.1);
        }
        // Well inside the cap: missing; well outside: present.
        if p[2] > 70.0 {
            assert!(out[0].mask[k]);
        }
        if p[2] < 50.0 && !out[0].mask[k] {
            assert!(v[k].is_finite());
        }
    }
    assert!(
        out[0].mask.iter().filter(|&&b| b).count()
            >= target.positions.iter().filter(|p| p[2] > 70.0).count()
    );
    // Labels: missing key 0 (the table has no key 0), added to the table.
    let MapValues::Labels { keys, table } = &out[1].values else {
        panic!()
    };
    assert_eq!(rep.maps[1].missing_key, Some(0));
    assert_eq!(table.get(0).map(|l| l.name.as_str()), Some("missing"));
    for (k, key) in keys.iter().enumerate() {
        assert_eq!(*key == 0, out[1].mask[k]);
    }
    // NaN and the cap are the only missing sources: without them, nothing
    // is missing.
    let clean = [InputMap {
        name: "y".into(),
        values: MapValues::Continuous(vec![1.5; n]),
    }];
    let (out, _) = resample_maps(
        &subject.positions,
        None,
        &target.positions,
        &clean,
        None,
        &Default::default(),
    )
    .unwrap();
    assert!(out[0].mask.iter().all(|&b| !b));
    assert!(
        matches!(&out[0].values, MapValues::Continuous(v) if v.iter().all(|&y| (y - 1.5).abs() < 1e-12))
    );
}

// ---------------------------------------------------------------- smoothing

/// Flat square grid of `k x k` vertices with spacing `h` (mm), centred at
/// the origin in the plane z = 0, two triangles per cell.
fn grid(k: usize, h: f64) -> TriMesh {
    let c = (k - 1) as f64 / 2.0;
    let positions = (0..k * k)
        .map(|i| [((i % k) as f64 - c) * h, ((i / k) as f64 - c) * h, 0.0])
        .collect();
    let mut faces = Vec::new();
    for j in 0..k - 1 {
        for i in 0..k - 1 {
            let v = (j * k + i) as u32;
            let (a, b, cc, d) = (v, v + 1, v + 1 + k as u32, v + k as u32);
            faces.push([a, b, cc]);
            faces.push([a, cc, d]);
        }
    }
    TriMesh { positions, faces }
}

/// FWHM of a sampled profile through its peak: the distance between the
/// two half-maximum crossings, linearly interpolated.
fn profile_fwhm(xs: &[f64], ys: &[f64]) -> f64 {
    let (imax, &ymax) = ys
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))
        .unwrap();
    let half = ymax / 2.0;
    let mut right = f64::NAN;
    for i in imax..ys.len() - 1 {
        if ys[i] >= half && ys[i + 1] < half {
            right = xs[i] + (ys[i] - half) / (ys[i] - ys[i + 1]) * (xs[i + 1] - xs[i]);
            break;
        }
    }
    let mut left = f64::NAN;
    for i in (1..=imax).rev() {
        if ys[i] >= half && ys[i - 1] < half {
            left = xs[i] - (ys[i] - half) / (ys[i] - ys[i - 1]) * (xs[i] - xs[i - 1]);
            break;
        }
    }
    right - left
}

#[test]
fn smoothed_impulse_has_the_requested_fwhm_and_keeps_the_mean() {
    // Heat kernel on a plane: a Gaussian with sigma^2 = 2t (Chung et al.,
    // NeuroImage 25 (2005) 1256-1265); FWHM = 2 sqrt(2 ln 2) sigma
    // (standard). A 161 x 161 patch of spacing 0.5 mm (80 mm across, 9.4
    // sigma each side of the centre for FWHM 10 mm).
    let k = 161;
    let m = grid(k, 0.5);
    let centre = (k / 2) * k + k / 2;
    let mass = lumped_mass(&m, None);
    let mut impulse = vec![0.0; k * k];
    impulse[centre] = 1.0 / mass[centre];
    for fwhm in [6.0, 10.0] {
        let (out, _) =
            smooth_maps(&m, &[impulse.clone()], None, &SmoothOptions::new(fwhm)).unwrap();
        let u = &out[0];
        let row: Vec<usize> = (0..k).map(|i| (k / 2) * k + i).collect();
        let col: Vec<usize> = (0..k).map(|j| j * k + k / 2).collect();
        for line in [row, col] {
            let xs: Vec<f64> = line
                .iter()
                .map(|&v| m.positions[v][0] + m.positions[v][1])
                .collect();
            let ys: Vec<f64> = line.iter().map(|&v| u[v]).collect();
            let measured = profile_fwhm(&xs, &ys);
            eprintln!("FWHM requested {fwhm} mm, measured {measured:.4} mm");
            // The issue asks for 10%; with the default 100 implicit steps
            // the measured shortfall is about 1% (see smooth.rs), so 3% is
            // asserted.
            assert!(
                (measured / fwhm - 1.0).abs() < 0.03,
                "FWHM {fwhm}: measured {measured}"
            );
        }
        // Second moment: sum M u r^2 = 2 sigma^2 (two dimensions), exact
        // for implicit steps.
        let sigma = fwhm / FWHM_PER_SIGMA;
        let mom: f64 = (0..k * k)
            .map(|v| mass[v] * u[v] * dot(m.positions[v], m.positions[v]))
            .sum();
        eprintln!(
            "second moment / (2 sigma^2) = {:.6}",
            mom / (2.0 * sigma * sigma)
        );
        assert!(
            (mom / (2.0 * sigma * sigma) - 1.0).abs() < 0.02,
            "moment {mom}"
        );
        // Area-weighted mean kept (total mass 1).
        let total: f64 = (0..k * k).map(|v| mass[v] * u[v]).sum();
        assert!((total - 1.0).abs() < 1e-9, "{total}");
    }
}

#[test]
fn smoothing_masks_cut_vertices_out() {
    let k = 61;
    let m = grid(k, 1.0);
    // Masked half-plane x > 5 holds 1e6; the rest is a ramp in y.
    let mask: Vec<bool> = m.positions.iter().map(|p| p[0] > 5.0).collect();
    let x: Vec<f64> = m
        .positions
        .iter()
        .zip(&mask)
        .map(|(p, &b)| if b { 1e6 } else { p[1] })
        .collect();
    let mut with_nan = x.clone();
    with_nan[0] = f64::NAN;
    let (out, rep) = smooth_maps(
        &m,
        &[x.clone(), with_nan],
        Some(&mask),
        &SmoothOptions::new(8.0),
    )
    .unwrap();
    assert_eq!(rep.n_factorisations, 2);
    assert_eq!(rep.n_masked[1], rep.n_masked[0] + 1);
    for v in 0..k * k {
        if mask[v] {
            assert_eq!(out[0][v], 1e6);
        } else {
            assert!(out[0][v].abs() <= 30.0 + 1e-9, "vertex {v}: {}", out[0][v]);
        }
    }
    assert!(out[1][0].is_nan());
    // The unmasked part keeps its own area-weighted mean.
    let mass = lumped_mass(&m, Some(&mask));
    let s = |u: &[f64]| {
        (0..k * k)
            .filter(|&v| !mask[v])
            .map(|v| mass[v] * u[v])
            .sum::<f64>()
    };
    assert!((s(&out[0]) - s(&x)).abs() < 1e-9 * (1.0 + s(&x).abs()));
}

// ---------------------------------------------------------------- bad input

#[test]
fn bad_input_gets_clear_errors() {
    let m = icosphere(3, 100.0);
    let t = icosphere(2, 100.0);
    let map = |n: usize| InputMap {
        name: "thickness".into(),
        values: MapValues::Continuous(vec![1.0; n]),
    };
    let opts = ResampleOptions::default();
    let e = resample_maps(
        &m.positions,
        None,
        &t.positions,
        &[map(m.n_vertices() - 1)],
        None,
        &opts,
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.contains("'thickness'") && e.contains(&format!("({})", m.n_vertices())),
        "{e}"
    );
    let shifted: Vec<Vec3> = m
        .positions
        .iter()
        .map(|p| [p[0], p[1] + 2.0, p[2]])
        .collect();
    let e = resample_maps(
        &shifted,
        None,
        &t.positions,
        &[map(m.n_vertices())],
        None,
        &opts,
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.contains("subject sphere") && e.contains("not centred"),
        "{e}"
    );
    let squashed: Vec<Vec3> = m
        .positions
        .iter()
        .map(|p| [p[0], p[1], 0.8 * p[2]])
        .collect();
    let e = resample_maps(
        &m.positions,
        None,
        &squashed,
        &[map(m.n_vertices())],
        None,
        &opts,
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.contains("target sphere") && e.contains("constant radius"),
        "{e}"
    );
    let e = Target::parse("icosahedron:6").unwrap_err().to_string();
    assert!(e.contains("icosphere:K"), "{e}");
    let e = resample_maps(
        &m.positions,
        None,
        &t.positions,
        &[map(m.n_vertices())],
        Some(&[true; 3]),
        &opts,
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("mask"), "{e}");
    // Majority on a continuous map.
    let opts = ResampleOptions {
        method: Some(Method::Majority),
        ..Default::default()
    };
    assert!(resample_maps(
        &m.positions,
        None,
        &t.positions,
        &[map(m.n_vertices())],
        None,
        &opts
    )
    .is_err());
}

// ---------------------------------------------------------------- commands

fn run(args: &[&str]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_horosphere"))
        .args(args)
        .output()
        .unwrap()
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn commands_sphere_resample_and_matrix() {
    let d = scratch("cli");
    let target = d.join("target.surf.gii");
    let o = run(&["sphere", "icosphere:3", "-o", s(&target)]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(gifti::read_mesh(&target).unwrap().n_vertices(), 642);
    let o = run(&["sphere", "icosphere:12", "-o", s(&d.join("x.surf.gii"))]);
    assert!(!o.status.success());
    assert!(String::from_utf8_lossy(&o.stderr).contains("icosphere:K"));

    // Two subjects: spheres, a thickness map, labels, a mask.
    let mut outs = Vec::new();
    for (i, seed) in [(1, 41u64), (2, 42)] {
        let sub = jittered_sphere(3, 100.0, 0.3, seed);
        let sphere = d.join(format!("sub-0{i}_hemi-L_sphere.surf.gii"));
        gifti::write_mesh(&sphere, &sub).unwrap();
        let thick: Vec<f32> = sub
            .positions
            .iter()
            .map(|p| (2.5 + p[2] / 100.0) as f32)
            .collect();
        let data = d.join(format!("sub-0{i}_hemi-L_thickness.shape.gii"));
        gifti::write_shape(&data, &thick, &MetaData::new()).unwrap();
        let (keys, table) = octant_labels(&sub);
        let labels = d.join(format!("sub-0{i}_hemi-L_octants.label.gii"));
        gifti::write_labels(&labels, &keys, &table).unwrap();
        let mask: Vec<f32> = sub
            .positions
            .iter()
            .map(|p| f32::from(u8::from(p[2] > 80.0)))
            .collect();
        let maskf = d.join(format!("sub-0{i}_hemi-L_mask.shape.gii"));
        gifti::write_shape(&maskf, &mask, &MetaData::new()).unwrap();
        let out = d.join("out");
        let o = run(&[
            "resample",
            "--sphere",
            s(&sphere),
            "--data",
            s(&data),
            "--data",
            s(&labels),
            "--target",
            "icosphere:4",
            "-o",
            s(&out),
            "--mask",
            s(&maskf),
            "--json",
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let rep: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        assert_eq!(rep["resample"]["n_target_vertices"], 2562);
        assert!(
            rep["resample"]["maps"][0]["n_masked_output"]
                .as_u64()
                .unwrap()
                > 0
        );
        let th = out.join(format!(
            "sub-0{i}_hemi-L_space-icosphere4_thickness.shape.gii"
        ));
        let lb = out.join(format!(
            "sub-0{i}_hemi-L_space-icosphere4_octants.label.gii"
        ));
        let side: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(
                out.join(format!("sub-0{i}_hemi-L_space-icosphere4_thickness.json")),
            )
            .unwrap(),
        )
        .unwrap();
        assert_eq!(side["Method"], "linear");
        assert_eq!(side["Target"], "icosphere:4");
        let shape = gifti::read_shape(&th).unwrap();
        assert_eq!(shape.values.len(), 2562);
        let lab = gifti::read_labels(&lb).unwrap();
        assert_eq!(lab.table.get(3).map(|l| l.name.as_str()), Some("octant 3"));
        // The mask array travels with the values.
        let g = gifti::read(&th).unwrap();
        assert_eq!(g.arrays.len(), 2);
        assert_eq!(g.arrays[1].meta.get("Name"), Some("missing"));
        outs.push(th);

        // The sphere file as its own target: the values come back exactly.
        let same = d.join(format!("same{i}.shape.gii"));
        let o = run(&[
            "resample",
            "--sphere",
            s(&sphere),
            "--data",
            s(&data),
            "--target",
            s(&sphere),
            "-o",
            s(&same),
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        assert_eq!(gifti::read_shape(&same).unwrap().values, thick);

        // Byte-identical outputs with 1 and 2 threads.
        let mut bytes = Vec::new();
        for threads in ["1", "2"] {
            let o = d.join(format!("t{threads}.shape.gii"));
            let r = std::process::Command::new(env!("CARGO_BIN_EXE_horosphere"))
                .env("RAYON_NUM_THREADS", threads)
                .args([
                    "resample",
                    "--sphere",
                    s(&sphere),
                    "--data",
                    s(&data),
                    "--target",
                    "icosphere:5",
                    "-o",
                    s(&o),
                ])
                .output()
                .unwrap();
            assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
            bytes.push((
                std::fs::read(&o).unwrap(),
                std::fs::read(d.join(format!("t{threads}.json"))).unwrap(),
            ));
        }
        assert_eq!(bytes[0].0, bytes[1].0);
        // The sidecars hold no output name and no time stamp: equal too.
        assert_eq!(bytes[0].1, bytes[1].1);

        // Smoothing on the native surface (here the sphere itself).
        let o = run(&[
            "resample",
            "--sphere",
            s(&sphere),
            "--data",
            s(&data),
            "--target",
            s(&target),
            "-o",
            s(&d.join(format!("sm{i}.shape.gii"))),
            "--fwhm",
            "10",
            "--surface",
            s(&sphere),
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
    let m = d.join("cohort.func.gii");
    let wide = d.join("cohort.csv");
    let long = d.join("cohort_long.csv");
    let o = run(&[
        "matrix",
        s(&outs[0]),
        s(&outs[1]),
        "-o",
        s(&m),
        "--csv",
        s(&wide),
        "--long",
        s(&long),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let g = gifti::read(&m).unwrap();
    assert_eq!(g.arrays.len(), 2);
    assert_eq!(g.arrays[1].meta.get("Subject"), Some("sub-02"));
    let w = std::fs::read_to_string(&wide).unwrap();
    assert!(w.starts_with("subject,v0,v1,"));
    assert_eq!(w.lines().count(), 3);
    let l = std::fs::read_to_string(&long).unwrap();
    assert_eq!(l.lines().count(), 1 + 2 * 2562);

    // Bad input through the command: wrong length, unknown target, labels smoothed.
    let short = d.join("short.shape.gii");
    gifti::write_shape(&short, &[1.0; 10], &MetaData::new()).unwrap();
    let sphere = d.join("sub-01_hemi-L_sphere.surf.gii");
    let o = run(&[
        "resample",
        "--sphere",
        s(&sphere),
        "--data",
        s(&short),
        "-o",
        s(&d.join("z")),
    ]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        !o.status.success() && err.contains("short.shape.gii") && err.contains("(642)"),
        "{err}"
    );
    let o = run(&[
        "resample",
        "--sphere",
        s(&sphere),
        "--data",
        s(&outs[0]),
        "--target",
        "sphere:6",
        "-o",
        s(&d.join("z")),
    ]);
    assert!(String::from_utf8_lossy(&o.stderr).contains("icosphere:K"));
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn same_result_whatever_the_thread_count() {
    let subject = jittered_sphere(4, 100.0, 0.3, 77);
    let target = icosphere(5, 100.0);
    let x: Vec<f64> = subject.positions.iter().map(|p| p[0] * p[1]).collect();
    let maps = [InputMap {
        name: "x".into(),
        values: MapValues::Continuous(x),
    }];
    let go = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let (out, _) = resample_maps(
                &subject.positions,
                None,
                &target.positions,
                &maps,
                None,
                &Default::default(),
            )
            .unwrap();
            match &out[0].values {
                MapValues::Continuous(v) => v.iter().map(|y| y.to_bits()).collect::<Vec<u64>>(),
                MapValues::Labels { .. } => Vec::new(),
            }
        })
    };
    let one = go(1);
    assert_eq!(one.len(), target.n_vertices());
    assert_eq!(one, go(3));
}

#[test]
fn hull_triangles_for_the_qhull_cross_check() {
    // Writes a jittered sphere and our hull triangles for
    // tests/reference/test_hull_scipy.py (scipy.spatial.ConvexHull, i.e.
    // Qhull: Barber, Dobkin, Huhdanpaa, "The Quickhull algorithm for convex
    // hulls", ACM Trans. Math. Softw. 22 (1996) 469-483). Checked here:
    // Euler's formula F = 2V - 4 and outward orientation.
    let m = jittered_sphere(3, 100.0, 0.3, 61);
    let h = horosphere::resample::hull::convex_hull(&m.positions).unwrap();
    assert!(h.excluded.is_empty());
    assert_eq!(h.faces.len(), 2 * m.n_vertices() - 4);
    for f in &h.faces {
        let [a, b, c] = f.map(|v| m.positions[v as usize]);
        assert!(dot(cross(sub(b, a), sub(c, a)), a) > 0.0);
    }
    if let Ok(dir) = std::env::var("HOROSPHERE_ARTIFACTS") {
        let mut s = String::from("x,y,z\n");
        for p in &m.positions {
            s.push_str(&format!("{:.17e},{:.17e},{:.17e}\n", p[0], p[1], p[2]));
        }
        let mut t = String::from("a,b,c\n");
        for f in &h.faces {
            t.push_str(&format!("{},{},{}\n", f[0], f[1], f[2]));
        }
        let dir = PathBuf::from(dir);
        std::fs::create_dir_all(&dir).unwrap();
        horosphere::io::atomic::write_bytes(&dir.join("hull_points.csv"), s.as_bytes()).unwrap();
        horosphere::io::atomic::write_bytes(&dir.join("hull_faces.csv"), t.as_bytes()).unwrap();
    }
}
