//! Topological and mesh defects planted on purpose, so that inspection and
//! repair have something known to find.
//!
//! In: a clean [`FoldedSurface`], a random generator and vertices to keep
//! clear of (landmarks). Out: an edited mesh, for each of its vertices the
//! vertex of the clean surface it copies (`None` for new vertices), and a
//! record of what was planted. Invariants: exactly the planted defect is
//! added and nothing else; the edited mesh stays free of self-intersections
//! (checked with the triangle test of Moeller 1997, see
//! [`crate::mesh::intersect`]); everything is deterministic.
//!
//! The four kinds and what they do to the topology (`V - E + F = 2 - 2g - b`
//! per piece; Massey, "A basic course in algebraic topology", 1991):
//!
//! - hole: the faces around a vertex and its neighbours are removed (and
//!   the vertices left without faces): one boundary loop, `chi = 1`;
//! - handle: one triangle on each of two facing walls of a sulcus is
//!   removed and the two triangular openings are joined by a tube of three
//!   quads (six triangles) across the sulcus: closed, `chi = 0`, genus 1;
//! - stray component: a small closed blob (an icosahedral sphere) a few mm
//!   outside the surface: two pieces, each `chi = 2`;
//! - duplicated vertices: the interior vertices of a path of edges are
//!   duplicated and the faces on one side of the path moved to the copies,
//!   as when a mesh is split along a seam: coincident vertex pairs and one
//!   slit-shaped boundary loop, `chi = 1`.

use super::rng::Rng;
use super::sphere::unit;
use super::surface::{FoldField, FoldedSurface};
use crate::error::{Error, Result};
use crate::mesh::intersect::faces_hitting;
use crate::mesh::shapes::icosphere;
use crate::mesh::{add, dist, dot, norm, scale, sub, TriMesh, Vec3};
use serde::Serialize;

/// Kind of a planted defect.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum DefectKind {
    Hole,
    Handle,
    StrayComponent,
    DuplicateVertices,
}

impl DefectKind {
    /// The kind's name as written in the ground truth.
    pub fn label(self) -> &'static str {
        match self {
            DefectKind::Hole => "hole",
            DefectKind::Handle => "handle",
            DefectKind::StrayComponent => "stray-component",
            DefectKind::DuplicateVertices => "duplicate-vertices",
        }
    }

    /// All kinds, in the order the cohort plants them.
    pub const ALL: [DefectKind; 4] = [
        DefectKind::Hole,
        DefectKind::Handle,
        DefectKind::StrayComponent,
        DefectKind::DuplicateVertices,
    ];
}

/// What was planted, where, and what it changed.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DefectRecord {
    pub kind: DefectKind,
    /// A world point (mm) at the defect.
    pub at: Vec3,
    /// Faces removed from the clean surface.
    pub faces_removed: usize,
    /// Faces added.
    pub faces_added: usize,
    /// Vertices removed (left without faces).
    pub vertices_removed: usize,
    /// Vertices added.
    pub vertices_added: usize,
    /// Expected boundary loops after the edit.
    pub boundary_loops: usize,
    /// Expected connected pieces after the edit.
    pub components: usize,
    /// Expected genus of the main piece (closed pieces only).
    pub genus: usize,
    /// Pairs of distinct vertices at the same position.
    pub duplicate_pairs: usize,
}

/// An edited mesh and, per vertex, the clean-surface vertex it copies.
#[derive(Debug, Clone)]
pub struct Edited {
    pub mesh: TriMesh,
    pub source: Vec<Option<u32>>,
    pub record: DefectRecord,
}

/// Plant one defect of `kind`. Vertices in `avoid` (and their surroundings,
/// 12 mm) are kept clear.
pub fn plant(
    surface: &FoldedSurface,
    kind: DefectKind,
    rng: &mut Rng,
    avoid: &[u32],
) -> Result<Edited> {
    match kind {
        DefectKind::Hole => hole(surface, rng, avoid),
        DefectKind::Handle => handle(surface, rng, avoid),
        DefectKind::StrayComponent => stray(surface, rng, avoid),
        DefectKind::DuplicateVertices => seam(surface, rng, avoid),
    }
}

