//! Inspection: what a surface mesh is, topologically and geometrically, and
//! whether the mapper can take it.
//!
//! In: a validated [`TriMesh`] and [`InspectOptions`]. Out: an
//! [`Inspection`], a plain serialisable report (its JSON form is documented,
//! field by field, in `docs/inspect-json.md`), and a text rendering of it
//! ([`render_text`]). Nothing here changes the mesh.
//!
//! What is measured, per mesh and per connected component (faces connected
//! through shared vertices):
//! - counts `V`, `E`, `F` and the Euler characteristic `chi = V - E + F`;
//!   for a compact orientable surface with `b` boundary loops
//!   `chi = 2 - 2g - b`, which gives the genus `g` (Massey, "A basic course in
//!   algebraic topology", Springer GTM 127, 1991). The genus is reported only
//!   for components that are manifold and orientable, where the formula holds;
//! - boundary loops (edges with one face), with their edge count and length;
//! - non-manifold edges (more than two faces) and non-manifold vertices
//!   (the faces around the vertex, joined across the edges they share, form
//!   more than one fan: a "bow-tie"; found with a union-find over face
//!   corners, O(F));
//! - degenerate faces: a repeated vertex index, or `|(b - a) x (c - a)| <=
//!   tol * L^2` with `L` the longest side, i.e. the height over the longest
//!   side is at most `tol * L` (default `tol = 1e-10`, a relative tolerance
//!   so that the test does not depend on the unit or size of the mesh);
//! - duplicate vertex positions (bit-exact after folding -0 into +0, or
//!   within a distance with spatial hashing on a grid of that cell size);
//! - unreferenced vertices;
//! - inconsistently oriented edges: two faces traversing an edge in the same
//!   direction; orientability per component (a parity union-find over faces
//!   across manifold edges);
//! - orientation: for each closed, manifold, consistently oriented component
//!   the sign of its enclosed volume (divergence theorem) says outward
//!   (positive) or inward (negative); otherwise it is undetermined;
//! - surface area, enclosed volume, bounding box.
//!
//! The verdict `ready_to_map` holds when the mesh is one closed, manifold,
//! consistently and outward oriented genus-0 component with no degenerate
//! faces, duplicate or unreferenced vertices; otherwise every failed
//! condition is a [`Reason`] with a stable code.
//!
//! Cost: one sort of the `3F` face sides (in [`EdgeTable::new`]), a sort of
//! the `V` positions, and near-linear union-find passes; no hash map per edge.
//! Output is deterministic (no dependence on thread count or hashing).
//!
//! Hook for handle detection (a later stage): [`ComponentInfo::genus`] tells
//! how many handles each component has.

use crate::error::Result;
use crate::mesh::topology::{face_components, EdgeTable, UnionFind};
use crate::mesh::{cross, dot, norm, sub, TriMesh, Vec3};
use serde::{Deserialize, Serialize};

/// Version of the report layout; see `docs/inspect-json.md`.
pub const SCHEMA_VERSION: u32 = 1;

/// How many vertex indices of each boundary loop are listed.
pub const LOOP_VERTICES_LISTED: usize = 8;

/// Tolerances and limits of an inspection.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct InspectOptions {
    /// Two vertices closer than this (mm) are duplicates; `0` means
    /// bit-identical positions only.
    pub duplicate_tolerance_mm: f64,
    /// A face is degenerate when twice its area is at most this times the
    /// square of its longest side (see the module documentation).
    pub degenerate_relative_tolerance: f64,
    /// At most this many entries are listed per finding (counts are always
    /// complete).
    pub max_listed: usize,
}

impl Default for InspectOptions {
    fn default() -> Self {
        InspectOptions {
            duplicate_tolerance_mm: 0.0,
            degenerate_relative_tolerance: 1e-10,
            max_listed: 20,
        }
    }
}

/// A count with the first entries (in increasing order) listed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Listing<T> {
    /// How many there are.
    pub count: usize,
    /// The first `min(count, max_listed)` of them.
    pub listed: Vec<T>,
}

