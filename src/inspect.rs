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
//!   more than one fan: a "bow-tie"; found vertex by vertex with a small
//!   union-find over the corners at the vertex, O(F) for bounded valence);
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
//! Cost: a counting sort of the `3F` face sides by their smaller vertex (in
//! [`EdgeTable::new`]), the same for the corners at each vertex, a sort of
//! the `V` positions, and near-linear union-find passes; no hash map.
//! Output is deterministic (no dependence on thread count or hashing).
//!
//! Hook for handle detection (a later stage): [`ComponentInfo::genus`] tells
//! how many handles each component has.

use crate::error::{Error, Result};
use crate::mesh::topology::{face_components, EdgeTable};
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
    /// False when the walk could not return to its start vertex (a vertex
    /// with an odd number of boundary edges, next to a non-manifold edge).
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
    /// Handles of a single closed oriented component of positive genus:
    /// shortest non-separating loops ([`crate::handles::find_handles`]).
    #[serde(default)]
    pub handles: Vec<crate::handles::Handle>,
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

/// Root of `x` in a small local forest (path halving).
#[inline]
fn local_find(parent: &mut [u32], mut x: u32) -> u32 {
    while parent[x as usize] != x {
        let p = parent[x as usize];
        parent[x as usize] = parent[p as usize];
        x = parent[x as usize];
    }
    x
}

/// Fast test for the usual vertex: following each corner `(next, prev, face)`
/// to the corner whose `prev` is its `next` (the face across the edge to
/// `next`, consistently oriented) visits all corners once and returns to the
/// first. Then every corner shares an edge with its successor: one fan.
/// False means "not shown", and the general count decides.
fn single_cycle(cs: &[[u32; 3]]) -> bool {
    let k = cs.len();
    let mut cur = 0usize;
    for step in 1..=k {
        let want = cs[cur][0];
        match cs.iter().position(|c| c[1] == want) {
            Some(0) => return step == k,
            Some(j) => cur = j,
            None => return false,
        }
    }
    false
}

/// Number of fans at each vertex: the faces around the vertex, joined when
/// they share an edge at it (of any valence) or are the same face, fall into
/// this many groups; more than one is a bow-tie. Vertex by vertex the corners
/// are gathered (a counting sort, O(F)) and joined by a small union-find:
/// pairwise for up to 32 corners, by sorting the neighbour keys above that.
fn vertex_fans(mesh: &TriMesh) -> Vec<u32> {
    let nv = mesh.n_vertices();
    let mut start = vec![0u32; nv + 1];
    for t in &mesh.faces {
        for &v in t {
            start[v as usize + 1] += 1;
        }
    }
    for v in 0..nv {
        start[v + 1] += start[v];
    }
    // Per corner: next vertex, previous vertex, face.
    let mut fill = start.clone();
    let mut corner = vec![[0u32; 3]; 3 * mesh.n_faces()];
    for (f, t) in mesh.faces.iter().enumerate() {
        for k in 0..3 {
            let slot = &mut fill[t[k] as usize];
            corner[*slot as usize] = [t[(k + 1) % 3], t[(k + 2) % 3], f as u32];
            *slot += 1;
        }
    }
    let mut fans = vec![0u32; nv];
    let mut parent: Vec<u32> = Vec::new();
    let mut keys: Vec<(u64, u32)> = Vec::new();
    for v in 0..nv {
        let cs = &corner[start[v] as usize..start[v + 1] as usize];
        let k = cs.len();
        if k <= 32 && single_cycle(cs) {
            // The common case, an interior vertex of an oriented manifold.
            fans[v] = 1;
            continue;
        }
        parent.clear();
        parent.extend(0..k as u32);
        let mut groups = k as u32;
        let mut join = |parent: &mut Vec<u32>, i: u32, j: u32| {
            let (ri, rj) = (local_find(parent, i), local_find(parent, j));
            if ri != rj {
                parent[ri as usize] = rj;
                groups -= 1;
            }
        };
        let vv = v as u32;
        if k <= 32 {
            for i in 0..k {
                let a = cs[i];
                for (j, b) in cs.iter().enumerate().skip(i + 1) {
                    let share = a[2] == b[2]
                        || (a[0] != vv && (a[0] == b[0] || a[0] == b[1]))
                        || (a[1] != vv && (a[1] == b[0] || a[1] == b[1]));
                    if share {
                        join(&mut parent, i as u32, j as u32);
                    }
                }
            }
        } else {
            keys.clear();
            for (i, c) in cs.iter().enumerate() {
                let i = i as u32;
                keys.push(((1u64 << 32) | c[2] as u64, i));
                for &u in &c[..2] {
                    if u != vv {
                        keys.push((u as u64, i));
                    }
                }
            }
            keys.sort_unstable();
            for w in keys.windows(2) {
                if w[0].0 == w[1].0 {
                    join(&mut parent, w[0].1, w[1].1);
                }
            }
        }
        fans[v] = groups;
    }
    fans
}