fn no_site(kind: &str) -> Error {
    Error::Algorithm {
        stage: "synth",
        message: format!("found no place for the planted {kind}; try another seed"),
    }
}

/// Vertices in random order that lie on the folded part, away from `avoid`.
fn candidate_vertices(surface: &FoldedSurface, rng: &mut Rng, avoid: &[u32]) -> Vec<u32> {
    let p = &surface.mesh.positions;
    let keep_out: Vec<Vec3> = avoid
        .iter()
        .filter_map(|&v| p.get(v as usize).copied())
        .collect();
    let mut order: Vec<u32> = (0..p.len() as u32)
        .filter(|&v| {
            FoldField::fold_weight(surface.directions[v as usize]) >= 1.0
                && keep_out.iter().all(|q| dist(*q, p[v as usize]) > 12.0)
        })
        .collect();
    rng.shuffle(&mut order);
    order
}

/// Faces incident to each vertex.
fn vertex_faces(mesh: &TriMesh) -> Vec<Vec<u32>> {
    let mut vf = vec![Vec::new(); mesh.n_vertices()];
    for (f, t) in mesh.faces.iter().enumerate() {
        for &v in t {
            vf[v as usize].push(f as u32);
        }
    }
    vf
}

/// Drop the faces marked in `remove`, then the vertices left without faces.
fn remove_faces(mesh: &TriMesh, remove: &[bool]) -> (TriMesh, Vec<Option<u32>>) {
    let faces: Vec<[u32; 3]> = mesh
        .faces
        .iter()
        .zip(remove)
        .filter(|(_, &r)| !r)
        .map(|(t, _)| *t)
        .collect();
    let mut used = vec![false; mesh.n_vertices()];
    for t in &faces {
        for &v in t {
            used[v as usize] = true;
        }
    }
    let mut new_id = vec![u32::MAX; mesh.n_vertices()];
    let mut positions = Vec::with_capacity(mesh.n_vertices());
    let mut source = Vec::with_capacity(mesh.n_vertices());
    for (v, &u) in used.iter().enumerate() {
        if u {
            new_id[v] = positions.len() as u32;
            positions.push(mesh.positions[v]);
            source.push(Some(v as u32));
        }
    }
    let faces = faces
        .iter()
        .map(|t| t.map(|v| new_id[v as usize]))
        .collect();
    (TriMesh { positions, faces }, source)
}

fn hole(surface: &FoldedSurface, rng: &mut Rng, avoid: &[u32]) -> Result<Edited> {
    let mesh = &surface.mesh;
    let vf = vertex_faces(mesh);
    let v = *candidate_vertices(surface, rng, avoid)
        .first()
        .ok_or_else(|| no_site("hole"))?;
    // The closed one-ring of v, then every face touching it.
    let mut ring: Vec<u32> = vec![v];
    for &f in &vf[v as usize] {
        ring.extend(mesh.faces[f as usize]);
    }
    ring.sort_unstable();
    ring.dedup();
    let mut remove = vec![false; mesh.n_faces()];
    for &w in &ring {
        for &f in &vf[w as usize] {
            remove[f as usize] = true;
        }
    }
    let faces_removed = remove.iter().filter(|&&r| r).count();
    let (out, source) = remove_faces(mesh, &remove);
    let record = DefectRecord {
        kind: DefectKind::Hole,
        at: mesh.positions[v as usize],
        faces_removed,
        faces_added: 0,
        vertices_removed: mesh.n_vertices() - out.n_vertices(),
        vertices_added: 0,
        boundary_loops: 1,
        components: 1,
        genus: 0,
        duplicate_pairs: 0,
    };
    Ok(Edited {
        mesh: out,
        source,
        record,
    })
}

/// Unit normal of face `f`.
fn face_normal(mesh: &TriMesh, f: usize) -> Vec3 {
    let c = mesh.face_cross(f);
    let n = norm(c);
    if n > 0.0 {
        scale(c, 1.0 / n)
    } else {
        [0.0; 3]
    }
}

fn centroid(c: &[Vec3; 3]) -> Vec3 {
    scale(add(add(c[0], c[1]), c[2]), 1.0 / 3.0)
}

