//! Tests of handle search and cutting against closed-form loop lengths
//! (circle perimeters) and the Euler characteristic V - E + F = 2 - 2g
//! (Massey, "A basic course in algebraic topology", 1991).

use super::*;
use crate::mesh::shapes::{double_torus, torus};
use crate::mesh::topology::face_components;
use std::f64::consts::{PI, TAU};

fn euler(m: &TriMesh) -> i64 {
    let he = Halfedges::from_faces(m.n_vertices(), &m.faces).unwrap();
    he.euler_characteristic()
}

/// Closed polygon profile (rho, z), counter-clockwise in the (rho, z) plane
/// like [`torus`], revolved about z with `n` segments.
fn revolve(profile: &[(f64, f64)], n: usize) -> TriMesh {
    let m = profile.len();
    let mut positions = Vec::new();
    for i in 0..n {
        let u = TAU * i as f64 / n as f64;
        for &(r, z) in profile {
            positions.push([r * u.cos(), r * u.sin(), z]);
        }
    }
    let id = |i: usize, j: usize| ((i % n) * m + (j % m)) as u32;
    let mut faces = Vec::new();
    for i in 0..n {
        for j in 0..m {
            let (a, b, c, d) = (id(i, j), id(i + 1, j), id(i + 1, j + 1), id(i, j + 1));
            faces.push([a, b, c]);
            faces.push([a, c, d]);
        }
    }
    TriMesh { positions, faces }
}

/// Sphere of radius `big` with a straight tube of radius `r` through it
/// along z: its holes at the poles (where the sphere radius in the xy-plane
/// is `r`) are joined by the tube. Returns the mesh and the tube's area.
fn sphere_with_tube(big: f64, r: f64, n: usize) -> (TriMesh, f64) {
    let phi1 = (r / big).acos();
    let zt = big * phi1.sin();
    let na = 40;
    let mut prof = Vec::new();
    for k in 0..=na {
        let phi = -phi1 + 2.0 * phi1 * k as f64 / na as f64;
        prof.push((big * phi.cos(), big * phi.sin()));
    }
    let nt = 12;
    for k in 1..nt {
        prof.push((r, zt - 2.0 * zt * k as f64 / nt as f64));
    }
    // Polygonal tube area: perimeter of the n-gon times the tube length.
    let tube_area = 2.0 * n as f64 * r * (PI / n as f64).sin() * 2.0 * zt;
    (revolve(&prof, n), tube_area)
}

fn opts(max_loop_mm: f64) -> HandleOptions {
    HandleOptions {
        max_loop_mm,
        ..HandleOptions::default()
    }
}

fn assert_genus0_closed_connected(m: &TriMesh) {
    // Closed oriented manifold: the halfedge build refuses anything else.
    assert_eq!(euler(m), 2, "V - E + F = 2 - 2g with g = 0, b = 0");
    assert_eq!(face_components(m).1, 1);
}

#[test]
fn torus_has_one_loop_of_tube_circumference() {
    let (big, r, nm) = (10.0, 2.0, 24);
    let m = torus(big, r, 64, nm);
    assert_eq!(euler(&m), 0);
    let hs = find_handles(&m).unwrap();
    assert_eq!(hs.len(), 1);
    // Tube circumference 2 pi r (analytic); the polygon is 0.3% shorter.
    let want = TAU * r;
    assert!(
        (hs[0].length_mm - want).abs() < 0.02 * want,
        "{}",
        hs[0].length_mm
    );
    assert_eq!(hs[0].vertices.len(), nm);
    // Its centre lies on the tube's centre circle (radius `big`, z = 0).
    let c = hs[0].centre;
    assert!(
        ((c[0].hypot(c[1])) - big).abs() < 0.5 && c[2].abs() < 0.5,
        "{c:?}"
    );
    assert!(!hs[0].neighbours.is_empty());
    let cut = cut_handles(&m, &opts(30.0)).unwrap();
    assert_eq!(cut.genus, 0);
    assert!(cut.handles[0].cut);
    assert_genus0_closed_connected(&cut.mesh);
    assert_eq!(cut.origin.len(), cut.mesh.n_vertices());
}

