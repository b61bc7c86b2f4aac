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
    let cut = cut_handles(&m, 30.0).unwrap();
    assert_eq!(cut.genus, 0);
    assert!(cut.handles[0].cut);
    assert_genus0_closed_connected(&cut.mesh);
    assert_eq!(cut.origin.len(), cut.mesh.n_vertices());
}

#[test]
fn double_torus_has_two_loops_and_cuts_to_genus0() {
    let m = double_torus(10.0, 2.0, 32, 12);
    assert_eq!(euler(&m), -2);
    let cut = cut_handles(&m, f64::INFINITY).unwrap();
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
fn sphere_with_thin_tube_keeps_the_sphere() {
    let (big, r) = (20.0, 1.5);
    let (m, tube_area) = sphere_with_tube(big, r, 24);
    assert_eq!(euler(&m), 0);
    let cut = cut_handles(&m, 30.0).unwrap();
    assert_eq!(cut.handles.len(), 1);
    let h = &cut.handles[0];
    let want = TAU * r;
    assert!((h.length_mm - want).abs() < 0.02 * want, "{}", h.length_mm);
    // The loop lies on the tube (every vertex at distance r from the axis).
    for &v in &h.vertices {
        let p = m.positions[v as usize];
        assert!((p[0].hypot(p[1]) - r).abs() < 1e-9);
    }
    assert_genus0_closed_connected(&cut.mesh);
    // The sphere is kept: area changes only by the two caps (2 pi r^2 at
    // most) - the tube is still there, cut across and capped - so the area
    // grows by about the two discs; the sphere's outer vertices are intact.
    let grow = cut.mesh.area() - m.area();
    assert!(
        grow > 0.0 && grow < 2.0 * PI * r * r * 1.01,
        "{grow} vs tube {tube_area}"
    );
    // Every outer-sphere vertex survives (duplicates of the rim map back).
    let mut far: Vec<u32> = cut
        .mesh
        .positions
        .iter()
        .zip(&cut.origin)
        .filter(|(p, _)| crate::mesh::norm(**p) > big * 0.99)
        .filter_map(|(_, o)| *o)
        .collect();
    far.sort_unstable();
    far.dedup();
    let far0 = m
        .positions
        .iter()
        .filter(|p| crate::mesh::norm(**p) > big * 0.99)
        .count();
    assert_eq!(far.len(), far0);
}

#[test]
fn limit_leaves_long_handles_alone() {
    let m = torus(10.0, 2.0, 64, 24);
    let cut = cut_handles(&m, 5.0).unwrap();
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
    let cut = cut_handles(&e.mesh, 30.0).unwrap();
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
