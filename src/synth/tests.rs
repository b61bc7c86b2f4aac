//! Tests of the synthetic generator: topology and geometry of clean
//! surfaces, figures against facts of the trade, planted defects,
//! determinism.

use super::cohort::*;
use super::defects::{plant, DefectKind};
use super::maps::*;
use super::rng::Rng;
use super::surface::*;
use crate::mesh::intersect::self_intersections;
use crate::mesh::topology::{boundary_loops, face_components, EdgeTable};
use crate::mesh::{dot, TriMesh};

fn params(vertices: usize, hemi: Hemi) -> SurfaceParams {
    SurfaceParams {
        vertices,
        hemi,
        ..Default::default()
    }
}

/// V - E + F.
fn euler(m: &TriMesh) -> i64 {
    m.n_vertices() as i64 - EdgeTable::new(m).len() as i64 + m.n_faces() as i64
}

fn all_edges_two_faces(m: &TriMesh) -> bool {
    let e = EdgeTable::new(m);
    (0..e.len()).all(|i| e.valence(i) == 2)
}

/// Pairs of distinct vertices with bit-identical positions.
fn duplicate_pairs(m: &TriMesh) -> usize {
    let mut keys: Vec<[u64; 3]> = m.positions.iter().map(|p| p.map(f64::to_bits)).collect();
    keys.sort_unstable();
    keys.windows(2).filter(|w| w[0] == w[1]).count()
}

#[test]
fn clean_surfaces_are_closed_genus0_embedded_and_outward() {
    // Closed genus-0 surfaces have V - E + F = 2 (Euler; Massey, "A basic
    // course in algebraic topology", 1991). Ten seeds, sizes 2k to 20k,
    // both hemispheres.
    let sizes = [
        2_000usize, 3_100, 5_000, 7_777, 12_000, 2_500, 20_000, 4_000, 9_000, 15_000,
    ];
    for (seed, &n) in sizes.iter().enumerate() {
        let hemi = if seed % 2 == 0 {
            Hemi::Left
        } else {
            Hemi::Right
        };
        let s = folded_surface(&params(n, hemi), seed as u64 + 100).unwrap();
        let m = &s.mesh;
        assert_eq!(m.n_vertices(), n, "seed {seed}: exact vertex count");
        assert_eq!(m.n_faces(), 2 * n - 4);
        assert!(all_edges_two_faces(m), "seed {seed}: closed manifold edges");
        assert_eq!(euler(m), 2, "seed {seed}: genus 0");
        assert_eq!(face_components(m).1, 1, "seed {seed}: one piece");
        let hits = self_intersections(m);
        assert!(
            hits.is_empty(),
            "seed {seed}, {n} vertices: {} intersecting pairs",
            hits.len()
        );
        // Outward: every face turns counter-clockwise about the centre, and
        // the enclosed volume is positive.
        for t in &m.faces {
            let [a, b, c] = t.map(|v| crate::mesh::sub(m.positions[v as usize], s.centre));
            assert!(
                dot(a, crate::mesh::cross(b, c)) > 0.0,
                "seed {seed}: face turned inward"
            );
        }
        assert!(m.signed_volume() > 0.0);
        // Midline: the left hemisphere lies at x < 0, the right at x > 0.
        let (lo, hi) = m.bounding_box();
        match hemi {
            Hemi::Left => assert!(hi[0] < 0.0, "{hi:?}"),
            Hemi::Right => assert!(lo[0] > 0.0, "{lo:?}"),
        }
    }
}