#[test]
fn double_torus_has_two_loops_and_cuts_to_genus0() {
    let m = double_torus(10.0, 2.0, 32, 12);
    assert_eq!(euler(&m), -2);
    let cut = cut_handles(&m, &opts(f64::INFINITY)).unwrap();
    assert_eq!(cut.handles.len(), 2);
    assert_eq!(cut.genus, 0);
    assert_genus0_closed_connected(&cut.mesh);
    for h in &cut.handles {
        // Each is a tube circumference of one torus (2 pi r, 12-gon).
        let want = TAU * 2.0;
        assert!((h.length_mm - want).abs() < 0.03 * want, "{}", h.length_mm);
    }
}

#[test]
fn sphere_with_thin_tube_loses_the_tube_and_keeps_the_sphere() {
    // Sphere radius R = 20 mm, tube radius r = 1.5 mm, tube length L = 2 zt
    // (about 39.9 mm) along the z axis, 24-gon cross-section.
    let (big, r, n) = (20.0, 1.5, 24);
    let (m, tube_area) = sphere_with_tube(big, r, n);
    assert_eq!(euler(&m), 0);
    let cut = cut_handles(&m, &opts(30.0)).unwrap();
    assert_eq!(cut.handles.len(), 1);
    let h = &cut.handles[0];
    // Loop length: the tube circumference 2 pi r (analytic) within 1%; the
    // 24-gon is 0.29% shorter.
    let want = TAU * r;
    assert!((h.length_mm - want).abs() < 0.01 * want, "{}", h.length_mm);
    // The loop lies on the tube (every vertex at distance r from the axis).
    for &v in &h.vertices {
        let p = m.positions[v as usize];
        assert!((p[0].hypot(p[1]) - r).abs() < 1e-9);
    }
    assert_genus0_closed_connected(&cut.mesh);
    // The tube is gone: every vertex left lies on the sphere (the two
    // junction rings are capped by flat polygons through their own
    // vertices), and the area drops by the tube's lateral area less the two
    // caps. Analytic: lateral area 2 pi r L; each cap is the regular 24-gon
    // of circumradius r, (n/2) r^2 sin(2 pi / n).
    for p in &cut.mesh.positions {
        assert!(
            (crate::mesh::norm(*p) - big).abs() < 1e-9,
            "{p:?} is off the sphere"
        );
    }
    let cap = 0.5 * n as f64 * r * r * (TAU / n as f64).sin();
    let change = cut.mesh.area() - m.area();
    assert!(
        (change - (2.0 * cap - tube_area)).abs() < 1e-6 * tube_area,
        "area change {change} vs {}",
        2.0 * cap - tube_area
    );
    assert!((h.removed_area_mm2 - tube_area).abs() < 1e-6 * tube_area);
    let zt = big * (r / big).acos().sin();
    let lateral = TAU * r * 2.0 * zt;
    assert!(
        (-change - lateral).abs() < 0.05 * lateral,
        "area change {change} vs tube 2 pi r L = {lateral}"
    );
    // Every sphere vertex survives (only tube vertices are gone).
    let on_sphere = m
        .positions
        .iter()
        .filter(|p| (crate::mesh::norm(**p) - big).abs() < 1e-9)
        .count();
    assert_eq!(cut.mesh.n_vertices(), on_sphere);
    // Without tube removal the same loop is only cut: the area grows.
    let plain = cut_handles(
        &m,
        &HandleOptions {
            remove_tubes: false,
            ..opts(30.0)
        },
    )
    .unwrap();
    assert_genus0_closed_connected(&plain.mesh);
    assert!(plain.mesh.area() > m.area());
    assert_eq!(plain.handles[0].removed_area_mm2, 0.0);
}

/// The Erickson-Whittlesey algorithm without truncation: the shortest
/// non-separating loop through every vertex, over all vertices.
fn brute_force_shortest(m: &TriMesh) -> f64 {
    let he = Halfedges::from_faces(m.n_vertices(), &m.faces).unwrap();
    let class = cohomology(&he).unwrap();
    let p = &m.positions;
    let len = he
        .edge_half
        .iter()
        .map(|&h| dist(p[he.tail[h as usize] as usize], p[he.head(h) as usize]))
        .collect();
    let ctx = Ctx {
        he: &he,
        len,
        class,
    };
    let mut s = Scratch::new(m.n_vertices());
    (0..m.n_vertices() as u32)
        .filter_map(|r| root_loop(&ctx, &mut s, r, f64::INFINITY).map(|(l, _)| l))
        .fold(f64::INFINITY, f64::min)
}

