//! Combinatorics of an indexed triangle mesh that may be anything: open,
//! non-manifold, several pieces.
//!
//! In: a [`TriMesh`] (only its faces matter). Out: the undirected edge table
//! with the faces on each edge, connected components, boundary loops and the
//! Euler characteristic `V - E + F = 2 - 2g - b` per component (Massey, "A
//! basic course in algebraic topology", 1991), and the neighbour lists of
//! the vertices (CSR). Edges are identified here by
//! their end vertices, which is right for an indexed mesh; the halfedge
//! Delta-complex ([`super::halfedge`]) never does that.

use super::TriMesh;
use rayon::prelude::*;

/// One side of an edge: face `face` traverses the edge from its corner `slot`
/// to corner `(slot + 1) % 3`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Incidence {
    pub face: u32,
    pub slot: u8,
}

/// Undirected edges of a mesh with their incident faces (CSR layout).
///
/// `edges[e] = [a, b]` with `a < b`; the faces on edge `e` are
/// `incidences[offsets[e]..offsets[e + 1]]`. Corner pairs of degenerate faces
/// with a repeated index (`a == a`) are not edges and are left out.
#[derive(Debug, Clone, Default)]
pub struct EdgeTable {
    pub edges: Vec<[u32; 2]>,
    pub offsets: Vec<u32>,
    pub incidences: Vec<Incidence>,
}

impl EdgeTable {
    /// Build the table. The face sides are bucketed by their smaller vertex
    /// (a counting sort, O(F + V)) and each small bucket is sorted by the
    /// larger vertex, so the cost is near O(F) with no hashing; edges come
    /// out sorted by `(a, b)` and the faces on each edge by `(face, slot)`.
    pub fn new(mesh: &TriMesh) -> Self {
        let faces = &mesh.faces;
        // Bucket count from the indices themselves, so that an unvalidated
        // mesh cannot make this index out of bounds.
        let n = faces
            .iter()
            .flat_map(|t| t.iter())
            .max()
            .map_or(0, |&m| m as usize + 1);
        if faces.len() > (u32::MAX / 3) as usize {
            return Self::new_by_sorting(mesh);
        }
        let mut start = vec![0u32; n + 1];
        for t in faces {
            for k in 0..3 {
                let (a, b) = (t[k], t[(k + 1) % 3]);
                if a != b {
                    start[a.min(b) as usize + 1] += 1;
                }
            }
        }
        for v in 0..n {
            start[v + 1] += start[v];
        }
        // Key: larger vertex in the high half, side id 3f + slot in the low.
        let mut fill = start.clone();
        let mut keys = vec![0u64; start[n] as usize];
        for (f, t) in faces.iter().enumerate() {
            for k in 0..3 {
                let (a, b) = (t[k], t[(k + 1) % 3]);
                if a != b {
                    let slot = &mut fill[a.min(b) as usize];
                    keys[*slot as usize] = ((a.max(b) as u64) << 32) | (3 * f + k) as u64;
                    *slot += 1;
                }
            }
        }
        let mut edges = Vec::with_capacity(keys.len() / 2 + 1);
        let mut offsets = Vec::with_capacity(keys.len() / 2 + 2);
        let mut incidences = Vec::with_capacity(keys.len());
        for a in 0..n {
            let bucket = &mut keys[start[a] as usize..start[a + 1] as usize];
            bucket.sort_unstable();
            let mut last = u32::MAX;
            for &key in bucket.iter() {
                let b = (key >> 32) as u32;
                if b != last {
                    offsets.push(incidences.len() as u32);
                    edges.push([a as u32, b]);
                    last = b;
                }
                let side = key as u32;
                incidences.push(Incidence {
                    face: side / 3,
                    slot: (side % 3) as u8,
                });
            }
        }
        offsets.push(incidences.len() as u32);
        EdgeTable {
            edges,
            offsets,
            incidences,
        }
    }