impl<T> Listing<T> {
    fn from_iter(items: impl Iterator<Item = T>, max: usize) -> Self {
        let mut count = 0;
        let mut listed = Vec::new();
        for x in items {
            if count < max {
                listed.push(x);
            }
            count += 1;
        }
        Listing { count, listed }
    }
}

/// Orientation of a component or of the whole mesh.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Orientation {
    /// Enclosed volume positive: normals point out.
    Outward,
    /// Enclosed volume negative: normals point in.
    Inward,
    /// Components disagree (mesh level only).
    Mixed,
    /// Not closed, not manifold, not consistently oriented, or zero volume.
    Undetermined,
}

/// One connected component.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ComponentInfo {
    /// Rank by decreasing face count (0 = largest).
    pub index: usize,
    /// Vertices used by its faces.
    pub vertices: usize,
    pub edges: usize,
    pub faces: usize,
    /// `V - E + F` of the component.
    pub euler_characteristic: i64,
    /// Boundary loops on the component.
    pub boundary_loops: usize,
    /// No boundary edge.
    pub closed: bool,
    /// No non-manifold edge or vertex.
    pub manifold: bool,
    /// The faces can be oriented consistently (checked across manifold edges).
    pub orientable: bool,
    /// `(2 - chi - b) / 2` when manifold and orientable, else `None`.
    pub genus: Option<u32>,
    pub area_mm2: f64,
    /// Signed volume (mm^3, divergence theorem); meaningful when closed.
    pub signed_volume_mm3: f64,
    pub orientation: Orientation,
}

/// One boundary loop.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LoopInfo {
    /// Component the loop lies on.
    pub component: usize,
    /// Number of boundary edges in the loop.
    pub edges: usize,
    /// Sum of the edge lengths (mm).
    pub length_mm: f64,
    /// False when the walk could not return to its start (a boundary broken
    /// by inconsistent orientation or non-manifold vertices).
    pub closed: bool,
    /// The first vertices along the loop, in the faces' own direction.
    pub vertices: Vec<u32>,
}

/// All boundary loops.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BoundaryInfo {
    /// Number of loops.
    pub loops: usize,
    /// Number of boundary edges.
    pub edges: usize,
    /// Total boundary length (mm).
    pub length_mm: f64,
    /// Loops by decreasing edge count (at most `max_listed`).
    pub listed: Vec<LoopInfo>,
}

/// Axis-aligned bounding box (mm).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BoundingBox {
    pub min: [f64; 3],
    pub max: [f64; 3],
}

/// Why a mesh is not ready to map: a stable code and a sentence.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Reason {
    pub code: String,
    pub message: String,
}

/// Tolerances the report was made with.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    pub duplicate_tolerance_mm: f64,
    pub degenerate_relative_tolerance: f64,
    pub max_listed: usize,
}

/// The inspection report (JSON layout: `docs/inspect-json.md`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Inspection {
    pub schema_version: u32,
    pub vertices: usize,
    pub edges: usize,
    pub faces: usize,
    /// `V - E + F` of the whole mesh (unreferenced vertices count in `V`).
    pub euler_characteristic: i64,
    /// Components, largest first.
    pub components: Listing<ComponentInfo>,
    pub boundary: BoundaryInfo,
    /// Edges `[a, b]` (`a < b`) with more than two faces.
    pub non_manifold_edges: Listing<[u32; 2]>,
    /// Vertices whose faces form more than one fan.
    pub non_manifold_vertices: Listing<u32>,
    /// Faces with a repeated index or (relatively) zero area.
    pub degenerate_faces: Listing<u32>,
    /// Pairs `[j, i]`, `j < i`: vertex `i` duplicates the lowest-numbered
    /// vertex `j` at its position (within the tolerance).
    pub duplicate_vertices: Listing<[u32; 2]>,
    /// Vertices used by no face.
    pub unreferenced_vertices: Listing<u32>,
    /// Edges `[a, b]` (`a < b`) whose two faces traverse them the same way.
    pub inconsistent_edges: Listing<[u32; 2]>,
    pub orientation: Orientation,
    pub area_mm2: f64,
    /// Signed enclosed volume when every component is closed, else `None`.
    pub enclosed_volume_mm3: Option<f64>,
    pub bounding_box: BoundingBox,
    pub ready_to_map: bool,
    pub reasons: Vec<Reason>,
    pub settings: Settings,
}