#[test]
fn shortest_loop_is_exact_on_tori_of_several_aspect_ratios() {
    // (major R, minor r, segments around the axis, around the tube). The
    // shortest non-separating loop of a torus of revolution is the shorter
    // of the tube circle (2 pi r) and the inner equator (2 pi (R - r));
    // the last two tori are fat, so there the inner equator wins.
    for &(big, r, nu, nm) in &[
        (10.0, 1.0, 48, 12),
        (10.0, 3.0, 40, 16),
        (6.0, 3.5, 40, 16),
        (4.0, 3.0, 40, 16),
    ] {
        let m = torus(big, r, nu, nm);
        let found = shortest_nonseparating_loop(&m, 30.0).unwrap().unwrap();
        let brute = brute_force_shortest(&m);
        assert!(
            (found.0 - brute).abs() < 1e-9,
            "R {big} r {r}: {} vs every-root {brute}",
            found.0
        );
        let meridian = 2.0 * nm as f64 * r * (PI / nm as f64).sin();
        let inner = 2.0 * nu as f64 * (big - r) * (PI / nu as f64).sin();
        let polygon = meridian.min(inner);
        assert!(
            (found.0 - polygon).abs() < 1e-9,
            "R {big} r {r}: {} vs polygon {polygon}",
            found.0
        );
        let analytic = TAU * r.min(big - r);
        assert!(
            (found.0 - analytic).abs() < 0.02 * analytic,
            "R {big} r {r}: {} vs 2 pi min(r, R - r) = {analytic}",
            found.0
        );
        assert_eq!(found.1.len(), if meridian < inner { nm } else { nu });
    }
}

#[test]
fn genus_over_the_limit_is_reported_not_attempted() {
    let m = double_torus(10.0, 2.0, 24, 8);
    let e = cut_handles(
        &m,
        &HandleOptions {
            max_genus: 1,
            ..HandleOptions::default()
        },
    )
    .unwrap_err();
    assert!(matches!(e, Error::NotReady(_)), "{e}");
    let text = e.to_string();
    assert!(
        text.contains("genus 2") && text.contains("limit 1") && text.contains("not attempted"),
        "{text}"
    );
    // At the limit it goes through.
    let ok = cut_handles(
        &m,
        &HandleOptions {
            max_genus: 2,
            ..HandleOptions::default()
        },
    )
    .unwrap();
    assert_eq!(ok.genus, 0);
}

#[test]
fn limit_leaves_long_handles_alone() {
    let m = torus(10.0, 2.0, 64, 24);
    let cut = cut_handles(&m, &opts(5.0)).unwrap();
    assert_eq!(cut.genus, 1);
    assert_eq!(cut.handles.len(), 1);
    assert!(!cut.handles[0].cut);
    assert_eq!(cut.mesh.faces, m.faces);
}

#[test]
fn sphere_has_no_handles() {
    let m = crate::mesh::shapes::icosphere(2, 10.0);
    assert!(find_handles(&m).unwrap().is_empty());
}

#[test]
fn non_manifold_input_asks_for_repair() {
    let mut m = torus(10.0, 2.0, 16, 8);
    let f = m.faces[0];
    m.faces.push(f);
    let e = find_handles(&m).unwrap_err();
    assert!(matches!(e, Error::NotReady(_)));
    assert!(e.to_string().contains("repair first"), "{e}");
    let e = cut_handles(&m, &HandleOptions::default()).unwrap_err();
    assert!(e.to_string().contains("repair first"), "{e}");
    // An open surface (one face removed) is refused the same way.
    let mut open = torus(10.0, 2.0, 16, 8);
    open.faces.pop();
    let e = cut_handles(&open, &HandleOptions::default()).unwrap_err();
    assert!(matches!(e, Error::NotReady(_)));
    assert!(e.to_string().contains("repair first"), "{e}");
}