#[test]
fn size_and_folding_are_hemisphere_like() {
    // Default settings (150k vertices, as from a 1 mm scan). Surface area of
    // one hemisphere's white surface is roughly 800 to 1,200 cm^2 (memory:
    // typical white-surface area; see docs/external-checks.md).
    for (seed, hemi) in [(1u64, Hemi::Left), (2, Hemi::Right)] {
        let s = folded_surface(&params(150_000, hemi), seed).unwrap();
        let area_cm2 = s.mesh.area() / 100.0;
        assert!(
            (800.0..=1200.0).contains(&area_cm2),
            "seed {seed}: area {area_cm2:.0} cm^2"
        );
        // Extent: about 70 x 160 x 110 mm (semi-axes 35, 80, 55; medial side
        // flattened), to within 15 mm.
        let (lo, hi) = s.mesh.bounding_box();
        let ext = [hi[0] - lo[0], hi[1] - lo[1], hi[2] - lo[2]];
        for (k, want) in [(0usize, 62.0), (1, 160.0), (2, 110.0)] {
            assert!((ext[k] - want).abs() < 15.0, "extent {ext:?}");
        }
        // Folds several mm to about 20 mm deep, and a large share of the
        // surface hidden in sulci (depth > 3 mm).
        let dmax = s.depth.iter().copied().fold(0.0, f64::max);
        assert!((18.0..=25.0).contains(&dmax), "deepest fold {dmax}");
        let va = s.mesh.vertex_areas();
        let buried: f64 = va
            .iter()
            .zip(&s.depth)
            .filter(|(_, d)| **d > 3.0)
            .map(|(a, _)| a)
            .sum();
        let frac = buried / s.mesh.area();
        assert!((0.4..0.85).contains(&frac), "buried fraction {frac}");
    }
}

#[test]
fn thickness_in_the_human_range() {
    // Human cortical thickness: about 1 to 4.5 mm, mean about 2.5 mm
    // (Fischl and Dale, PNAS 97, 2000, 11050-11055). Area-weighted mean
    // within 0.2 mm of 2.5 and a spread like real maps (s.d. 0.2 to 0.7).
    for seed in [3u64, 4] {
        let s = folded_surface(&params(20_000, Hemi::Left), seed).unwrap();
        let t = thickness(&s, &ThicknessModel::default(), seed, |_| 0.0);
        assert!(t.iter().all(|&x| (1.0..=4.5).contains(&x)));
        let va = s.mesh.vertex_areas();
        let a: f64 = va.iter().sum();
        let mean = t.iter().zip(&va).map(|(x, w)| x * w).sum::<f64>() / a;
        let var = t
            .iter()
            .zip(&va)
            .map(|(x, w)| (x - mean).powi(2) * w)
            .sum::<f64>()
            / a;
        assert!((mean - 2.5).abs() < 0.2, "mean {mean}");
        assert!((0.2..0.7).contains(&var.sqrt()), "sd {}", var.sqrt());
        // Thinner in fundi than on crowns.
        let mean_where = |f: &dyn Fn(f64) -> bool| {
            let (s1, n1) = t
                .iter()
                .zip(&s.depth)
                .filter(|(_, d)| f(**d))
                .fold((0.0, 0usize), |(s, n), (x, _)| (s + x, n + 1));
            s1 / n1.max(1) as f64
        };
        let crowns = mean_where(&|d| d < 0.5);
        let fundi = mean_where(&|d| d > 12.0);
        assert!(crowns - fundi > 0.5, "crowns {crowns}, fundi {fundi}");
    }
}

#[test]
fn planted_effect_is_exactly_where_stated() {
    let s = folded_surface(&params(8_000, Hemi::Left), 9).unwrap();
    let effect = CapEffect::default();
    let model = ThicknessModel::default();
    let base = thickness(&s, &model, 9, |_| 0.0);
    let thin = thickness(&s, &model, 9, |u| {
        if effect.contains(u) {
            effect.change_mm
        } else {
            0.0
        }
    });
    let mut inside = 0;
    for ((u, a), b) in s.directions.iter().zip(&base).zip(&thin) {
        if effect.contains(*u) {
            inside += 1;
            // Unless clamped at the lower bound, exactly the planted change.
            if *a > 1.0 - effect.change_mm {
                assert!((b - a - effect.change_mm).abs() < 1e-12);
            }
        } else {
            assert_eq!(a, b);
        }
    }
    // The share of vertices in the cap matches the share of uniformly random
    // points of the sphere whose warped direction falls in it (Monte Carlo,
    // 200k points: standard error under 1% of the share), to within the
    // density variation of the geodesic sphere: its flat-then-normalised
    // points are denser near the icosahedron's corners than at its face
    // centres by up to the gnomonic factor 1/cos^3(37.4 deg) = 2, so a cap
    // of this size may hold up to about a third more or fewer.
    let frac = inside as f64 / s.directions.len() as f64;
    let mut rng = Rng::new(1);
    let axes = SurfaceParams::default().semi_axes;
    let hits = (0..200_000)
        .filter(|_| effect.contains(warp_direction(rng.unit_vector(), axes)))
        .count();
    let want = hits as f64 / 200_000.0;
    assert!((frac / want - 1.0).abs() < 0.35, "{frac} vs {want}");
    assert!(want > 0.01, "{want}");
}