    /// Same table by one global sort (for meshes with more than 2^32 / 3
    /// faces, where side ids do not fit in 32 bits).
    fn new_by_sorting(mesh: &TriMesh) -> Self {
        let mut sides: Vec<(u64, Incidence)> = Vec::with_capacity(mesh.faces.len() * 3);
        for (f, t) in mesh.faces.iter().enumerate() {
            for k in 0..3 {
                let (a, b) = (t[k], t[(k + 1) % 3]);
                if a == b {
                    continue;
                }
                let key = ((a.min(b) as u64) << 32) | a.max(b) as u64;
                sides.push((
                    key,
                    Incidence {
                        face: f as u32,
                        slot: k as u8,
                    },
                ));
            }
        }
        sides.sort_unstable_by_key(|&(k, inc)| (k, inc.face, inc.slot));
        let mut edges = Vec::with_capacity(sides.len() / 2 + 1);
        let mut offsets = Vec::with_capacity(sides.len() / 2 + 2);
        let mut incidences = Vec::with_capacity(sides.len());
        let mut last = u64::MAX;
        for (key, inc) in sides {
            if key != last {
                offsets.push(incidences.len() as u32);
                edges.push([(key >> 32) as u32, key as u32]);
                last = key;
            }
            incidences.push(inc);
        }
        offsets.push(incidences.len() as u32);
        EdgeTable {
            edges,
            offsets,
            incidences,
        }
    }

    /// Number of undirected edges.
    pub fn len(&self) -> usize {
        self.edges.len()
    }

    /// True when there are no edges.
    pub fn is_empty(&self) -> bool {
        self.edges.is_empty()
    }

    /// The faces on edge `e`.
    pub fn faces_of(&self, e: usize) -> &[Incidence] {
        &self.incidences[self.offsets[e] as usize..self.offsets[e + 1] as usize]
    }

    /// Number of faces on edge `e` (1: boundary, 2: manifold, more: non-manifold).
    pub fn valence(&self, e: usize) -> usize {
        (self.offsets[e + 1] - self.offsets[e]) as usize
    }
}

/// Disjoint-set forest with path halving and union by size.
#[derive(Debug, Clone)]
pub struct UnionFind {
    parent: Vec<u32>,
    size: Vec<u32>,
}

impl UnionFind {
    /// `n` singletons.
    pub fn new(n: usize) -> Self {
        UnionFind {
            parent: (0..n as u32).collect(),
            size: vec![1; n],
        }
    }

    /// Representative of `x`'s set.
    pub fn find(&mut self, mut x: u32) -> u32 {
        while self.parent[x as usize] != x {
            let p = self.parent[x as usize];
            self.parent[x as usize] = self.parent[p as usize];
            x = self.parent[x as usize];
        }
        x
    }

    /// Merge the sets of `a` and `b`; true if they were apart.
    pub fn union(&mut self, a: u32, b: u32) -> bool {
        let (mut ra, mut rb) = (self.find(a), self.find(b));
        if ra == rb {
            return false;
        }
        if self.size[ra as usize] < self.size[rb as usize] {
            std::mem::swap(&mut ra, &mut rb);
        }
        self.parent[rb as usize] = ra;
        self.size[ra as usize] += self.size[rb as usize];
        true
    }
}

/// The neighbours of every vertex, in CSR layout `(start, list)`: the
/// neighbours of vertex `i` are `list[start[i]..start[i + 1]]`, sorted by
/// index, each once. Two vertices are neighbours when a face has them at
/// consecutive corners (either order); a face with a repeated index makes a
/// vertex its own neighbour. `start` has `n + 1` entries; every index in
/// `faces` must be below `n`. Same result for any thread count (the pairs
/// are totally ordered, so the parallel sort has one outcome).
pub fn vertex_neighbours(n: usize, faces: &[[u32; 3]]) -> (Vec<usize>, Vec<u32>) {
    let mut pairs: Vec<(u32, u32)> = Vec::with_capacity(faces.len() * 6);
    for t in faces {
        for k in 0..3 {
            let (a, b) = (t[k], t[(k + 1) % 3]);
            pairs.push((a, b));
            pairs.push((b, a));
        }
    }
    pairs.par_sort_unstable();
    pairs.dedup();
    let mut start = vec![0usize; n + 1];
    for &(a, _) in &pairs {
        start[a as usize + 1] += 1;
    }
    for i in 0..n {
        start[i + 1] += start[i];
    }
    (start, pairs.into_iter().map(|p| p.1).collect())
}