#[test]
fn planted_synthetic_handle_is_found_at_its_place() {
    use crate::synth::defects::{plant, DefectKind};
    use crate::synth::rng::Rng;
    use crate::synth::surface::{folded_surface, Hemi, SurfaceParams};
    let params = SurfaceParams {
        vertices: 5_000,
        hemi: Hemi::Right,
        ..Default::default()
    };
    let seed = 7;
    let s = folded_surface(&params, seed).unwrap();
    let e = plant(&s, DefectKind::Handle, &mut Rng::new(seed), &[0, 1, 2]).unwrap();
    assert_eq!(euler(&e.mesh), 0);
    let cut = cut_handles(&e.mesh, &opts(30.0)).unwrap();
    assert_eq!(cut.handles.len(), 1);
    let h = &cut.handles[0];
    // The planted tube is a 3-quad prism whose six triangles are the last
    // faces of the edited mesh (src/synth/defects.rs): the loop must run on
    // its six vertices, and its centre lies within half a tube length (the
    // tube spans at most 8 mm + 2 edge lengths) of the recorded midpoint.
    let tube: HashSet<u32> = e.mesh.faces[e.mesh.n_faces() - 6..]
        .iter()
        .flatten()
        .copied()
        .collect();
    assert_eq!(tube.len(), 6);
    assert!(
        h.vertices.iter().all(|v| tube.contains(v)),
        "{:?} vs {tube:?}",
        h.vertices
    );
    let off = dist(h.centre, e.record.at);
    assert!(
        off < 8.0,
        "handle centre {:?} is {off} mm from {:?}",
        h.centre,
        e.record.at
    );
    // An end triangle of the tube closes a loop of three tube edges, so the
    // shortest loop is no longer than three times the longest tube edge.
    let longest = e.mesh.faces[e.mesh.n_faces() - 6..]
        .iter()
        .flat_map(|t| (0..3).map(move |k| (t[k], t[(k + 1) % 3])))
        .map(|(a, b)| dist(e.mesh.positions[a as usize], e.mesh.positions[b as usize]))
        .fold(0.0, f64::max);
    assert!(
        h.length_mm <= 3.0 * longest + 1e-9,
        "{} vs {longest}",
        h.length_mm
    );
    assert!(h.vertices.len() <= 6);
    assert!(h.cut);
    // The tube is removed and both openings capped by one triangle each:
    // the surface before planting comes back (same vertices; the six tube
    // faces out, two faces in, every other face kept).
    assert!(h.removed_area_mm2 > 0.0);
    assert_eq!(cut.mesh.positions, e.mesh.positions);
    assert_eq!(cut.mesh.n_faces(), e.mesh.n_faces() - 4);
    assert_eq!(cut.mesh.n_faces(), s.mesh.n_faces());
    let canon = |t: &[u32; 3]| {
        let k = (0..3).min_by_key(|&k| t[k]).unwrap();
        [t[k], t[(k + 1) % 3], t[(k + 2) % 3]]
    };
    let out: HashSet<[u32; 3]> = cut.mesh.faces.iter().map(canon).collect();
    let n_keep = e.mesh.n_faces() - 6;
    assert!(e.mesh.faces[..n_keep]
        .iter()
        .all(|t| out.contains(&canon(t))));
    assert_genus0_closed_connected(&cut.mesh);
}

#[test]
fn repair_cuts_a_torus_and_marks_cap_vertices() {
    use crate::repair::{repair, RepairOptions};
    let m = torus(10.0, 2.0, 48, 16);
    let opts = RepairOptions {
        max_handle_mm: Some(30.0),
        ..Default::default()
    };
    let r = repair(&m, &opts).unwrap();
    assert_eq!(r.log.genus, 0);
    assert_eq!(r.log.euler_characteristic, 2);
    assert_eq!(r.log.handles.len(), 1);
    assert!(r.log.handles[0].cut);
    assert_eq!(r.added.len(), r.mesh.n_vertices());
    // Duplicated loop vertices copy an input vertex; only cap centres (if
    // any) are new, and the log lists exactly the marked ones.
    let marked: Vec<u32> = (0..r.added.len() as u32)
        .filter(|&v| r.added[v as usize])
        .collect();
    assert_eq!(marked, r.log.added_vertices);
    assert!(r.origin.iter().filter(|o| o.is_some()).count() >= m.n_vertices() + 16);
    // Without the option the handle stays.
    let kept = repair(&m, &RepairOptions::default()).unwrap();
    assert_eq!(kept.log.genus, 1);
    assert!(kept.log.handles.is_empty());
}