impl Inspection {
    /// True when a reason with this code is present.
    pub fn has_reason(&self, code: &str) -> bool {
        self.reasons.iter().any(|r| r.code == code)
    }
}

/// Union-find over faces that also keeps the relative orientation parity of
/// each face to its root (0: same orientation, 1: flipped).
struct ParityUnionFind {
    parent: Vec<u32>,
    parity: Vec<u8>,
    size: Vec<u32>,
}

impl ParityUnionFind {
    fn new(n: usize) -> Self {
        ParityUnionFind {
            parent: (0..n as u32).collect(),
            parity: vec![0; n],
            size: vec![1; n],
        }
    }

    /// Root of `x` and parity of `x` relative to it (with path compression).
    fn find(&mut self, x: u32) -> (u32, u8) {
        let mut r = x;
        let mut p = 0u8;
        while self.parent[r as usize] != r {
            p ^= self.parity[r as usize];
            r = self.parent[r as usize];
        }
        // Second pass: point every node on the path at the root.
        let mut v = x;
        let mut pv = p;
        while v != r {
            let next = self.parent[v as usize];
            let step = self.parity[v as usize];
            self.parent[v as usize] = r;
            self.parity[v as usize] = pv;
            pv ^= step;
            v = next;
        }
        (r, p)
    }

    /// Require `parity(a) ^ parity(b) == rel`; false on a contradiction.
    fn union(&mut self, a: u32, b: u32, rel: u8) -> bool {
        let (ra, pa) = self.find(a);
        let (rb, pb) = self.find(b);
        if ra == rb {
            return pa ^ pb == rel;
        }
        let (big, small) = if self.size[ra as usize] >= self.size[rb as usize] {
            (ra, rb)
        } else {
            (rb, ra)
        };
        self.parent[small as usize] = big;
        self.parity[small as usize] = pa ^ pb ^ rel;
        self.size[big as usize] += self.size[small as usize];
        true
    }
}

/// Corner of face `f` at the start (`end = false`) or end of side `slot`.
#[inline]
fn corner(f: u32, slot: u8, end: bool) -> u32 {
    3 * f
        + if end {
            (slot as u32 + 1) % 3
        } else {
            slot as u32
        }
}

/// Directed boundary walks: `(vertices, edges as (a, b), closed)`.
struct Walk {
    sides: Vec<(u32, u32)>,
    closed: bool,
    face: u32,
}

fn boundary_walks(mesh: &TriMesh, table: &EdgeTable) -> Vec<Walk> {
    // Directed boundary sides a -> b as their face traverses them, with the face.
    let mut out: Vec<(u32, u32, u32)> = Vec::new();
    for e in 0..table.len() {
        if table.valence(e) == 1 {
            let inc = table.faces_of(e)[0];
            let t = mesh.faces[inc.face as usize];
            let s = inc.slot as usize;
            out.push((t[s], t[(s + 1) % 3], inc.face));
        }
    }
    out.sort_unstable();
    let mut used = vec![false; out.len()];
    let mut walks = Vec::new();
    for start in 0..out.len() {
        if used[start] {
            continue;
        }
        let mut sides = Vec::new();
        let mut cur = start;
        let (first, _, face) = out[start];
        let closed = loop {
            used[cur] = true;
            let (a, b, _) = out[cur];
            sides.push((a, b));
            if b == first {
                break true;
            }
            let mut k = out.partition_point(|&(x, _, _)| x < b);
            let mut found = None;
            while k < out.len() && out[k].0 == b {
                if !used[k] {
                    found = Some(k);
                    break;
                }
                k += 1;
            }
            match found {
                Some(k) => cur = k,
                None => break false,
            }
        };
        walks.push(Walk {
            sides,
            closed,
            face,
        });
    }
    walks
}

/// Position key for exact duplicate search: bit patterns with -0 folded to +0.
#[inline]
fn exact_key(p: &Vec3) -> [u64; 3] {
    let k = |x: f64| if x == 0.0 { 0u64 } else { x.to_bits() };
    [k(p[0]), k(p[1]), k(p[2])]
}