/// Connected components of the faces (two faces are connected when they share
/// a vertex). Returns the component of every face, numbered 0.. in order of
/// decreasing face count (ties: smallest first face first), and the count.
pub fn face_components(mesh: &TriMesh) -> (Vec<u32>, usize) {
    let mut uf = UnionFind::new(mesh.n_vertices());
    for t in &mesh.faces {
        uf.union(t[0], t[1]);
        uf.union(t[1], t[2]);
    }
    let roots: Vec<u32> = mesh.faces.iter().map(|t| uf.find(t[0])).collect();
    // Number the roots by first appearance, then order by size.
    let mut id_of_root = vec![u32::MAX; mesh.n_vertices()];
    let mut counts: Vec<(usize, usize)> = Vec::new(); // (faces, first face)
    let mut first_ids = Vec::with_capacity(roots.len());
    for (f, &r) in roots.iter().enumerate() {
        let slot = &mut id_of_root[r as usize];
        if *slot == u32::MAX {
            *slot = counts.len() as u32;
            counts.push((0, f));
        }
        let id = *slot as usize;
        counts[id].0 += 1;
        first_ids.push(id);
    }
    let mut order: Vec<usize> = (0..counts.len()).collect();
    order.sort_by_key(|&i| (std::cmp::Reverse(counts[i].0), counts[i].1));
    let mut rank = vec![0u32; counts.len()];
    for (r, &i) in order.iter().enumerate() {
        rank[i] = r as u32;
    }
    let comp = first_ids.iter().map(|&i| rank[i]).collect();
    (comp, counts.len())
}

/// A closed loop of boundary edges, as vertices in order (the face lies to
/// the left when walking the loop in this order, i.e. the loop follows the
/// faces' own edge direction).
pub type BoundaryLoop = Vec<u32>;

/// Boundary loops: chains of edges that have exactly one face. Where a vertex
/// has several boundary edges leaving it (a non-manifold boundary vertex), the
/// walk takes the first unused one, so every boundary edge lies on exactly one
/// returned loop.
pub fn boundary_loops(mesh: &TriMesh, edges: &EdgeTable) -> Vec<BoundaryLoop> {
    // Directed boundary sides a -> b as in their face.
    let mut out: Vec<(u32, u32)> = Vec::new();
    for e in 0..edges.len() {
        if edges.valence(e) == 1 {
            let inc = edges.faces_of(e)[0];
            let t = mesh.faces[inc.face as usize];
            out.push((t[inc.slot as usize], t[(inc.slot as usize + 1) % 3]));
        }
    }
    out.sort_unstable();
    let mut used = vec![false; out.len()];
    let first_from = |v: u32, out: &[(u32, u32)]| out.partition_point(|&(a, _)| a < v);
    let mut loops = Vec::new();
    for start in 0..out.len() {
        if used[start] {
            continue;
        }
        let mut lp = Vec::new();
        let mut cur = start;
        loop {
            used[cur] = true;
            let (a, b) = out[cur];
            lp.push(a);
            let mut k = first_from(b, &out);
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
                None => break,
            }
        }
        loops.push(lp);
    }
    loops
}

#[cfg(test)]
mod tests {
    use super::super::shapes::{icosphere, torus};
    use super::*;

    fn euler(mesh: &TriMesh) -> i64 {
        let e = EdgeTable::new(mesh);
        mesh.n_vertices() as i64 - e.len() as i64 + mesh.n_faces() as i64
    }