/// Whether the open segment from `a` to `b` runs outside the surface
/// (above the radius function everywhere, with a margin in mm).
fn segment_in_air(surface: &FoldedSurface, a: Vec3, b: Vec3, margin: f64) -> bool {
    (1..16).all(|i| {
        let p = add(a, scale(sub(b, a), i as f64 / 16.0));
        let u = surface.canonical_direction(p);
        dist(p, surface.centre) > surface.field.radius(u) + margin
    })
}

fn handle(surface: &FoldedSurface, rng: &mut Rng, avoid: &[u32]) -> Result<Edited> {
    let mesh = &surface.mesh;
    let vf = vertex_faces(mesh);
    let centroids: Vec<Vec3> = (0..mesh.n_faces())
        .map(|f| centroid(&mesh.corners(f)))
        .collect();
    let candidates = candidate_vertices(surface, rng, avoid);
    // Mean edge length of a near-equilateral mesh of this area and size.
    let h = (4.0 * mesh.area() / (3f64.sqrt() * mesh.n_faces().max(1) as f64)).sqrt();
    let (near, far) = ((1.5 * h).max(2.0), 8.0 + 2.0 * h);
    let mut tried = 0;
    for &a in &candidates {
        if tried == 300 {
            break;
        }
        // On a sulcal wall: part-way down.
        let d = surface.depth[a as usize];
        if !(3.0..=12.0).contains(&d) {
            continue;
        }
        let Some(&fa) = vf[a as usize].first() else {
            continue;
        };
        tried += 1;
        let (fa, ca, na) = (
            fa as usize,
            centroids[fa as usize],
            face_normal(mesh, fa as usize),
        );
        // A facing face across the sulcus, nearest first.
        let mut across: Vec<(f64, usize)> = centroids
            .iter()
            .enumerate()
            .filter_map(|(g, cg)| {
                let r = dist(*cg, ca);
                if !(near..=far).contains(&r) {
                    return None;
                }
                let dir = scale(sub(*cg, ca), 1.0 / r);
                let ng = face_normal(mesh, g);
                (dot(na, dir) > 0.5 && dot(ng, dir) < -0.5).then_some((r, g))
            })
            .collect();
        across.sort_by(|x, y| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1)));
        for &(_, fb) in across.iter().take(5) {
            if !segment_in_air(surface, ca, centroids[fb], 0.2) {
                continue;
            }
            if let Some(edited) = build_tube(surface, &vf, fa, fb) {
                return Ok(edited);
            }
        }
    }
    Err(no_site("handle"))
}

/// The faces around each corner of `t`, as (corner, faces).
fn ta_faces<'a>(vf: &'a [Vec<u32>], t: &[u32; 3]) -> Vec<(u32, &'a [u32])> {
    t.iter()
        .filter_map(|&v| vf.get(v as usize).map(|f| (v, f.as_slice())))
        .collect()
}