/// For each vertex `i` that has a lower-numbered vertex within `tol` of it,
/// the pair `[j, i]` with the lowest such `j`, in increasing `i`.
fn duplicate_pairs(positions: &[Vec3], tol: f64) -> Vec<[u32; 2]> {
    let n = positions.len();
    let mut order: Vec<u32> = (0..n as u32).collect();
    let mut pairs = Vec::new();
    if tol <= 0.0 || !tol.is_finite() {
        let keys: Vec<[u64; 3]> = positions.iter().map(exact_key).collect();
        order.sort_unstable_by_key(|&i| (keys[i as usize], i));
        let mut k = 0;
        while k < n {
            let mut m = k + 1;
            while m < n && keys[order[m] as usize] == keys[order[k] as usize] {
                pairs.push([order[k], order[m]]);
                m += 1;
            }
            k = m;
        }
    } else {
        let cell_of = |p: &Vec3| -> [i64; 3] {
            [
                (p[0] / tol).floor() as i64,
                (p[1] / tol).floor() as i64,
                (p[2] / tol).floor() as i64,
            ]
        };
        let cells: Vec<[i64; 3]> = positions.iter().map(cell_of).collect();
        order.sort_unstable_by_key(|&i| (cells[i as usize], i));
        let tol2 = tol * tol;
        for i in 0..n {
            let c = cells[i];
            let mut best: Option<u32> = None;
            for dx in -1i64..=1 {
                for dy in -1i64..=1 {
                    for dz in -1i64..=1 {
                        let q = [
                            c[0].saturating_add(dx),
                            c[1].saturating_add(dy),
                            c[2].saturating_add(dz),
                        ];
                        let lo = order.partition_point(|&j| cells[j as usize] < q);
                        for &j in order[lo..].iter().take_while(|&&j| cells[j as usize] == q) {
                            if (j as usize) >= i {
                                break; // sorted by index within a cell
                            }
                            let d = sub(positions[i], positions[j as usize]);
                            if dot(d, d) <= tol2 && best.is_none_or(|b| j < b) {
                                best = Some(j);
                            }
                        }
                    }
                }
            }
            if let Some(j) = best {
                pairs.push([j, i as u32]);
            }
        }
    }
    pairs.sort_unstable_by_key(|p| p[1]);
    pairs
}

