//! Inspection of meshes whose topology and geometry are known from outside
//! the project.
//!
//! Euler's formula `V - E + F = 2 - 2g - b` for a compact orientable surface
//! of genus `g` with `b` boundary loops (Massey, "A basic course in algebraic
//! topology", Springer GTM 127, 1991): sphere 2, torus 0, double torus -2,
//! disk 1, sphere with `h` holes `2 - h`. Index of tests:
//! closed surfaces (sphere, torus, double torus, two spheres), open surfaces
//! (disk, sphere with holes), defects (bow-tie, non-manifold edge, flipped
//! face, inward, Moebius strip, duplicates, degenerate, unreferenced), the
//! command line, and the JSON documentation.

use horosphere::inspect::{inspect, render_text, InspectOptions, Inspection, Orientation};
use horosphere::mesh::shapes::{double_torus, icosphere, torus};
use horosphere::TriMesh;
use std::f64::consts::PI;
use std::path::PathBuf;

fn run(m: &TriMesh) -> Inspection {
    inspect(m, &InspectOptions::default()).unwrap()
}

fn codes(r: &Inspection) -> Vec<&str> {
    r.reasons.iter().map(|x| x.code.as_str()).collect()
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// Disjoint union of meshes.
fn union(parts: &[TriMesh]) -> TriMesh {
    let mut m = TriMesh::default();
    for p in parts {
        let off = m.positions.len() as u32;
        m.positions.extend_from_slice(&p.positions);
        m.faces
            .extend(p.faces.iter().map(|t| [t[0] + off, t[1] + off, t[2] + off]));
    }
    m
}

fn translated(m: &TriMesh, d: [f64; 3]) -> TriMesh {
    let mut m = m.clone();
    for p in &mut m.positions {
        *p = [p[0] + d[0], p[1] + d[1], p[2] + d[2]];
    }
    m
}

fn reversed(m: &TriMesh) -> TriMesh {
    let mut m = m.clone();
    for t in &mut m.faces {
        t.swap(1, 2);
    }
    m
}

/// Flat disk of radius `r` in the plane z = 0: a centre vertex and `rings`
/// rings of `n` vertices, faces counter-clockwise seen from +z.
fn disk(r: f64, rings: usize, n: usize) -> TriMesh {
    let mut pos = vec![[0.0, 0.0, 0.0]];
    for k in 1..=rings {
        let rho = r * k as f64 / rings as f64;
        for j in 0..n {
            let a = 2.0 * PI * j as f64 / n as f64;
            pos.push([rho * a.cos(), rho * a.sin(), 0.0]);
        }
    }
    let id = |k: usize, j: usize| (1 + (k - 1) * n + j % n) as u32;
    let mut faces = Vec::new();
    for j in 0..n {
        faces.push([0, id(1, j), id(1, j + 1)]);
    }
    for k in 1..rings {
        for j in 0..n {
            faces.push([id(k, j), id(k + 1, j), id(k + 1, j + 1)]);
            faces.push([id(k, j), id(k + 1, j + 1), id(k, j + 1)]);
        }
    }
    TriMesh::new(pos, faces).unwrap()
}

/// Sphere of radius `r` between colatitudes `t0 < t1` (two circular holes
/// around the poles): `bands + 1` rings of `n` vertices, outward faces.
fn banded_sphere(r: f64, t0: f64, t1: f64, bands: usize, n: usize) -> TriMesh {
    let mut pos = Vec::new();
    for k in 0..=bands {
        let t = t0 + (t1 - t0) * k as f64 / bands as f64;
        for j in 0..n {
            let p = 2.0 * PI * j as f64 / n as f64;
            pos.push([r * t.sin() * p.cos(), r * t.sin() * p.sin(), r * t.cos()]);
        }
    }
    let id = |k: usize, j: usize| (k * n + j % n) as u32;
    let mut faces = Vec::new();
    for k in 0..bands {
        for j in 0..n {
            // d(theta) x d(phi) points outward.
            faces.push([id(k, j), id(k + 1, j), id(k + 1, j + 1)]);
            faces.push([id(k, j), id(k + 1, j + 1), id(k, j + 1)]);
        }
    }
    TriMesh::new(pos, faces).unwrap()
}

/// Perimeter of the regular `n`-gon inscribed in a circle of radius `r`.
fn inscribed_perimeter(r: f64, n: usize) -> f64 {
    2.0 * n as f64 * r * (PI / n as f64).sin()
}

// ---- closed surfaces ------------------------------------------------------

#[test]
fn icosahedron_area_volume_and_counts() {
    // Regular icosahedron with circumradius 1: edge a = 1 / sin(2 pi / 5),
    // area 5 sqrt(3) a^2, volume (5/12)(3 + sqrt 5) a^3 (standard formulas of
    // the regular solids, e.g. Coxeter, "Regular polytopes", 1973; memory).
    let r = run(&icosphere(0, 1.0));
    let a = 1.0 / (2.0 * PI / 5.0).sin();
    assert_eq!((r.vertices, r.edges, r.faces), (12, 30, 20));
    assert!(rel(r.area_mm2, 5.0 * 3f64.sqrt() * a * a) < 1e-13);
    let v = r.enclosed_volume_mm3.unwrap();
    assert!(
        rel(v, 5.0 / 12.0 * (3.0 + 5f64.sqrt()) * a.powi(3)) < 1e-13,
        "{v}"
    );
    assert!(r.ready_to_map, "{:?}", r.reasons);
}

#[test]
fn icosphere_is_a_ready_genus_zero_sphere() {
    // Kenner (1976): V = 10*4^k + 2, E = 30*4^k, F = 20*4^k; chi = 2 (Massey 1991).
    let m = icosphere(3, 50.0);
    let r = run(&m);
    assert_eq!((r.vertices, r.edges, r.faces), (642, 1920, 1280));
    assert_eq!(r.euler_characteristic, 2);
    assert_eq!(r.components.count, 1);
    let c = &r.components.listed[0];
    assert_eq!(
        (c.euler_characteristic, c.genus, c.closed),
        (2, Some(0), true)
    );
    assert!(c.manifold && c.orientable);
    assert_eq!(r.orientation, Orientation::Outward);
    assert!(r.ready_to_map && r.reasons.is_empty(), "{:?}", r.reasons);
    assert_eq!(
        r.boundary.length_mm.to_bits(),
        0.0f64.to_bits(),
        "+0, not -0"
    );
    // An inscribed polyhedron: volume and area just below the sphere's
    // (4/3 pi R^3, 4 pi R^2), within 1.5 % at 642 vertices.
    let v = r.enclosed_volume_mm3.unwrap();
    let sphere_v = 4.0 / 3.0 * PI * 50f64.powi(3);
    assert!(v < sphere_v && rel(v, sphere_v) < 0.015, "{v}");
    assert!(r.area_mm2 < 4.0 * PI * 2500.0 && rel(r.area_mm2, 4.0 * PI * 2500.0) < 0.015);
    assert!(r.bounding_box.max.iter().all(|&x| x <= 50.0 && x > 49.0));
    let text = render_text(&r, "sphere.obj");
    assert!(
        text.contains("ready to map") && !text.contains("NOT"),
        "{text}"
    );
}

#[test]
fn torus_has_genus_one() {
    // chi = 0, g = 1 (Massey 1991); volume 2 pi^2 R r^2 in the limit
    // (Pappus); inscribed polygons of 96 and 48 sides lose about
    // (2 pi / 48)^2 / 6 + (2 pi / 96)^2 / 6 = 0.36 %: asserted within 0.5 %.
    let r = run(&torus(30.0, 10.0, 96, 48));
    assert_eq!(r.euler_characteristic, 0);
    let c = &r.components.listed[0];
    assert_eq!((c.euler_characteristic, c.genus), (0, Some(1)));
    assert_eq!(r.orientation, Orientation::Outward);
    let v = r.enclosed_volume_mm3.unwrap();
    assert!(rel(v, 2.0 * PI * PI * 30.0 * 100.0) < 0.005, "{v}");
    assert_eq!(codes(&r), vec!["genus"]);
    assert!(!r.ready_to_map);
}

#[test]
fn double_torus_has_genus_two() {
    // chi = -2, g = 2 (Massey 1991).
    let m = double_torus(30.0, 10.0, 24, 12);
    let r = run(&m);
    assert_eq!(r.euler_characteristic, -2);
    assert_eq!(r.components.count, 1);
    let c = &r.components.listed[0];
    assert_eq!(
        (c.euler_characteristic, c.genus, c.closed),
        (-2, Some(2), true)
    );
    assert!(c.manifold && c.orientable);
    assert_eq!(r.inconsistent_edges.count, 0);
    assert_eq!(r.orientation, Orientation::Outward);
    // Volume: two tori (2 pi^2 R r^2 each, polyhedral value within 3 % at this
    // resolution) minus two thin cells plus a short prism: close to twice one.
    let one = run(&torus(30.0, 10.0, 24, 12)).enclosed_volume_mm3.unwrap();
    let v = r.enclosed_volume_mm3.unwrap();
    assert!(rel(v, 2.0 * one) < 0.01, "{v} vs {}", 2.0 * one);
    assert_eq!(codes(&r), vec!["genus"]);
    assert!(r.reasons[0].message.contains("2 handle"));
}

#[test]
fn two_spheres_are_two_components() {
    let a = icosphere(2, 10.0);
    let b = translated(&icosphere(1, 5.0), [40.0, 0.0, 0.0]);
    let r = run(&union(&[b.clone(), a.clone()]));
    assert_eq!(r.components.count, 2);
    // Largest first, each chi 2 and genus 0.
    let (c0, c1) = (&r.components.listed[0], &r.components.listed[1]);
    assert_eq!((c0.faces, c1.faces), (a.n_faces(), b.n_faces()));
    for c in [c0, c1] {
        assert_eq!((c.euler_characteristic, c.genus), (2, Some(0)));
        assert_eq!(c.orientation, Orientation::Outward);
    }
    assert_eq!(r.euler_characteristic, 4);
    let v = r.enclosed_volume_mm3.unwrap();
    let sum = a.signed_volume() + b.signed_volume();
    assert!(rel(v, sum) < 1e-12);
    assert!(rel(c0.signed_volume_mm3, a.signed_volume()) < 1e-12);
    assert_eq!(codes(&r), vec!["components"]);
}

// ---- open surfaces --------------------------------------------------------

#[test]
fn disk_has_one_boundary_loop_of_the_polygon_length() {
    // chi = 1 (Massey 1991); boundary = inscribed regular 48-gon of radius 20,
    // perimeter 2 n R sin(pi / n).
    let r = run(&disk(20.0, 6, 48));
    assert_eq!(r.euler_characteristic, 1);
    let c = &r.components.listed[0];
    assert_eq!(
        (c.euler_characteristic, c.genus, c.boundary_loops),
        (1, Some(0), 1)
    );
    assert_eq!(r.boundary.loops, 1);
    let l = &r.boundary.listed[0];
    assert_eq!(l.edges, 48);
    assert!(l.closed);
    assert!(
        rel(l.length_mm, inscribed_perimeter(20.0, 48)) < 1e-12,
        "{}",
        l.length_mm
    );
    assert!(rel(r.area_mm2, 0.5 * 48.0 * 400.0 * (2.0 * PI / 48.0).sin()) < 1e-12);
    assert_eq!(r.enclosed_volume_mm3, None);
    assert_eq!(r.orientation, Orientation::Undetermined);
    assert_eq!(codes(&r), vec!["open"]);
}

#[test]
fn flipped_face_on_the_boundary_keeps_one_loop() {
    // A disk whose boundary runs through a flipped face: still one closed
    // loop of 48 edges, so chi = 1 = 2 - 2g - 1 still gives genus 0.
    let mut m = disk(20.0, 3, 48);
    // The second-last face is [ring 2 #47, ring 3 #47, ring 3 #0]: its side
    // ring 3 #47 -> #0 is on the boundary.
    let f = m.n_faces() - 2;
    assert_eq!(m.faces[f][1..], [1 + 2 * 48 + 47, 1 + 2 * 48]);
    m.faces[f].swap(1, 2);
    let r = run(&m);
    assert_eq!(r.boundary.loops, 1);
    let l = &r.boundary.listed[0];
    assert!(l.closed && l.edges == 48);
    assert!(rel(l.length_mm, inscribed_perimeter(20.0, 48)) < 1e-12);
    assert_eq!(r.components.listed[0].genus, Some(0));
    assert_eq!(codes(&r), vec!["open", "inconsistent_orientation"]);
}

#[test]
fn sphere_with_two_round_holes() {
    // A sphere of radius 40 cut at colatitudes 30 and 120 degrees: two loops,
    // chi = 2 - 2 = 0 (Massey 1991). Each loop is an inscribed 96-gon of the
    // circle of radius R sin(theta); it is shorter than the circle
    // 2 pi R sin(theta) by the relative amount 1 - sin(x)/x ~ x^2/6 with
    // x = pi/96, i.e. 1.8e-4: asserted within 3e-4.
    let (t0, t1) = (PI / 6.0, 2.0 * PI / 3.0);
    let r = run(&banded_sphere(40.0, t0, t1, 20, 96));
    assert_eq!(r.boundary.loops, 2);
    let c = &r.components.listed[0];
    assert_eq!(
        (c.euler_characteristic, c.genus, c.boundary_loops),
        (0, Some(0), 2)
    );
    let mut lengths: Vec<f64> = r.boundary.listed.iter().map(|l| l.length_mm).collect();
    lengths.sort_by(f64::total_cmp);
    for (len, t) in lengths.iter().zip([t0, t1]) {
        let circle = 2.0 * PI * 40.0 * t.sin();
        assert!(
            *len < circle && rel(*len, circle) < 3e-4,
            "{len} vs {circle}"
        );
        assert!(rel(*len, inscribed_perimeter(40.0 * t.sin(), 96)) < 1e-12);
    }
    assert!(r.boundary.listed.iter().all(|l| l.closed && l.edges == 96));
    assert!(rel(r.boundary.length_mm, lengths.iter().sum()) < 1e-14);
    assert!(!r.ready_to_map);
    assert_eq!(codes(&r), vec!["open"]);
}

#[test]
fn icosphere_with_three_holes() {
    // Remove the faces touching three vertices far apart: three holes, chi =
    // 2 - 3 = -1, genus 0 (Massey 1991).
    let mut m = icosphere(3, 1.0);
    let centres = [0u32, 3, 7]; // icosahedron vertices, 8 edges apart at level 3
    m.faces.retain(|t| !t.iter().any(|v| centres.contains(v)));
    let r = run(&m);
    assert_eq!(r.boundary.loops, 3);
    let c = &r.components.listed[0];
    assert_eq!((c.euler_characteristic, c.genus), (-1, Some(0)));
    // Each hole is the pentagon of the removed star; the unused centres are
    // reported too.
    assert!(r.boundary.listed.iter().all(|l| l.edges == 5 && l.closed));
    assert_eq!(r.unreferenced_vertices.listed, vec![0, 3, 7]);
    assert_eq!(codes(&r), vec!["open", "unreferenced_vertices"]);
}

// ---- defects --------------------------------------------------------------

/// Two tetrahedra (outward) sharing vertex 0 only.
fn bow_tie() -> TriMesh {
    let tet = |o: u32| {
        vec![
            [0, o + 2, o + 1],
            [0, o + 1, o + 3],
            [0, o + 3, o + 2],
            [o + 1, o + 2, o + 3],
        ]
    };
    let mut faces = tet(0);
    // The second tetrahedron is the first mirrored through the origin, so its
    // faces are reversed to stay outward.
    faces.extend(tet(3).into_iter().map(|t| [t[0], t[2], t[1]]));
    let pos = vec![
        [0.0, 0.0, 0.0],
        [1.0, 0.0, 0.0],
        [0.0, 1.0, 0.0],
        [0.0, 0.0, 1.0],
        [-1.0, 0.0, 0.0],
        [0.0, -1.0, 0.0],
        [0.0, 0.0, -1.0],
    ];
    TriMesh::new(pos, faces).unwrap()
}

#[test]
fn bow_tie_vertex() {
    let m = bow_tie();
    let r = run(&m);
    assert_eq!(r.non_manifold_vertices.count, 1);
    assert_eq!(r.non_manifold_vertices.listed, vec![0]);
    assert_eq!(r.non_manifold_edges.count, 0);
    assert_eq!(r.components.count, 1, "joined through the shared vertex");
    // chi = 7 - 12 + 8 = 3: not a surface, so no genus.
    let c = &r.components.listed[0];
    assert_eq!(
        (c.euler_characteristic, c.genus, c.manifold),
        (3, None, false)
    );
    assert_eq!(codes(&r), vec!["non_manifold_vertex"]);
}

#[test]
fn non_manifold_edge() {
    // Three triangles on edge 0-1; the ends of that edge are not bow-ties.
    let pos = vec![
        [0.0, 0.0, 0.0],
        [1.0, 0.0, 0.0],
        [0.5, 1.0, 0.0],
        [0.5, -1.0, 0.0],
        [0.5, 0.0, 1.0],
    ];
    let m = TriMesh::new(pos, vec![[0, 1, 2], [1, 0, 3], [0, 1, 4]]).unwrap();
    let r = run(&m);
    assert_eq!(r.non_manifold_edges.listed, vec![[0, 1]]);
    assert_eq!(r.non_manifold_vertices.count, 0);
    assert_eq!(r.edges, 7);
    assert!(r.has_reason("non_manifold_edge") && r.has_reason("open"));
    assert_eq!(r.components.listed[0].genus, None);
}

#[test]
fn flipped_face() {
    let mut m = icosphere(2, 1.0);
    let t = m.faces[7];
    m.faces[7] = [t[0], t[2], t[1]];
    let r = run(&m);
    let mut expect = [
        [t[0].min(t[1]), t[0].max(t[1])],
        [t[1].min(t[2]), t[1].max(t[2])],
        [t[0].min(t[2]), t[0].max(t[2])],
    ];
    expect.sort();
    assert_eq!(r.inconsistent_edges.listed, expect.to_vec());
    // Still orientable (flip face 7 back), still genus 0, but not oriented.
    let c = &r.components.listed[0];
    assert!(c.orientable);
    assert_eq!(c.genus, Some(0));
    assert_eq!(r.orientation, Orientation::Undetermined);
    assert_eq!(codes(&r), vec!["inconsistent_orientation"]);
}

#[test]
fn inward_sphere() {
    let m = reversed(&icosphere(2, 10.0));
    let r = run(&m);
    assert_eq!(r.orientation, Orientation::Inward);
    let v = r.enclosed_volume_mm3.unwrap();
    assert!(rel(v, -icosphere(2, 10.0).signed_volume()) < 1e-12 && v < 0.0);
    assert_eq!(codes(&r), vec!["inward"]);
}

#[test]
fn mixed_orientation_of_two_spheres() {
    let a = icosphere(1, 1.0);
    let b = reversed(&translated(&a, [5.0, 0.0, 0.0]));
    let r = run(&union(&[a, b]));
    assert_eq!(r.orientation, Orientation::Mixed);
    assert_eq!(codes(&r), vec!["components", "inward"]);
}

#[test]
fn moebius_strip_is_not_orientable() {
    // Moebius strip from 12 quads with a half twist: chi = 0, one boundary
    // curve of 24 edges (Massey 1991: non-orientable, so no genus).
    let n = 12;
    let mut pos = Vec::new();
    for i in 0..n {
        let u = 2.0 * PI * i as f64 / n as f64;
        for s in [-1.0, 1.0] {
            let w = 2.0 + s * 0.5 * (u / 2.0).cos();
            pos.push([w * u.cos(), w * u.sin(), s * 0.5 * (u / 2.0).sin()]);
        }
    }
    let mut faces = Vec::new();
    for i in 0..n as u32 {
        let (a, b) = (2 * i, 2 * i + 1);
        let (c, d) = if i + 1 < n as u32 {
            (2 * i + 2, 2 * i + 3)
        } else {
            (1, 0)
        };
        faces.push([a, c, d]);
        faces.push([a, d, b]);
    }
    let r = run(&TriMesh::new(pos, faces).unwrap());
    assert_eq!(r.euler_characteristic, 0);
    assert_eq!(r.boundary.edges, 24);
    let c = &r.components.listed[0];
    assert!(!c.orientable);
    assert_eq!(c.genus, None);
    assert!(r.has_reason("non_orientable") && r.has_reason("inconsistent_orientation"));
}

#[test]
fn duplicate_vertices_exact_and_within_tolerance() {
    // Icosahedron as a triangle soup: 60 vertices at 12 positions, so 48
    // duplicates; 20 pieces, each a disk with one 3-edge loop.
    let ico = icosphere(0, 1.0);
    let mut soup = TriMesh::default();
    for t in &ico.faces {
        let k = soup.positions.len() as u32;
        soup.positions
            .extend(t.iter().map(|&v| ico.positions[v as usize]));
        soup.faces.push([k, k + 1, k + 2]);
    }
    let r = run(&soup);
    assert_eq!(r.duplicate_vertices.count, 48);
    assert_eq!(r.components.count, 20);
    assert_eq!(r.boundary.loops, 20);
    // Vertex 0 of face 0 is icosahedron vertex 0, met again as vertex 3 (face 1).
    assert_eq!(r.duplicate_vertices.listed[0], [0, 3]);
    assert!(r.duplicate_vertices.listed.iter().all(|[j, i]| j < i));
    assert_eq!(codes(&r), vec!["components", "open", "duplicate_vertices"]);
    // Moved by up to 6e-8 mm: no longer bit-identical, but within 1e-6 mm.
    for (i, p) in soup.positions.iter_mut().enumerate() {
        p[0] += 1e-9 * i as f64;
    }
    assert_eq!(run(&soup).duplicate_vertices.count, 0);
    let opts = InspectOptions {
        duplicate_tolerance_mm: 1e-6,
        ..InspectOptions::default()
    };
    let r = inspect(&soup, &opts).unwrap();
    assert_eq!(r.duplicate_vertices.count, 48);
    assert_eq!(r.duplicate_vertices.listed[0], [0, 3]);
    // The icosahedron's own vertices (edge ~1.05) are never within 0.5.
    let opts = InspectOptions {
        duplicate_tolerance_mm: 0.5,
        ..InspectOptions::default()
    };
    assert_eq!(inspect(&soup, &opts).unwrap().duplicate_vertices.count, 48);
    // -0 and +0 are the same position.
    let m = TriMesh::new(
        vec![
            [0.0, 0.0, 0.0],
            [1.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [-0.0, 0.0, 0.0],
        ],
        vec![[0, 1, 2], [3, 2, 1]],
    )
    .unwrap();
    assert_eq!(run(&m).duplicate_vertices.listed, vec![[0, 3]]);
}

#[test]
fn degenerate_faces() {
    let mut m = icosphere(1, 1.0);
    let n = m.n_vertices() as u32;
    m.positions
        .extend([[3.0, 3.0, 3.0], [4.0, 4.0, 4.0], [5.0, 5.0, 5.0]]);
    m.faces.push([n, n + 1, n + 2]); // collinear: zero area
    m.faces.push([0, 0, 5]); // repeated index
    let r = run(&m);
    assert_eq!(r.degenerate_faces.listed, vec![80, 81]);
    assert!(r.has_reason("degenerate_faces"));
    // A sliver of relative height 1e-6 is thin, not degenerate, at the
    // default relative tolerance 1e-10; it is at 1e-5.
    let sliver = TriMesh::new(
        vec![[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.5, 1e-6, 0.0]],
        vec![[0, 1, 2]],
    )
    .unwrap();
    assert_eq!(run(&sliver).degenerate_faces.count, 0);
    let opts = InspectOptions {
        degenerate_relative_tolerance: 1e-5,
        ..InspectOptions::default()
    };
    assert_eq!(inspect(&sliver, &opts).unwrap().degenerate_faces.count, 1);
}

#[test]
fn unreferenced_vertices_and_listing_limit() {
    let mut m = icosphere(1, 1.0);
    m.positions
        .extend([[9.0, 9.0, 9.0], [8.0, 8.0, 8.0], [7.0, 7.0, 7.0]]);
    let opts = InspectOptions {
        max_listed: 2,
        ..InspectOptions::default()
    };
    let r = inspect(&m, &opts).unwrap();
    assert_eq!(r.unreferenced_vertices.count, 3);
    assert_eq!(r.unreferenced_vertices.listed, vec![42, 43]);
    assert_eq!(r.euler_characteristic, 5, "V counts unused vertices");
    assert_eq!(r.components.listed[0].euler_characteristic, 2);
    assert_eq!(codes(&r), vec!["unreferenced_vertices"]);
}

#[test]
fn invalid_mesh_is_an_error_not_a_panic() {
    let m = TriMesh {
        positions: vec![[0.0; 3]; 3],
        faces: vec![[0, 1, 3]],
    };
    assert!(inspect(&m, &InspectOptions::default()).is_err());
    let m = icosphere(0, 1.0);
    for (dup, deg) in [
        (-1.0, 1e-10),
        (f64::NAN, 1e-10),
        (0.0, -1.0),
        (0.0, f64::NAN),
    ] {
        let opts = InspectOptions {
            duplicate_tolerance_mm: dup,
            degenerate_relative_tolerance: deg,
            ..InspectOptions::default()
        };
        assert!(inspect(&m, &opts).is_err(), "{dup} {deg}");
    }
}

// ---- command line and JSON -----------------------------------------------

fn temp_dir(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("horosphere-inspect-{tag}-{}", std::process::id()));
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
fn command_line_json_text_and_status() {
    let dir = temp_dir("cli");
    let sphere = dir.join("sphere.obj");
    horosphere::io::write_mesh(&sphere, &icosphere(2, 30.0)).unwrap();
    let out = horosphere(&["inspect".as_ref(), sphere.as_os_str(), "--json".as_ref()]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let r: Inspection = serde_json::from_slice(&out.stdout).unwrap();
    assert!(r.ready_to_map);
    assert_eq!((r.vertices, r.edges, r.faces), (162, 480, 320));
    assert_eq!(
        r,
        run(&icosphere(2, 30.0)),
        "the JSON carries the whole report"
    );

    let ring = dir.join("ring.ply");
    horosphere::io::write_mesh(&ring, &torus(3.0, 1.0, 16, 8)).unwrap();
    let out = horosphere(&["inspect".as_ref(), ring.as_os_str()]);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("NOT ready to map") && text.contains("\n  genus "),
        "{text}"
    );
    let out = horosphere(&[
        "inspect".as_ref(),
        ring.as_os_str(),
        "--require-ready".as_ref(),
    ]);
    assert_eq!(out.status.code(), Some(3));

    let bad = dir.join("bad.off");
    std::fs::write(&bad, "OFF\n3 1 0\n0 0 0\n1 0 0\n0 1 0\n3 0 1 7\n").unwrap();
    let out = horosphere(&["inspect".as_ref(), bad.as_os_str()]);
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("bad.off") && err.contains("line 6"), "{err}");
    let out = horosphere(&[
        "inspect".as_ref(),
        sphere.as_os_str(),
        "--duplicate-tolerance".as_ref(),
        "-1".as_ref(),
    ]);
    assert_ne!(out.status.code(), Some(0));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn every_json_field_is_documented() {
    // docs/inspect-json.md promises every field; keep it honest.
    let doc = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/docs/inspect-json.md"))
        .unwrap();
    let mut m = bow_tie();
    m.positions.push([5.0, 5.0, 5.0]);
    let json = serde_json::to_value(run(&m)).unwrap();
    fn walk(v: &serde_json::Value, doc: &str, missing: &mut Vec<String>) {
        match v {
            serde_json::Value::Object(map) => {
                for (k, x) in map {
                    if !doc.contains(&format!("`{k}`")) {
                        missing.push(k.clone());
                    }
                    walk(x, doc, missing);
                }
            }
            serde_json::Value::Array(a) => a.iter().for_each(|x| walk(x, doc, missing)),
            _ => {}
        }
    }
    let mut missing = Vec::new();
    walk(&json, &doc, &mut missing);
    assert!(missing.is_empty(), "undocumented fields: {missing:?}");
}

#[test]
fn report_is_identical_whatever_the_thread_count() {
    let mut m = union(&[
        bow_tie(),
        translated(&torus(3.0, 1.0, 20, 10), [9.0, 0.0, 0.0]),
    ]);
    m.faces[3].swap(0, 1);
    let opts = InspectOptions {
        duplicate_tolerance_mm: 0.3,
        ..InspectOptions::default()
    };
    let json = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        let r = pool.install(|| inspect(&m, &opts).unwrap());
        serde_json::to_string(&r).unwrap()
    };
    let one = json(1);
    assert_eq!(one, json(2));
    assert_eq!(one, json(4));
}