/// One walk along boundary edges.
struct Walk {
    /// The edges in walking order, each as (from, to).
    sides: Vec<(u32, u32)>,
    /// The walk came back to its first vertex.
    closed: bool,
    /// The face on the first edge (names the component).
    face: u32,
}

/// Boundary loops: walks along the edges with one face. From each vertex
/// the walk continues along an unused boundary edge that its face traverses
/// away from the vertex (so on a consistently oriented surface a loop keeps
/// the faces on its left), and failing that along any unused boundary edge
/// at the vertex, so that a flipped face on the boundary does not split a
/// loop. Every boundary edge lies on exactly one walk.
fn boundary_walks(mesh: &TriMesh, table: &EdgeTable) -> Vec<Walk> {
    // Boundary sides a -> b as their face traverses them, with the face.
    let mut sides: Vec<(u32, u32, u32)> = Vec::new();
    for e in 0..table.len() {
        if table.valence(e) == 1 {
            let inc = table.faces_of(e)[0];
            let t = mesh.faces[inc.face as usize];
            let s = inc.slot as usize;
            sides.push((t[s], t[(s + 1) % 3], inc.face));
        }
    }
    sides.sort_unstable();
    // Both ends of every side: (vertex, leaves the vertex in face order?, side).
    let mut ends: Vec<(u32, bool, u32)> = Vec::with_capacity(2 * sides.len());
    for (i, &(a, b, _)) in sides.iter().enumerate() {
        ends.push((a, false, i as u32)); // `false` sorts first: outgoing
        ends.push((b, true, i as u32));
    }
    ends.sort_unstable();
    let mut used = vec![false; sides.len()];
    let mut walks = Vec::new();
    for start in 0..sides.len() {
        if used[start] {
            continue;
        }
        let (first, _, face) = sides[start];
        let mut walk = Vec::new();
        let mut cur = start;
        let mut from = first;
        let closed = loop {
            used[cur] = true;
            let (a, b, _) = sides[cur];
            let to = if a == from { b } else { a };
            walk.push((from, to));
            if to == first {
                break true;
            }
            // Unused sides at `to`, outgoing ones first.
            let k = ends.partition_point(|&(v, _, _)| v < to);
            let next = ends[k..]
                .iter()
                .take_while(|&&(v, _, _)| v == to)
                .find(|&&(_, _, i)| !used[i as usize]);
            match next {
                Some(&(_, _, i)) => {
                    cur = i as usize;
                    from = to;
                }
                None => break false,
            }
        };
        walks.push(Walk {
            sides: walk,
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
///
/// Identical positions are grouped first by sorting (exact, -0 = +0); with
/// `tol > 0` the distinct positions, each named by its lowest vertex, are
/// then searched on a grid of cell size `tol` (see [`near_on_grid`]), so
/// many vertices collapsed onto one point cost a sort, not a quadratic scan.
fn duplicate_pairs(positions: &[Vec3], tol: f64) -> Vec<[u32; 2]> {
    let n = positions.len();
    let mut keyed: Vec<([u64; 3], u32)> = positions
        .iter()
        .enumerate()
        .map(|(i, p)| (exact_key(p), i as u32))
        .collect();
    keyed.sort_unstable();
    // Lowest vertex at each position, and the distinct positions.
    let mut rep_of = vec![0u32; n];
    let mut reps: Vec<u32> = Vec::new();
    let mut k = 0;
    while k < n {
        let r = keyed[k].1; // lowest index of its group (sorted by key, then index)
        let mut m = k;
        while m < n && keyed[m].0 == keyed[k].0 {
            rep_of[keyed[m].1 as usize] = r;
            m += 1;
        }
        reps.push(r);
        k = m;
    }
    let near = if tol > 0.0 && tol.is_finite() {
        near_on_grid(positions, &reps, tol)
    } else {
        vec![u32::MAX; n]
    };
    let mut pairs = Vec::new();
    for i in 0..n {
        let r = rep_of[i];
        // Lowest partner: the group's first vertex (distance 0) or the lowest
        // vertex of another position within `tol`, whichever is lower.
        let j = if r as usize == i {
            near[i]
        } else {
            r.min(near[r as usize])
        };
        if (j as usize) < i {
            pairs.push([j, i as u32]);
        }
    }
    pairs
}

/// For each representative vertex `r` in `reps` (distinct positions), the
/// lowest other representative within `tol` (at index `r` of the result;
/// `u32::MAX` if none).
///
/// Grid of cell size `tol`: a partner lies in one of the 27 cells around a
/// vertex's cell. Cells are sorted by (x, y, z), so for each (dx, dy) the
/// three cells z - 1..=z + 1 are one contiguous run, whose start only moves
/// forward as the occupied cells are visited in order (a translation keeps
/// the order): nine cursors sweep the list, O(V) after the sort. Within a
/// cell the vertices are in increasing order, so the scan for a vertex stops
/// at the first partner found.
fn near_on_grid(positions: &[Vec3], reps: &[u32], tol: f64) -> Vec<u32> {
    let cell_of = |p: &Vec3| -> [i64; 3] {
        [
            (p[0] / tol).floor() as i64,
            (p[1] / tol).floor() as i64,
            (p[2] / tol).floor() as i64,
        ]
    };
    let mut sorted: Vec<([i64; 3], u32)> = reps
        .iter()
        .map(|&r| (cell_of(&positions[r as usize]), r))
        .collect();
    sorted.sort_unstable();
    let m = sorted.len();
    let tol2 = tol * tol;
    let mut near = vec![u32::MAX; positions.len()];
    let mut cursor = [0usize; 9];
    let mut g = 0;
    while g < m {
        let c = sorted[g].0;
        let g_end = g + sorted[g..].partition_point(|x| x.0 == c);
        for (k, cur) in cursor.iter_mut().enumerate() {
            let (dx, dy) = (k as i64 / 3 - 1, k as i64 % 3 - 1);
            let (x, y) = (c[0].saturating_add(dx), c[1].saturating_add(dy));
            let lo_key = [x, y, c[2].saturating_sub(1)];
            let hi_key = [x, y, c[2].saturating_add(1)];
            while *cur < m && sorted[*cur].0 < lo_key {
                *cur += 1;
            }
            // Up to three cells in this run, each scanned in index order.
            let mut seg = *cur;
            while seg < m && sorted[seg].0 <= hi_key {
                let cell = sorted[seg].0;
                let seg_end = seg + sorted[seg..].partition_point(|x| x.0 == cell);
                for &(_, i) in &sorted[g..g_end] {
                    for &(_, j) in &sorted[seg..seg_end] {
                        if j >= near[i as usize] {
                            break;
                        }
                        if j == i {
                            continue;
                        }
                        let d = sub(positions[i as usize], positions[j as usize]);
                        if dot(d, d) <= tol2 {
                            near[i as usize] = j;
                            break;
                        }
                    }
                }
                seg = seg_end;
            }
        }
        g = g_end;
    }
    near
}

/// Inspect `mesh`. The mesh is validated first (indices in range, finite
/// coordinates, not empty); an invalid mesh or option gives
/// [`Error::Invalid`].
pub fn inspect(mesh: &TriMesh, opts: &InspectOptions) -> Result<Inspection> {
    mesh.validate()?;
    if !(opts.duplicate_tolerance_mm >= 0.0 && opts.duplicate_tolerance_mm.is_finite()) {
        return Err(Error::Invalid(format!(
            "duplicate tolerance {} mm; expected a finite number >= 0",
            opts.duplicate_tolerance_mm
        )));
    }
    if !(opts.degenerate_relative_tolerance >= 0.0 && opts.degenerate_relative_tolerance < 1.0) {
        return Err(Error::Invalid(format!(
            "degenerate-face relative tolerance {}; expected a number in [0, 1)",
            opts.degenerate_relative_tolerance
        )));
    }
    let nv = mesh.n_vertices();
    let nf = mesh.n_faces();
    // Four independent passes, two by two on the thread pool; each is
    // sequential and deterministic, so the report does not depend on the
    // number of threads.
    let ((table, (face_comp, ncomp)), (fans, duplicates)) = rayon::join(
        || (EdgeTable::new(mesh), face_components(mesh)),
        || {
            (
                vertex_fans(mesh),
                duplicate_pairs(&mesh.positions, opts.duplicate_tolerance_mm),
            )
        },
    );
    let ne = table.len();

    // Per-vertex component; unreferenced vertices keep u32::MAX.
    let mut vertex_comp = vec![u32::MAX; nv];
    for (t, &c) in mesh.faces.iter().zip(&face_comp) {
        for &v in t {
            vertex_comp[v as usize] = c;
        }
    }

    // Edges: classification, orientability and corner fans.
    let mut comp_orientable = vec![true; ncomp];
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
            }
            _ => {
                non_manifold_edges.push(table.edges[e]);
                comp_nm[c] = true;
            }
        }
    }
    // Orientability: only in question where some edge is inconsistent (a
    // consistent orientation is its own proof). Faces across manifold edges
    // must agree up to the parity of a flip; a contradiction means the
    // component is not orientable.
    if !inconsistent_edges.is_empty() {
        let mut parity = ParityUnionFind::new(nf);
        for e in 0..ne {
            let inc = table.faces_of(e);
            if let [i0, i1] = inc {
                let a = table.edges[e][0];
                let f0 = mesh.faces[i0.face as usize][i0.slot as usize] == a;
                let f1 = mesh.faces[i1.face as usize][i1.slot as usize] == a;
                if !parity.union(i0.face, i1.face, u8::from(f0 == f1)) {
                    comp_orientable[face_comp[i0.face as usize] as usize] = false;
                }
            }
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
    // A fold from +0 (an empty f64 `sum` is -0, which would print as "-0.0").
    let boundary_length = loops.iter().fold(0.0, |acc, l| acc + l.length_mm);
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
        handles: Vec::new(),
    };
    if ncomp == 1
        && components
            .first()
            .and_then(|c| c.genus)
            .is_some_and(|g| g > 0)
    {
        report.handles = crate::handles::find_handles(mesh).unwrap_or_default();
    }
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

/// A compact text summary of `r`, headed by `title` (e.g. the file name):
/// one finding per line, label in a 22-character column.
pub fn render_text(r: &Inspection, title: &str) -> String {
    let mut lines: Vec<(String, String)> = Vec::new();
    let mut row = |label: &str, value: String| lines.push((label.to_string(), value));
    row("surface", title.to_string());
    row(
        "size",
        format!(
            "{} vertices, {} edges, {} faces; V - E + F = {}",
            r.vertices, r.edges, r.faces, r.euler_characteristic
        ),
    );
    row("pieces", r.components.count.to_string());
    for c in &r.components.listed {
        let genus = c
            .genus
            .map_or_else(|| "genus n/a".to_string(), |g| format!("genus {g}"));
        let mut traits = vec![if c.closed {
            "closed".to_string()
        } else {
            format!("{} loop(s)", c.boundary_loops)
        }];
        if !c.manifold {
            traits.push("non-manifold".into());
        }
        if !c.orientable {
            traits.push("non-orientable".into());
        }
        traits.push(orientation_word(c.orientation).into());
        row(
            &format!("  piece {}", c.index),
            format!(
                "{} V, {} F, chi {}, {}, {}, {:.2} mm2",
                c.vertices,
                c.faces,
                c.euler_characteristic,
                genus,
                traits.join(", "),
                c.area_mm2
            ),
        );
    }
    if r.components.count > r.components.listed.len() {
        row(
            "  ...",
            format!("{} more", r.components.count - r.components.listed.len()),
        );
    }
    if r.boundary.loops == 0 {
        row("boundary", "none".into());
    } else {
        row(
            "boundary",
            format!(
                "{} loop(s), {} edges, {:.3} mm",
                r.boundary.loops, r.boundary.edges, r.boundary.length_mm
            ),
        );
        for l in &r.boundary.listed {
            row(
                &format!("  on piece {}", l.component),
                format!(
                    "{} edges, {:.3} mm{}, through {}{}",
                    l.edges,
                    l.length_mm,
                    if l.closed { "" } else { " (not closed)" },
                    fmt_list(&l.vertices),
                    if l.edges > l.vertices.len() {
                        " ..."
                    } else {
                        ""
                    }
                ),
            );
        }
    }
    let finding = |count: usize, n_listed: usize, listed: String| {
        if count == 0 {
            "0".to_string()
        } else {
            let more = if count > n_listed { " ..." } else { "" };
            format!("{count}: {listed}{more}")
        }
    };
    let x = &r.non_manifold_edges;
    row(
        "non-manifold edges",
        finding(x.count, x.listed.len(), fmt_pairs(&x.listed)),
    );
    let x = &r.non_manifold_vertices;
    row(
        "non-manifold vertices",
        finding(x.count, x.listed.len(), fmt_list(&x.listed)),
    );
    let x = &r.inconsistent_edges;
    row(
        "flipped edges",
        finding(x.count, x.listed.len(), fmt_pairs(&x.listed)),
    );
    let x = &r.degenerate_faces;
    row(
        "degenerate faces",
        finding(x.count, x.listed.len(), fmt_list(&x.listed)),
    );
    let x = &r.duplicate_vertices;
    row(
        "duplicate vertices",
        finding(x.count, x.listed.len(), fmt_pairs(&x.listed)),
    );
    let x = &r.unreferenced_vertices;
    row(
        "unused vertices",
        finding(x.count, x.listed.len(), fmt_list(&x.listed)),
    );
    row("orientation", orientation_word(r.orientation).into());
    row("area", format!("{:.3} mm2", r.area_mm2));
    row(
        "volume",
        match r.enclosed_volume_mm3 {
            Some(v) => format!("{v:.3} mm3"),
            None => "n/a (open)".into(),
        },
    );
    let b = &r.bounding_box;
    row(
        "extent",
        format!(
            "x {:.3}..{:.3}, y {:.3}..{:.3}, z {:.3}..{:.3} mm",
            b.min[0], b.max[0], b.min[1], b.max[1], b.min[2], b.max[2]
        ),
    );
    if r.ready_to_map {
        row("verdict", "ready to map".into());
    } else {
        row("verdict", "NOT ready to map".into());
        for reason in &r.reasons {
            row(&format!("  {}", reason.code), reason.message.clone());
        }
    }
    let mut out = String::new();
    for (label, value) in lines {
        out.push_str(&format!("{label:<22} {value}\n"));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Closed fan of `n` triangles around vertex 0 (a cone apex), vertices
    /// numbered from `first`.
    fn fan(n: u32, first: u32, faces: &mut Vec<[u32; 3]>) {
        for j in 0..n {
            faces.push([0, first + j, first + (j + 1) % n]);
        }
    }

    #[test]
    fn fans_small_and_large_valence() {
        // Two closed fans meeting at vertex 0: a bow-tie, for valence 2 x 6
        // (pairwise path) and 2 x 20 (sorting path).
        for n in [6u32, 20] {
            let mut faces = Vec::new();
            fan(n, 1, &mut faces);
            fan(n, 1 + n, &mut faces);
            let positions = vec![[0.0; 3]; 1 + 2 * n as usize];
            let fans = vertex_fans(&TriMesh { positions, faces });
            assert_eq!(fans[0], 2, "n = {n}");
            assert!(fans[1..].iter().all(|&k| k == 1));
        }
        // One closed fan of 40: a single fan through the sorting path.
        let mut faces = Vec::new();
        fan(40, 1, &mut faces);
        let fans = vertex_fans(&TriMesh {
            positions: vec![[0.0; 3]; 41],
            faces,
        });
        assert_eq!(fans[0], 1);
        // Every vertex of a sphere is one fan, through the fast test or,
        // around a flipped face, through the general count.
        let mut m = crate::mesh::shapes::icosphere(2, 1.0);
        assert!(vertex_fans(&m).iter().all(|&k| k == 1));
        m.faces[5].swap(0, 1);
        assert!(!single_cycle(&[[1, 2, 0], [2, 1, 1]][..1]));
        assert!(vertex_fans(&m).iter().all(|&k| k == 1));
        // A face with all three corners at one vertex is one fan.
        let fans = vertex_fans(&TriMesh {
            positions: vec![[0.0; 3]; 1],
            faces: vec![[0, 0, 0]],
        });
        assert_eq!(fans[0], 1);
    }

    #[test]
    fn grid_duplicate_search_equals_brute_force() {
        // Seeded point cloud (a 64-bit LCG, Knuth's MMIX constants) on a
        // coarse lattice so that many points fall within the tolerance.
        let mut state = 0x2545_f491_4f6c_dd1du64;
        let mut next = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((state >> 33) % 40) as f64 * 0.05 - 1.0
        };
        let pts: Vec<Vec3> = (0..600).map(|_| [next(), next(), next()]).collect();
        for tol in [0.0, 0.05, 0.07, 0.2] {
            let mut brute = Vec::new();
            for i in 0..pts.len() {
                let d2 = |j: usize| {
                    let d = sub(pts[i], pts[j]);
                    dot(d, d)
                };
                if let Some(j) = (0..i).find(|&j| {
                    if tol == 0.0 {
                        pts[i] == pts[j]
                    } else {
                        d2(j) <= tol * tol
                    }
                }) {
                    brute.push([j as u32, i as u32]);
                }
            }
            assert!(!brute.is_empty());
            assert_eq!(duplicate_pairs(&pts, tol), brute, "tol {tol}");
        }
    }

    #[test]
    fn collapsed_vertices_pair_with_the_first() {
        // 5000 vertices on one point, 5000 on another 1.5 tol away: every
        // vertex pairs with the first of its point; the points are not
        // within the tolerance of each other.
        let tol = 0.01;
        let mut pts = vec![[1.0, 2.0, 3.0]; 5000];
        pts.extend(vec![[1.0 + 1.5 * tol, 2.0, 3.0]; 5000]);
        for t in [0.0, tol] {
            let pairs = duplicate_pairs(&pts, t);
            assert_eq!(pairs.len(), 9998);
            assert!(pairs[..4999].iter().all(|&[j, _]| j == 0));
            assert!(pairs[4999..].iter().all(|&[j, _]| j == 5000));
        }
        // At 2 tol the two points merge: all pair with vertex 0.
        let pairs = duplicate_pairs(&pts, 2.0 * tol);
        assert_eq!(pairs.len(), 9999);
        assert!(pairs.iter().all(|&[j, _]| j == 0));
    }

    #[test]
    fn parity_union_find_detects_odd_cycles() {
        let mut p = ParityUnionFind::new(4);
        assert!(p.union(0, 1, 1));
        assert!(p.union(1, 2, 1));
        assert!(p.union(2, 3, 0));
        assert_eq!(p.find(3).1 ^ p.find(0).1, 0);
        assert!(p.union(3, 0, 0));
        assert!(!p.union(0, 2, 1), "0 and 2 have even parity");
    }
}