/// Inspect `mesh`. The mesh is validated first (indices in range, finite
/// coordinates, not empty); an invalid mesh gives [`crate::Error::Invalid`].
pub fn inspect(mesh: &TriMesh, opts: &InspectOptions) -> Result<Inspection> {
    mesh.validate()?;
    let nv = mesh.n_vertices();
    let nf = mesh.n_faces();
    let table = EdgeTable::new(mesh);
    let ne = table.len();
    let (face_comp, ncomp) = face_components(mesh);

    // Per-vertex component; unreferenced vertices keep u32::MAX.
    let mut vertex_comp = vec![u32::MAX; nv];
    for (t, &c) in mesh.faces.iter().zip(&face_comp) {
        for &v in t {
            vertex_comp[v as usize] = c;
        }
    }

    // Edges: classification, orientability and corner fans.
    let mut parity = ParityUnionFind::new(nf);
    let mut comp_orientable = vec![true; ncomp];
    let mut corners = UnionFind::new(3 * nf);
    let mut non_manifold_edges = Vec::new();
    let mut inconsistent_edges = Vec::new();
    let mut comp_edges = vec![0usize; ncomp];
    let mut comp_nm = vec![false; ncomp];
    let mut comp_inconsistent = vec![false; ncomp];
    let mut boundary_edges = 0usize;
    for e in 0..ne {
        let inc = table.faces_of(e);
        let [a, _] = table.edges[e];
        let c = face_comp[inc[0].face as usize] as usize;
        comp_edges[c] += 1;
        let forward = |i: &crate::mesh::topology::Incidence| {
            mesh.faces[i.face as usize][i.slot as usize] == a
        };
        match inc.len() {
            1 => boundary_edges += 1,
            2 => {
                let same = forward(&inc[0]) == forward(&inc[1]);
                if same {
                    inconsistent_edges.push(table.edges[e]);
                    comp_inconsistent[c] = true;
                }
                if !parity.union(inc[0].face, inc[1].face, u8::from(same)) {
                    comp_orientable[c] = false;
                }
            }
            _ => {
                non_manifold_edges.push(table.edges[e]);
                comp_nm[c] = true;
            }
        }
        // Join the corners at both ends across this edge, whatever its valence.
        let first = inc[0];
        let fa = forward(&first);
        for other in &inc[1..] {
            let fo = forward(other);
            // Corner at `a` is the side's start when it runs a -> b.
            corners.union(
                corner(first.face, first.slot, !fa),
                corner(other.face, other.slot, !fo),
            );
            corners.union(
                corner(first.face, first.slot, fa),
                corner(other.face, other.slot, fo),
            );
        }
    }
    // A face with a repeated index touches its vertex once.
    for (f, t) in mesh.faces.iter().enumerate() {
        let f = f as u32;
        for (i, j) in [(0, 1), (1, 2), (0, 2)] {
            if t[i] == t[j] {
                corners.union(3 * f + i as u32, 3 * f + j as u32);
            }
        }
    }
    let mut fans = vec![0u32; nv];
    for c in 0..3 * nf as u32 {
        if corners.find(c) == c {
            let v = mesh.faces[(c / 3) as usize][(c % 3) as usize];
            fans[v as usize] += 1;
        }
    }
    let non_manifold_vertices: Vec<u32> =
        (0..nv as u32).filter(|&v| fans[v as usize] > 1).collect();
    for &v in &non_manifold_vertices {
        comp_nm[vertex_comp[v as usize] as usize] = true;
    }

    // Boundary loops.
    let walks = boundary_walks(mesh, &table);
    let mut comp_loops = vec![0usize; ncomp];
    let mut loops: Vec<LoopInfo> = walks
        .iter()
        .map(|w| {
            let component = face_comp[w.face as usize] as usize;
            comp_loops[component] += 1;
            let length_mm = w
                .sides
                .iter()
                .map(|&(a, b)| norm(sub(mesh.positions[a as usize], mesh.positions[b as usize])))
                .sum();
            LoopInfo {
                component,
                edges: w.sides.len(),
                length_mm,
                closed: w.closed,
                vertices: w
                    .sides
                    .iter()
                    .take(LOOP_VERTICES_LISTED)
                    .map(|s| s.0)
                    .collect(),
            }
        })
        .collect();
    let boundary_length: f64 = loops.iter().map(|l| l.length_mm).sum();
    let n_loops = loops.len();
    loops.sort_by(|x, y| {
        y.edges
            .cmp(&x.edges)
            .then(x.vertices.first().cmp(&y.vertices.first()))
    });
    loops.truncate(opts.max_listed);

    // Faces: geometry and degeneracy.
    let centre = mesh.centroid();
    let mut comp_faces = vec![0usize; ncomp];
    let mut comp_area = vec![0.0f64; ncomp];
    let mut comp_volume = vec![0.0f64; ncomp];
    let mut degenerate_faces = Vec::new();
    for (f, t) in mesh.faces.iter().enumerate() {
        let c = face_comp[f] as usize;
        comp_faces[c] += 1;
        let [p, q, r] = mesh.corners(f);
        let x = cross(sub(q, p), sub(r, p));
        let twice_area = norm(x);
        comp_area[c] += 0.5 * twice_area;
        let (a, b, d) = (sub(p, centre), sub(q, centre), sub(r, centre));
        comp_volume[c] += dot(a, cross(b, d)) / 6.0;
        let longest2 = [sub(q, p), sub(r, q), sub(p, r)]
            .iter()
            .map(|v| dot(*v, *v))
            .fold(0.0, f64::max);
        let repeated = t[0] == t[1] || t[1] == t[2] || t[0] == t[2];
        if repeated || twice_area <= opts.degenerate_relative_tolerance * longest2 {
            degenerate_faces.push(f as u32);
        }
    }
    let mut comp_vertices = vec![0usize; ncomp];
    let mut unreferenced = Vec::new();
    for (v, &c) in vertex_comp.iter().enumerate() {
        if c == u32::MAX {
            unreferenced.push(v as u32);
        } else {
            comp_vertices[c as usize] += 1;
        }
    }

    let (lo, hi) = mesh.bounding_box();
    let diag = norm(sub(hi, lo));
    let volume_floor = 1e-12 * diag * diag * diag;
    let components: Vec<ComponentInfo> = (0..ncomp)
        .map(|c| {
            let chi = comp_vertices[c] as i64 - comp_edges[c] as i64 + comp_faces[c] as i64;
            let b = comp_loops[c] as i64;
            let manifold = !comp_nm[c];
            let orientable = comp_orientable[c];
            let twice_g = 2 - chi - b;
            let genus = (manifold && orientable && twice_g >= 0 && twice_g % 2 == 0)
                .then_some((twice_g / 2) as u32);
            let closed = comp_loops[c] == 0;
            let vol = comp_volume[c];
            let orientation =
                if closed && manifold && !comp_inconsistent[c] && vol.abs() > volume_floor {
                    if vol > 0.0 {
                        Orientation::Outward
                    } else {
                        Orientation::Inward
                    }
                } else {
                    Orientation::Undetermined
                };
            ComponentInfo {
                index: c,
                vertices: comp_vertices[c],
                edges: comp_edges[c],
                faces: comp_faces[c],
                euler_characteristic: chi,
                boundary_loops: comp_loops[c],
                closed,
                manifold,
                orientable,
                genus,
                area_mm2: comp_area[c],
                signed_volume_mm3: vol,
                orientation,
            }
        })
        .collect();
    let determined: Vec<Orientation> = components
        .iter()
        .map(|c| c.orientation)
        .filter(|o| *o != Orientation::Undetermined)
        .collect();
    let orientation = match determined.first() {
        None => Orientation::Undetermined,
        Some(&o) if determined.iter().all(|&x| x == o) => o,
        Some(_) => Orientation::Mixed,
    };
    let all_closed = components.iter().all(|c| c.closed);
    let enclosed_volume_mm3 = all_closed.then(|| comp_volume.iter().sum());
    let area_mm2 = comp_area.iter().sum();

    let duplicates = duplicate_pairs(&mesh.positions, opts.duplicate_tolerance_mm);

    let mut report = Inspection {
        schema_version: SCHEMA_VERSION,
        vertices: nv,
        edges: ne,
        faces: nf,
        euler_characteristic: nv as i64 - ne as i64 + nf as i64,
        components: Listing {
            count: ncomp,
            listed: components.iter().take(opts.max_listed).cloned().collect(),
        },
        boundary: BoundaryInfo {
            loops: n_loops,
            edges: boundary_edges,
            length_mm: boundary_length,
            listed: loops,
        },
        non_manifold_edges: Listing::from_iter(non_manifold_edges.into_iter(), opts.max_listed),
        non_manifold_vertices: Listing::from_iter(
            non_manifold_vertices.into_iter(),
            opts.max_listed,
        ),
        degenerate_faces: Listing::from_iter(degenerate_faces.into_iter(), opts.max_listed),
        duplicate_vertices: Listing::from_iter(duplicates.into_iter(), opts.max_listed),
        unreferenced_vertices: Listing::from_iter(unreferenced.into_iter(), opts.max_listed),
        inconsistent_edges: Listing::from_iter(inconsistent_edges.into_iter(), opts.max_listed),
        orientation,
        area_mm2,
        enclosed_volume_mm3,
        bounding_box: BoundingBox { min: lo, max: hi },
        ready_to_map: false,
        reasons: Vec::new(),
        settings: Settings {
            duplicate_tolerance_mm: opts.duplicate_tolerance_mm,
            degenerate_relative_tolerance: opts.degenerate_relative_tolerance,
            max_listed: opts.max_listed,
        },
    };
    report.reasons = reasons(&report, &components);
    report.ready_to_map = report.reasons.is_empty();
    Ok(report)
}