#[test]
fn regions_and_landmarks_correspond_across_subjects() {
    let table = region_table();
    let jitter = 3.0;
    for seed in 20..23u64 {
        let s = folded_surface(&params(6_000, Hemi::Right), seed).unwrap();
        let labels = region_labels(&s, seed, 2.0);
        for r in table.iter().filter(|r| r.key != UNLABELLED) {
            let n = labels.iter().filter(|&&k| k == r.key).count();
            assert!(n > 100, "region {} has {n} vertices", r.name);
        }
        assert!(labels.iter().all(|&k| k != UNLABELLED));
        let placed = place_landmarks(&s, seed, jitter);
        let template = landmark_template();
        assert_eq!(placed.len(), template.len());
        for (p, t) in placed.iter().zip(&template) {
            assert_eq!(p.name, t.name);
            // Jitter: each tangent component N(0, 3 deg), so the angle is
            // Rayleigh(3 deg): beyond 15 deg with probability e^-12.5.
            let off = dot(p.direction, t.direction)
                .clamp(-1.0, 1.0)
                .acos()
                .to_degrees();
            assert!(off < 15.0, "{}: {off} deg", p.name);
            // The vertex is the nearest one: within about one and a half
            // edges (6000 vertices: mean edge 2.9 deg on a uniform sphere;
            // the warp and the relaxation make directions denser in some
            // places and sparser in others) of the jittered direction.
            let u = s.directions[p.vertex as usize];
            let snap = dot(u, p.direction).clamp(-1.0, 1.0).acos().to_degrees();
            assert!(snap < 4.5, "{}: {snap} deg", p.name);
            // And no other vertex is nearer.
            let best = s
                .directions
                .iter()
                .map(|v| dot(*v, p.direction))
                .fold(f64::NEG_INFINITY, f64::max);
            assert_eq!(dot(u, p.direction), best);
        }
    }
}

fn check_defect(kind: DefectKind, hemi: Hemi, seed: u64) {
    let s = folded_surface(&params(5_000, hemi), seed).unwrap();
    let mut rng = Rng::new(seed);
    let e = plant(&s, kind, &mut rng, &[0, 1, 2]).unwrap();
    let m = &e.mesh;
    m.validate().unwrap();
    assert_eq!(e.source.len(), m.n_vertices());
    let table = EdgeTable::new(m);
    let loops = boundary_loops(m, &table);
    let (_, comps) = face_components(m);
    let chi = euler(m);
    let r = &e.record;
    assert_eq!(loops.len(), r.boundary_loops, "{kind:?}: boundary loops");
    assert_eq!(comps, r.components, "{kind:?}: components");
    assert_eq!(
        duplicate_pairs(m),
        r.duplicate_pairs,
        "{kind:?}: duplicates"
    );
    assert!(
        (0..table.len()).all(|i| table.valence(i) <= 2),
        "{kind:?}: non-manifold edge"
    );
    // No self-intersections, except that faces on the two sides of a
    // duplicated seam touch where their (distinct) vertices coincide.
    for (f, g) in self_intersections(m) {
        let pf = m.faces[f as usize].map(|v| m.positions[v as usize]);
        let pg = m.faces[g as usize].map(|v| m.positions[v as usize]);
        let touch = pf.iter().any(|p| pg.contains(p));
        assert!(
            kind == DefectKind::DuplicateVertices && touch,
            "{kind:?}: faces {f} and {g} cross"
        );
    }
    // Every vertex is used by some face.
    let mut used = vec![false; m.n_vertices()];
    m.faces
        .iter()
        .flatten()
        .for_each(|&v| used[v as usize] = true);
    assert!(used.iter().all(|&u| u), "{kind:?}: unused vertex");
    match kind {
        DefectKind::Hole => {
            // A disc removed: V - E + F = 2 - b = 1 (Massey 1991).
            assert_eq!(chi, 1);
            assert!(r.faces_removed >= 12 && r.vertices_removed >= 4, "{r:?}");
            assert_eq!(m.n_faces(), s.mesh.n_faces() - r.faces_removed);
        }
        DefectKind::Handle => {
            // Closed with one handle: V - E + F = 2 - 2g = 0.
            assert_eq!(chi, 0);
            assert!(all_edges_two_faces(m));
            assert!(m.signed_volume() > 0.0);
        }
        DefectKind::StrayComponent => {
            // Two closed spheres: chi = 2 + 2.
            assert_eq!(chi, 4);
            assert!(all_edges_two_faces(m));
            assert_eq!(m.n_vertices(), s.mesh.n_vertices() + r.vertices_added);
        }
        DefectKind::DuplicateVertices => {
            // A slit along 8 edges: one boundary loop of 16 edges, chi = 1.
            assert_eq!(chi, 1);
            assert_eq!(loops[0].len(), 16);
            assert_eq!(r.duplicate_pairs, 7);
        }
    }
}