/// Remove faces `fa` and `fb` and join their openings by three quads;
/// `None` if the tube would cross the surface.
fn build_tube(surface: &FoldedSurface, vf: &[Vec<u32>], fa: usize, fb: usize) -> Option<Edited> {
    let mesh = &surface.mesh;
    let vf = ta_faces(vf, &mesh.faces[fa]);
    let (ta, tb) = (mesh.faces[fa], mesh.faces[fb]);
    if ta.iter().any(|v| tb.contains(v)) {
        return None;
    }
    // No edge may join the two openings already (the tube's edges would
    // then be non-manifold).
    let adjacent = vf.iter().any(|(_, faces)| {
        faces
            .iter()
            .any(|&f| mesh.faces[f as usize].iter().any(|v| tb.contains(v)))
    });
    if adjacent {
        return None;
    }
    // Pair a_i with b_m(i), m(i + 1) = m(i) - 1 (the openings face each
    // other); pick the offset with the shortest connecting edges.
    let p = &mesh.positions;
    let best = (0..3)
        .map(|o| {
            let len: f64 = (0..3)
                .map(|i| dist(p[ta[i] as usize], p[tb[(o + 3 - i) % 3] as usize]))
                .sum();
            (len, o)
        })
        .min_by(|x, y| x.0.total_cmp(&y.0))?
        .1;
    let m = |i: usize| tb[(best + 3 - (i % 3)) % 3];
    let mut added = Vec::with_capacity(6);
    for i in 0..3 {
        let (a0, a1) = (ta[i], ta[(i + 1) % 3]);
        // Edge a0 -> a1 was in fa; the tube uses it in the same direction,
        // and the b-side edge b_m(i+1) -> b_m(i) likewise as in fb.
        let (bk, bk1) = (m(i + 1), m(i));
        added.push([a0, a1, bk]);
        added.push([a0, bk, bk1]);
    }
    let mut out = mesh.clone();
    let (lo, hi) = (fa.min(fb), fa.max(fb));
    out.faces.remove(hi);
    out.faces.remove(lo);
    for t in &added {
        let tri = t.map(|v| p[v as usize]);
        if !faces_hitting(&out, &tri, t).is_empty() {
            return None;
        }
    }
    // Tube faces against each other (those sharing no vertex).
    for (i, s) in added.iter().enumerate() {
        for t in &added[i + 1..] {
            if !s.iter().any(|v| t.contains(v))
                && crate::mesh::intersect::triangles_intersect(
                    &s.map(|v| p[v as usize]),
                    &t.map(|v| p[v as usize]),
                )
            {
                return None;
            }
        }
    }
    out.faces.extend(added);
    let source = (0..mesh.n_vertices() as u32).map(Some).collect();
    let at = scale(
        add(centroid(&mesh.corners(fa)), centroid(&mesh.corners(fb))),
        0.5,
    );
    Some(Edited {
        mesh: out,
        source,
        record: DefectRecord {
            kind: DefectKind::Handle,
            at,
            faces_removed: 2,
            faces_added: 6,
            vertices_removed: 0,
            vertices_added: 0,
            boundary_loops: 0,
            components: 1,
            genus: 1,
            duplicate_pairs: 0,
        },
    })
}

fn stray(surface: &FoldedSurface, rng: &mut Rng, avoid: &[u32]) -> Result<Edited> {
    let mesh = &surface.mesh;
    let blob_radius = 2.0;
    let longest = mesh
        .faces
        .iter()
        .flat_map(|t| (0..3).map(move |k| (t[k], t[(k + 1) % 3])))
        .map(|(a, b)| dist(mesh.positions[a as usize], mesh.positions[b as usize]))
        .fold(0.0, f64::max);
    for &v in candidate_vertices(surface, rng, avoid).iter().take(50) {
        let u = surface.directions[v as usize];
        let r = surface.field.envelope(u) + blob_radius + 3.0;
        let c = surface.world_point(u, r);
        let blob = icosphere(2, blob_radius);
        let off = mesh.n_vertices() as u32;
        let mut out = mesh.clone();
        out.positions
            .extend(blob.positions.iter().map(|q| add(c, *q)));
        let faces: Vec<[u32; 3]> = blob.faces.iter().map(|t| t.map(|i| i + off)).collect();
        // Only faces with a corner within the blob's radius plus the longest
        // edge of the mesh can touch it.
        let reach = blob_radius + longest;
        let near = TriMesh {
            positions: mesh.positions.clone(),
            faces: mesh
                .faces
                .iter()
                .filter(|t| {
                    t.iter()
                        .any(|&v| dist(mesh.positions[v as usize], c) <= reach)
                })
                .copied()
                .collect(),
        };
        let clean = faces.iter().all(|t| {
            let tri = t.map(|i| out.positions[i as usize]);
            faces_hitting(&near, &tri, &[u32::MAX; 3]).is_empty()
        });
        if !clean {
            continue;
        }
        out.faces.extend(faces);
        let mut source: Vec<Option<u32>> = (0..off).map(Some).collect();
        source.extend(std::iter::repeat_n(None, blob.n_vertices()));
        return Ok(Edited {
            mesh: out,
            source,
            record: DefectRecord {
                kind: DefectKind::StrayComponent,
                at: c,
                faces_removed: 0,
                faces_added: blob.n_faces(),
                vertices_removed: 0,
                vertices_added: blob.n_vertices(),
                boundary_loops: 0,
                components: 2,
                genus: 0,
                duplicate_pairs: 0,
            },
        });
    }
    Err(no_site("stray component"))
}

/// Number of edges in the duplicated seam.
const SEAM_EDGES: usize = 8;