/// The reasons a mesh is not ready to map, in a fixed order.
fn reasons(r: &Inspection, components: &[ComponentInfo]) -> Vec<Reason> {
    let mut out = Vec::new();
    let mut add = |code: &str, message: String| {
        out.push(Reason {
            code: code.to_string(),
            message,
        })
    };
    if r.components.count != 1 {
        add(
            "components",
            format!(
                "the mesh has {} connected components; the mapper takes exactly one",
                r.components.count
            ),
        );
    }
    if r.boundary.loops > 0 {
        add(
            "open",
            format!(
                "the surface is open: {} boundary loop(s), {} boundary edges, {:.3} mm in total; it must be closed",
                r.boundary.loops, r.boundary.edges, r.boundary.length_mm
            ),
        );
    }
    let handles: u32 = components.iter().filter_map(|c| c.genus).sum();
    if handles > 0 {
        add(
            "genus",
            format!("the surface has {handles} handle(s) (genus > 0); the mapper needs genus 0"),
        );
    }
    if r.non_manifold_edges.count > 0 {
        add(
            "non_manifold_edge",
            format!(
                "{} edge(s) have more than two faces",
                r.non_manifold_edges.count
            ),
        );
    }
    if r.non_manifold_vertices.count > 0 {
        add(
            "non_manifold_vertex",
            format!(
                "{} vertex/vertices join separate fans of faces (bow-ties)",
                r.non_manifold_vertices.count
            ),
        );
    }
    let non_orientable = components.iter().filter(|c| !c.orientable).count();
    if non_orientable > 0 {
        add(
            "non_orientable",
            format!("{non_orientable} component(s) cannot be oriented consistently"),
        );
    }
    if r.inconsistent_edges.count > 0 {
        add(
            "inconsistent_orientation",
            format!(
                "{} edge(s) are traversed the same way by both their faces (flipped faces)",
                r.inconsistent_edges.count
            ),
        );
    }
    let inward = components
        .iter()
        .filter(|c| c.orientation == Orientation::Inward)
        .count();
    if inward > 0 {
        add(
            "inward",
            format!("{inward} closed component(s) have inward-pointing normals (negative enclosed volume)"),
        );
    }
    let explained = r.boundary.loops > 0
        || r.non_manifold_edges.count > 0
        || r.non_manifold_vertices.count > 0
        || r.inconsistent_edges.count > 0
        || non_orientable > 0;
    if components
        .iter()
        .any(|c| c.orientation == Orientation::Undetermined)
        && !explained
    {
        add(
            "orientation_undetermined",
            "the enclosed volume is zero, so outward and inward cannot be told apart".to_string(),
        );
    }
    if r.degenerate_faces.count > 0 {
        add(
            "degenerate_faces",
            format!(
                "{} face(s) have a repeated vertex or zero area",
                r.degenerate_faces.count
            ),
        );
    }
    if r.duplicate_vertices.count > 0 {
        add(
            "duplicate_vertices",
            format!(
                "{} vertex/vertices repeat the position of an earlier vertex",
                r.duplicate_vertices.count
            ),
        );
    }
    if r.unreferenced_vertices.count > 0 {
        add(
            "unreferenced_vertices",
            format!(
                "{} vertex/vertices belong to no face",
                r.unreferenced_vertices.count
            ),
        );
    }
    out
}