#[test]
fn defects_are_exactly_what_is_planted() {
    for (i, kind) in DefectKind::ALL.iter().enumerate() {
        for seed in [31u64, 32] {
            let hemi = if (i + seed as usize).is_multiple_of(2) {
                Hemi::Left
            } else {
                Hemi::Right
            };
            check_defect(*kind, hemi, seed);
        }
    }
}

#[test]
fn same_seed_same_bits_any_thread_count() {
    let p = params(6_000, Hemi::Right);
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let s = folded_surface(&p, 77).unwrap();
            let t = thickness(&s, &ThicknessModel::default(), 77, |_| 0.0);
            (s.mesh, t)
        })
    };
    let (m1, t1) = run(1);
    let (m2, t2) = run(2);
    let bits = |m: &TriMesh| {
        m.positions
            .iter()
            .flat_map(|p| p.map(f64::to_bits))
            .collect::<Vec<_>>()
    };
    assert_eq!(bits(&m1), bits(&m2));
    assert_eq!(m1.faces, m2.faces);
    assert_eq!(
        t1.iter().map(|x| x.to_bits()).collect::<Vec<_>>(),
        t2.iter().map(|x| x.to_bits()).collect::<Vec<_>>()
    );
    let other = folded_surface(&p, 78).unwrap();
    assert_ne!(bits(&m1), bits(&other.mesh));
}

#[test]
fn cohort_plan_participants_and_truth() {
    let params = CohortParams {
        subjects: 6,
        vertices: 3_000,
        seed: 5,
        ..Default::default()
    };
    params.validate().unwrap();
    let people = participants(&params);
    assert_eq!(people.len(), 6);
    let patients = people.iter().filter(|p| p.group == Group::Patient).count();
    assert_eq!(patients, 3);
    assert!(people.iter().all(|p| (45..80).contains(&p.age)));
    let tsv = participants_tsv(&people);
    assert!(tsv.starts_with("participant_id\tgroup\tage\tsex\nsub-kf01\t"));
    assert_eq!(tsv.lines().count(), 7);
    let plan = defect_plan(&params);
    assert_eq!(plan.len(), 4);
    let mut subjects: Vec<usize> = plan.iter().map(|p| p.0).collect();
    subjects.sort_unstable();
    subjects.dedup();
    assert_eq!(subjects.len(), 4, "one defect per subject");
    let mut truths = Vec::new();
    for i in 0..params.subjects {
        let s = generate_subject(&params, &people, i).unwrap();
        for h in &s.hemis {
            let planned = plan.iter().find(|p| p.0 == i && p.1 == h.hemi).map(|p| p.2);
            assert_eq!(h.defect.as_ref().map(|d| d.kind), planned);
            let n = h.mesh.n_vertices();
            assert_eq!(h.thickness.len(), n);
            assert_eq!(h.depth.len(), n);
            assert_eq!(h.labels.len(), n);
            if planned.is_none() {
                assert_eq!(n, 3_000);
                assert_eq!(euler(&h.mesh), 2);
            }
            for l in &h.landmarks {
                assert!((l.vertex as usize) < n);
            }
            let csv = landmarks_csv(&h.landmarks);
            assert!(csv.starts_with("name,vertex\nbow-tip,"));
        }
        truths.push(SubjectTruth::of(&s));
    }
    let truth = ground_truth(&params, truths);
    let json = serde_json::to_value(&truth).unwrap();
    assert_eq!(json["effect"]["thickness_change_mm"], -0.3);
    assert_eq!(json["subjects"].as_array().map(|a| a.len()), Some(6));
    let defects: usize = json["subjects"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|s| s["hemispheres"].as_array().unwrap().iter())
        .filter(|h| !h["defect"].is_null())
        .count();
    assert_eq!(defects, 4);
}