fn seam(surface: &FoldedSurface, rng: &mut Rng, avoid: &[u32]) -> Result<Edited> {
    let mesh = &surface.mesh;
    let vf = vertex_faces(mesh);
    let p = &mesh.positions;
    for &v0 in candidate_vertices(surface, rng, avoid).iter().take(50) {
        // Walk greedily along a random tangent direction.
        let n = unit(sub(p[v0 as usize], surface.centre));
        let g = rng.unit_vector();
        let t = sub(g, scale(n, dot(g, n)));
        if norm(t) < 1e-6 {
            continue;
        }
        let t = unit(t);
        let mut path = vec![v0];
        while path.len() <= SEAM_EDGES {
            let Some(&cur) = path.last() else { break };
            let mut best: Option<(f64, u32)> = None;
            for &f in &vf[cur as usize] {
                for &w in &mesh.faces[f as usize] {
                    if path.contains(&w) {
                        continue;
                    }
                    let e = sub(p[w as usize], p[cur as usize]);
                    let s = dot(e, t) / norm(e).max(1e-12);
                    if best.is_none_or(|(b, bw)| s > b || (s == b && w < bw)) {
                        best = Some((s, w));
                    }
                }
            }
            match best {
                Some((s, w)) if s > 0.3 => path.push(w),
                _ => break,
            }
        }
        if path.len() != SEAM_EDGES + 1 {
            continue;
        }
        // Path vertices must not be joined by edges other than the path's
        // own (a chord would turn the slit into something else).
        let on_path = |w: u32| path.iter().position(|&x| x == w);
        let mut chord = false;
        for (k, &w) in path.iter().enumerate() {
            for &f in &vf[w as usize] {
                for &x in &mesh.faces[f as usize] {
                    if let Some(j) = on_path(x) {
                        if j.abs_diff(k) > 1 {
                            chord = true;
                        }
                    }
                }
            }
        }
        if chord {
            continue;
        }
        let mut out = mesh.clone();
        let mut source: Vec<Option<u32>> = (0..mesh.n_vertices() as u32).map(Some).collect();
        let mut ok = true;
        for k in 1..SEAM_EDGES {
            let (prev, v, next) = (path[k - 1], path[k], path[k + 1]);
            let Some(side) = fan_between(&mesh.faces, &vf[v as usize], v, prev, next) else {
                ok = false;
                break;
            };
            let copy = out.positions.len() as u32;
            out.positions.push(p[v as usize]);
            source.push(Some(v));
            for f in side {
                for x in out.faces[f as usize].iter_mut() {
                    if *x == v {
                        *x = copy;
                    }
                }
            }
        }
        if !ok {
            continue;
        }
        return Ok(Edited {
            mesh: out,
            source,
            record: DefectRecord {
                kind: DefectKind::DuplicateVertices,
                at: p[path[SEAM_EDGES / 2] as usize],
                faces_removed: 0,
                faces_added: 0,
                vertices_removed: 0,
                vertices_added: SEAM_EDGES - 1,
                boundary_loops: 1,
                components: 1,
                genus: 0,
                duplicate_pairs: SEAM_EDGES - 1,
            },
        });
    }
    Err(no_site("duplicated seam"))
}

/// The faces around `v` met when turning counter-clockwise from the edge
/// `v -> prev` to the edge `v -> next` (one side of a path through `v`).
fn fan_between(
    faces: &[[u32; 3]],
    around: &[u32],
    v: u32,
    prev: u32,
    next: u32,
) -> Option<Vec<u32>> {
    // Each face as (a, b): v, a, b counter-clockwise.
    let wedge = |f: u32| -> Option<(u32, u32)> {
        let t = faces.get(f as usize)?;
        let k = t.iter().position(|&x| x == v)?;
        Some((t[(k + 1) % 3], t[(k + 2) % 3]))
    };
    let mut out = Vec::new();
    let mut from = prev;
    for _ in 0..around.len() {
        let f = *around
            .iter()
            .find(|&&f| wedge(f).map(|w| w.0) == Some(from))?;
        out.push(f);
        let (_, b) = wedge(f)?;
        if b == next {
            return Some(out);
        }
        from = b;
    }
    None
}
