//! Combinatorial clean-up before orientation and hole filling: degenerate
//! and duplicate faces, the largest component, non-manifold edges and
//! bow-tie vertices.
//!
//! In: positions and faces (any soup of triangles with indices in range).
//! Out: which faces to keep, the components, the first non-manifold edge, and
//! the fans of faces around each vertex. What stays true: every function is
//! deterministic in the input order (ties go to the lowest index).
//!
//! Components are taken across edges (two faces are connected when they
//! share an edge, manifold or not), so two pieces that touch at a single
//! vertex are two components. A bow-tie vertex is one whose faces fall into
//! several fans (maximal sets of faces joined through manifold edges at that
//! vertex); splitting it gives each further fan its own copy of the vertex,
//! the standard way to make the vertex manifold without moving anything
//! (Gueziec, Taubin, Lazarus, Horn, "Cutting and stitching: converting sets
//! of polygons to manifold surfaces", IEEE TVCG 7(2), 2001).

use crate::mesh::topology::{EdgeTable, UnionFind};
use crate::mesh::{cross, dist, norm, sub, Vec3};
use std::collections::HashMap;

/// Why a face was dropped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Degeneracy {
    /// Two corners share a vertex index.
    RepeatedVertex,
    /// Distinct corners but no area (collinear or coincident points, up to
    /// rounding).
    ZeroArea,
}

/// Classify face `t`: `None` when it is a proper triangle. A face has zero
/// area when twice its area, `|(b - a) x (c - a)|`, is at most
/// `16 eps L (L + M)`, with `L` its longest edge, `M` the largest absolute
/// coordinate of its corners and `eps` the machine epsilon: the size of the
/// rounding error of the cross product, so points collinear up to rounding
/// are caught while a thin but real sliver (height 1e-9 of its length) is kept.
pub fn degeneracy(positions: &[Vec3], t: [u32; 3]) -> Option<Degeneracy> {
    if t[0] == t[1] || t[1] == t[2] || t[2] == t[0] {
        return Some(Degeneracy::RepeatedVertex);
    }
    let [a, b, c] = t.map(|v| positions[v as usize]);
    let l = dist(a, b).max(dist(b, c)).max(dist(c, a));
    let m = [a, b, c]
        .iter()
        .flat_map(|p| p.iter())
        .fold(0.0f64, |acc, x| acc.max(x.abs()));
    let twice = norm(cross(sub(b, a), sub(c, a)));
    if twice <= 16.0 * f64::EPSILON * l * (l + m) {
        Some(Degeneracy::ZeroArea)
    } else {
        None
    }
}

/// For every face, the index of an earlier face with the same three vertices
/// (in any order or orientation), if there is one.
pub fn duplicate_of(faces: &[[u32; 3]]) -> Vec<Option<u32>> {
    let mut first: HashMap<[u32; 3], u32> = HashMap::with_capacity(faces.len());
    faces
        .iter()
        .enumerate()
        .map(|(f, t)| {
            let mut k = *t;
            k.sort_unstable();
            let e = *first.entry(k).or_insert(f as u32);
            (e != f as u32).then_some(e)
        })
        .collect()
}

/// Components of the faces across shared edges: the component of every face,
/// numbered by decreasing face count (ties: lowest first face first), and the
/// face count of each component.
pub fn edge_components(n_vertices: usize, faces: &[[u32; 3]]) -> (Vec<u32>, Vec<usize>) {
    let mesh_edges = EdgeTable::new(&crate::mesh::TriMesh {
        positions: vec![[0.0; 3]; n_vertices],
        faces: faces.to_vec(),
    });
    let mut uf = UnionFind::new(faces.len());
    for e in 0..mesh_edges.len() {
        let inc = mesh_edges.faces_of(e);
        if let Some(first) = inc.first() {
            for other in &inc[1..] {
                uf.union(first.face, other.face);
            }
        }
    }
    let mut id_of_root: HashMap<u32, usize> = HashMap::new();
    let mut counts: Vec<(usize, usize)> = Vec::new();
    let mut ids = Vec::with_capacity(faces.len());
    for f in 0..faces.len() {
        let r = uf.find(f as u32);
        let id = *id_of_root.entry(r).or_insert_with(|| {
            counts.push((0, f));
            counts.len() - 1
        });
        counts[id].0 += 1;
        ids.push(id);
    }
    let mut order: Vec<usize> = (0..counts.len()).collect();
    order.sort_by_key(|&i| (std::cmp::Reverse(counts[i].0), counts[i].1));
    let mut rank = vec![0u32; counts.len()];
    for (r, &i) in order.iter().enumerate() {
        rank[i] = r as u32;
    }
    let sizes = order.iter().map(|&i| counts[i].0).collect();
    (ids.iter().map(|&i| rank[i]).collect(), sizes)
}

/// The first edge (in vertex order) with more than two faces, with its face
/// count, and the number of such edges.
pub fn non_manifold_edges(edges: &EdgeTable) -> Option<([u32; 2], usize, usize)> {
    let mut first = None;
    let mut count = 0;
    for e in 0..edges.len() {
        let n = edges.valence(e);
        if n > 2 {
            count += 1;
            if first.is_none() {
                first = Some((edges.edges[e], n));
            }
        }
    }
    first.map(|(edge, n)| (edge, n, count))
}

/// A bow-tie vertex that was split.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Split {
    /// The vertex (working index) that kept the first fan.
    pub vertex: u32,
    /// The new vertices (working indices), one per further fan.
    pub copies: Vec<u32>,
}