#[test]
fn bad_options_are_refused_with_the_option_named() {
    let e = folded_surface(&params(100, Hemi::Left), 1).unwrap_err();
    assert!(e.to_string().contains("vertex count"), "{e}");
    let mut p = params(2_000, Hemi::Left);
    p.primary_depth = [10.0, 40.0];
    let e = folded_surface(&p, 1).unwrap_err();
    assert!(e.to_string().contains("deepest sulcus"), "{e}");
    let mut p = params(2_000, Hemi::Left);
    p.sulcus_dropout = f64::NAN;
    assert!(folded_surface(&p, 1)
        .unwrap_err()
        .to_string()
        .contains("dropout"));
    let c = CohortParams {
        subjects: 0,
        ..Default::default()
    };
    assert!(c
        .validate()
        .unwrap_err()
        .to_string()
        .contains("subject count"));
}

#[test]
#[ignore = "large: 200k vertices; run with --ignored (see docs/benchmarks.md)"]
fn largest_size_is_clean() {
    let s = folded_surface(&params(200_000, Hemi::Left), 5).unwrap();
    assert_eq!(s.mesh.n_vertices(), 200_000);
    assert!(all_edges_two_faces(&s.mesh));
    assert_eq!(euler(&s.mesh), 2);
    assert!(self_intersections(&s.mesh).is_empty());
}

#[test]
fn triangles_mostly_good_some_thin() {
    // Smallest angle of each triangle: an equilateral one has 60 degrees.
    // Surfaces from real scans are mostly well shaped with some thin
    // triangles; ours must be too (figures measured at 15k vertices:
    // median 25 degrees, 3% under 10 degrees).
    let s = folded_surface(&params(12_000, Hemi::Left), 41).unwrap();
    let m = &s.mesh;
    let mut small: Vec<f64> = (0..m.n_faces())
        .map(|f| {
            let c = m.corners(f);
            (0..3)
                .map(|k| {
                    let u = crate::mesh::sub(c[(k + 1) % 3], c[k]);
                    let v = crate::mesh::sub(c[(k + 2) % 3], c[k]);
                    (dot(u, v) / (crate::mesh::norm(u) * crate::mesh::norm(v)))
                        .clamp(-1.0, 1.0)
                        .acos()
                        .to_degrees()
                })
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    small.sort_by(f64::total_cmp);
    let median = small[small.len() / 2];
    let thin = small.iter().filter(|&&a| a < 10.0).count() as f64 / small.len() as f64;
    assert!(median > 18.0, "median smallest angle {median}");
    assert!(thin < 0.12, "share of triangles under 10 degrees {thin}");
    assert!(small[0] > 0.1, "degenerate triangle: {}", small[0]);
}

#[test]
fn seed_walk_finds_the_same_nearest_seed_as_a_full_scan() {
    // The greedy walk over the seeds' neighbour lists must end where a scan
    // of all seeds does (it does on a Delaunay graph); start it from the
    // answer for a point a few degrees away, as the relaxation does.
    let field = fold_field(&params(2_000, Hemi::Left), 12);
    let mut rng = Rng::new(12);
    for _ in 0..20_000 {
        let u = rng.unit_vector();
        let v = jitter(&mut rng, u, 4.0);
        let (_, hint) = field.depth_near(v, None);
        let (d_walk, n_walk) = field.depth_near(u, Some(hint));
        let (d_scan, n_scan) = field.depth_near(u, None);
        assert_eq!(n_walk, n_scan);
        assert_eq!(d_walk.to_bits(), d_scan.to_bits());
    }
}