    #[test]
    fn euler_characteristic_of_known_surfaces() {
        // V - E + F = 2 - 2g - b (Massey 1991): sphere 2, torus 0.
        assert_eq!(euler(&icosphere(3, 1.0)), 2);
        assert_eq!(euler(&torus(3.0, 1.0, 24, 12)), 0);
    }

    #[test]
    fn bucketed_edge_table_equals_the_sorted_one() {
        let mut m = torus(3.0, 1.0, 9, 7);
        m.faces.push([0, 0, 5]); // repeated index: no self-edge
        m.faces.push([1, 0, 9]); // third face on an edge
        m.faces.reverse();
        let (a, b) = (EdgeTable::new(&m), EdgeTable::new_by_sorting(&m));
        assert_eq!(a.edges, b.edges);
        assert_eq!(a.offsets, b.offsets);
        assert_eq!(a.incidences, b.incidences);
        assert!(a.edges.windows(2).all(|w| w[0] < w[1]));
        // Counts from Euler's formula (Massey 1991): torus chi = 0, so E = V + F.
        assert_eq!(EdgeTable::new(&torus(3.0, 1.0, 9, 7)).len(), 63 + 126);
    }

    #[test]
    fn boundary_loop_of_a_punctured_sphere() {
        let mut m = icosphere(2, 1.0);
        // Remove the five faces around vertex 0: one pentagonal hole.
        m.faces.retain(|t| !t.contains(&0));
        let e = EdgeTable::new(&m);
        let loops = boundary_loops(&m, &e);
        assert_eq!(loops.len(), 1);
        assert_eq!(loops[0].len(), 5);
        let (comp, n) = face_components(&m);
        assert_eq!(n, 1);
        assert!(comp.iter().all(|&c| c == 0));
    }

    #[test]
    fn components_are_ordered_by_size() {
        let a = icosphere(1, 1.0);
        let b = icosphere(0, 1.0);
        let off = b.n_vertices() as u32;
        let mut m = b.clone();
        m.positions
            .extend(a.positions.iter().map(|p| [p[0] + 5.0, p[1], p[2]]));
        m.faces
            .extend(a.faces.iter().map(|t| [t[0] + off, t[1] + off, t[2] + off]));
        let (comp, n) = face_components(&m);
        assert_eq!(n, 2);
        assert_eq!(comp[0], 1, "the small icosahedron comes second");
        assert_eq!(comp[b.n_faces()], 0);
    }

    #[test]
    fn vertex_neighbours_of_the_icosahedron_and_a_tetrahedron() {
        // Icosahedron: every vertex has 5 neighbours (E = 30 edges, each
        // listed from both ends), all at the edge length of the solid.
        let m = icosphere(0, 1.0);
        let (start, list) = vertex_neighbours(m.n_vertices(), &m.faces);
        assert_eq!(start.len(), 13);
        assert_eq!(start[12], 60);
        let edge = 4.0 / (10.0 + 2.0 * 5f64.sqrt()).sqrt(); // circumradius 1
        for i in 0..12 {
            let ns = &list[start[i]..start[i + 1]];
            assert_eq!(ns.len(), 5, "vertex {i}");
            assert!(ns.windows(2).all(|w| w[0] < w[1]), "{ns:?} not sorted");
            for &j in ns {
                let d = super::super::dist(m.positions[i], m.positions[j as usize]);
                assert!((d - edge).abs() < 1e-9, "{i}-{j}: {d} vs {edge}");
                assert!(list[start[j as usize]..start[j as usize + 1]].contains(&(i as u32)));
            }
        }
        // A tetrahedron (faces in any orientation) and an isolated vertex 4.
        let faces = [[0, 2, 1], [0, 1, 3], [1, 2, 3], [0, 3, 2]];
        let (start, list) = vertex_neighbours(5, &faces);
        assert_eq!(start, vec![0, 3, 6, 9, 12, 12]);
        assert_eq!(list, vec![1, 2, 3, 0, 2, 3, 0, 1, 3, 0, 1, 2]);
    }
}