fn fmt_pairs(p: &[[u32; 2]]) -> String {
    p.iter()
        .map(|[a, b]| format!("{a}-{b}"))
        .collect::<Vec<_>>()
        .join(" ")
}

fn fmt_list(p: &[u32]) -> String {
    p.iter()
        .map(|v| v.to_string())
        .collect::<Vec<_>>()
        .join(" ")
}

fn orientation_word(o: Orientation) -> &'static str {
    match o {
        Orientation::Outward => "outward",
        Orientation::Inward => "inward",
        Orientation::Mixed => "mixed",
        Orientation::Undetermined => "undetermined",
    }
}

/// A compact text summary of `r`, headed by `title` (e.g. the file name).
pub fn render_text(r: &Inspection, title: &str) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(s, "surface      {title}");
    let _ = writeln!(
        s,
        "size         {} vertices, {} edges, {} faces; V-E+F = {}",
        r.vertices, r.edges, r.faces, r.euler_characteristic
    );
    let _ = writeln!(s, "pieces       {}", r.components.count);
    for c in &r.components.listed {
        let genus = c
            .genus
            .map_or_else(|| "genus n/a".to_string(), |g| format!("genus {g}"));
        let _ = writeln!(
            s,
            "  [{}]        {} V, {} F, chi {}, {}, {} loop(s), {}{}, {}, area {:.2} mm2",
            c.index,
            c.vertices,
            c.faces,
            c.euler_characteristic,
            genus,
            c.boundary_loops,
            if c.manifold {
                "manifold"
            } else {
                "NON-MANIFOLD"
            },
            if c.orientable { "" } else { ", non-orientable" },
            orientation_word(c.orientation),
            c.area_mm2
        );
    }
    if r.components.count > r.components.listed.len() {
        let _ = writeln!(
            s,
            "  ... {} more",
            r.components.count - r.components.listed.len()
        );
    }
    if r.boundary.loops == 0 {
        let _ = writeln!(s, "boundary     none (closed)");
    } else {
        let _ = writeln!(
            s,
            "boundary     {} loop(s), {} edges, {:.3} mm",
            r.boundary.loops, r.boundary.edges, r.boundary.length_mm
        );
        for l in &r.boundary.listed {
            let _ = writeln!(
                s,
                "  piece {}    {} edges, {:.3} mm{}, from vertices {}{}",
                l.component,
                l.edges,
                l.length_mm,
                if l.closed { "" } else { " (not closed)" },
                fmt_list(&l.vertices),
                if l.edges > l.vertices.len() {
                    " ..."
                } else {
                    ""
                }
            );
        }
    }
    let more = |count: usize, listed: usize| if count > listed { " ..." } else { "" };
    let mut check = |label: &str, count: usize, listed: String, n_listed: usize| {
        if count == 0 {
            let _ = writeln!(s, "{label:<23}0");
        } else {
            let _ = writeln!(s, "{label:<23}{count}: {listed}{}", more(count, n_listed));
        }
    };
    let x = &r.non_manifold_edges;
    check(
        "non-manifold edges",
        x.count,
        fmt_pairs(&x.listed),
        x.listed.len(),
    );
    let x = &r.non_manifold_vertices;
    check(
        "non-manifold vertices",
        x.count,
        fmt_list(&x.listed),
        x.listed.len(),
    );
    let x = &r.inconsistent_edges;
    check(
        "flipped edges",
        x.count,
        fmt_pairs(&x.listed),
        x.listed.len(),
    );
    let x = &r.degenerate_faces;
    check(
        "degenerate faces",
        x.count,
        fmt_list(&x.listed),
        x.listed.len(),
    );
    let x = &r.duplicate_vertices;
    check(
        "duplicate vertices",
        x.count,
        fmt_pairs(&x.listed),
        x.listed.len(),
    );
    let x = &r.unreferenced_vertices;
    check(
        "unused vertices",
        x.count,
        fmt_list(&x.listed),
        x.listed.len(),
    );
    let _ = writeln!(s, "orientation  {}", orientation_word(r.orientation));
    let _ = writeln!(s, "area         {:.3} mm2", r.area_mm2);
    match r.enclosed_volume_mm3 {
        Some(v) => {
            let _ = writeln!(s, "volume       {v:.3} mm3");
        }
        None => {
            let _ = writeln!(s, "volume       n/a (open)");
        }
    }
    let b = &r.bounding_box;
    let _ = writeln!(
        s,
        "extent       x {:.3}..{:.3}  y {:.3}..{:.3}  z {:.3}..{:.3} mm",
        b.min[0], b.max[0], b.min[1], b.max[1], b.min[2], b.max[2]
    );
    if r.ready_to_map {
        let _ = writeln!(s, "verdict      ready to map");
    } else {
        let _ = writeln!(s, "verdict      NOT ready to map");
        for reason in &r.reasons {
            let _ = writeln!(s, "  - {}: {}", reason.code, reason.message);
        }
    }
    s
}