/// Split every bow-tie vertex: faces around a vertex are grouped into fans
/// joined through edges with exactly two faces; the fan holding the vertex's
/// lowest corner (face-major order) keeps the vertex, every further fan gets
/// a new vertex numbered from `n_vertices` upwards in order of vertices and
/// fans. `faces` is rewritten in place. Call only when no edge has more than
/// two faces.
pub fn split_bowties(n_vertices: usize, faces: &mut [[u32; 3]]) -> Vec<Split> {
    let edges = EdgeTable::new(&crate::mesh::TriMesh {
        positions: vec![[0.0; 3]; n_vertices],
        faces: faces.to_vec(),
    });
    // Corners c = 3 f + k; join the corners of the same vertex in the two
    // faces of every manifold edge.
    let corner_of = |f: u32, v: u32, faces: &[[u32; 3]]| -> Option<u32> {
        let t = faces.get(f as usize)?;
        t.iter().position(|&x| x == v).map(|k| 3 * f + k as u32)
    };
    let mut uf = UnionFind::new(faces.len() * 3);
    for e in 0..edges.len() {
        if edges.valence(e) != 2 {
            continue;
        }
        let inc = edges.faces_of(e);
        let (f1, f2) = (inc[0].face, inc[1].face);
        for v in edges.edges[e] {
            if let (Some(c1), Some(c2)) = (corner_of(f1, v, faces), corner_of(f2, v, faces)) {
                uf.union(c1, c2);
            }
        }
    }
    // First fan root seen per vertex keeps the vertex.
    let mut keeper: Vec<u32> = vec![u32::MAX; n_vertices];
    let mut copies: HashMap<u32, u32> = HashMap::new(); // root -> new vertex
    let mut split_of: HashMap<u32, usize> = HashMap::new(); // vertex -> index in splits
    let mut splits: Vec<Split> = Vec::new();
    let mut next = n_vertices as u32;
    // Visit corners in order; assign fans in order of first corner.
    let mut new_index = vec![u32::MAX; faces.len() * 3];
    for c in 0..faces.len() * 3 {
        let v = faces[c / 3][c % 3];
        let r = uf.find(c as u32);
        if keeper[v as usize] == u32::MAX {
            keeper[v as usize] = r;
        }
        if keeper[v as usize] == r {
            continue;
        }
        let nv = *copies.entry(r).or_insert_with(|| {
            let s = *split_of.entry(v).or_insert_with(|| {
                splits.push(Split {
                    vertex: v,
                    copies: Vec::new(),
                });
                splits.len() - 1
            });
            let nv = next;
            splits[s].copies.push(nv);
            next += 1;
            nv
        });
        new_index[c] = nv;
    }
    for (c, &nv) in new_index.iter().enumerate() {
        if nv != u32::MAX {
            faces[c / 3][c % 3] = nv;
        }
    }
    splits
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn degeneracy_kinds() {
        let p = vec![
            [0.0, 0.0, 0.0],
            [1.0, 0.0, 0.0],
            [2.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [100.1, 0.0, 0.0],
            [100.2, 0.0, 0.0],
            [100.3, 0.0, 0.0],
        ];
        assert_eq!(degeneracy(&p, [0, 1, 1]), Some(Degeneracy::RepeatedVertex));
        assert_eq!(degeneracy(&p, [0, 1, 2]), Some(Degeneracy::ZeroArea));
        // Collinear up to rounding (0.1 steps are not exact in binary).
        assert_eq!(degeneracy(&p, [4, 5, 6]), Some(Degeneracy::ZeroArea));
        assert_eq!(degeneracy(&p, [0, 1, 3]), None);
        // A thin but real sliver (height 1e-9 mm over 1 mm) is kept.
        let q = vec![[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.5, 1e-9, 0.0]];
        assert_eq!(degeneracy(&q, [0, 1, 2]), None);
    }

    #[test]
    fn duplicates_regardless_of_orientation() {
        let f = vec![[0, 1, 2], [1, 2, 0], [2, 1, 0], [0, 1, 3]];
        assert_eq!(duplicate_of(&f), vec![None, Some(0), Some(0), None]);
    }

    #[test]
    fn two_tetrahedra_touching_at_a_vertex_are_two_components() {
        let tet = [[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]];
        let mut faces: Vec<[u32; 3]> = tet.to_vec();
        // Second tetrahedron on vertices 3, 4, 5, 6 (shares vertex 3 only),
        // with one extra face so it is the larger.
        faces.extend(tet.iter().map(|t| t.map(|v| v + 3)));
        faces.push([4, 5, 6]);
        let (comp, sizes) = edge_components(7, &faces);
        assert_eq!(sizes, vec![5, 4]);
        assert_eq!(&comp[..4], &[1, 1, 1, 1]);
        assert!(comp[4..].iter().all(|&c| c == 0));
    }

    #[test]
    fn bowtie_vertex_gets_one_copy_per_extra_fan() {
        // Two triangles meeting only at vertex 0, plus a third sharing an
        // edge with the first.
        let mut faces = vec![[0, 1, 2], [0, 3, 4], [0, 2, 5]];
        let splits = split_bowties(6, &mut faces);
        assert_eq!(
            splits,
            vec![Split {
                vertex: 0,
                copies: vec![6]
            }]
        );
        assert_eq!(faces, vec![[0, 1, 2], [6, 3, 4], [0, 2, 5]]);
    }
}
