//! Halfedge Delta-complex for closed triangulated surfaces.
//!
//! In: the faces of a closed, consistently oriented 2-manifold. Out: a
//! structure on which edges can be flipped intrinsically. After flips an edge
//! may join a vertex to itself, two vertices may share several edges, and
//! both sides of one edge may lie in the same triangle: a general
//! Delta-complex (Gillespie, Springborn, Crane, "Discrete conformal
//! equivalence of polyhedral surfaces", ACM Trans. Graph. 40(4), 2021). Code
//! on this structure therefore never identifies an edge by its end vertices;
//! it works with halfedge and edge ids only.
//!
//! Layout (flat arrays, no pointers): the halfedges of face `f` are `3f`,
//! `3f + 1`, `3f + 2` in counter-clockwise order, so `next`, `prev` and
//! `face` are arithmetic. Per halfedge `h` we store its tail vertex
//! `tail[h]`, its opposite halfedge `twin[h]` and its edge id `edge[h]`;
//! per edge one halfedge `edge_half[e]`; per vertex one outgoing halfedge
//! `vertex_half[v]`.
//!
//! Invariants (checked by [`Halfedges::check`]): `twin` is a fixed-point-free
//! involution, `edge[h] == edge[twin[h]]`, `tail[twin[h]] == tail[next[h]]`,
//! `tail[vertex_half[v]] == v`, and a flip keeps all of them and the Euler
//! characteristic.

use crate::error::{Error, Result};

/// The halfedge Delta-complex. See the module documentation for the layout.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Halfedges {
    /// Tail (origin) vertex of each halfedge.
    pub tail: Vec<u32>,
    /// Opposite halfedge.
    pub twin: Vec<u32>,
    /// Edge id of each halfedge.
    pub edge: Vec<u32>,
    /// One halfedge of each edge.
    pub edge_half: Vec<u32>,
    /// One outgoing halfedge of each vertex.
    pub vertex_half: Vec<u32>,
}

/// Next halfedge in the same face.
#[inline(always)]
pub fn next(h: u32) -> u32 {
    if h % 3 == 2 {
        h - 2
    } else {
        h + 1
    }
}

/// Previous halfedge in the same face.
#[inline(always)]
pub fn prev(h: u32) -> u32 {
    if h.is_multiple_of(3) {
        h + 2
    } else {
        h - 1
    }
}

/// Face of a halfedge.
#[inline(always)]
pub fn face(h: u32) -> u32 {
    h / 3
}

impl Halfedges {
    /// Build from the faces of a closed, consistently oriented 2-manifold
    /// with `n_vertices` vertices, every one used. Errors name the first
    /// boundary edge, non-manifold edge, orientation conflict or unused vertex.
    pub fn from_faces(n_vertices: usize, faces: &[[u32; 3]]) -> Result<Self> {
        let nh = faces.len() * 3;
        if nh >= u32::MAX as usize {
            return Err(Error::Invalid(
                "too many faces for 32-bit halfedge ids".into(),
            ));
        }
        let mut tail = vec![0u32; nh];
        for (f, t) in faces.iter().enumerate() {
            for k in 0..3 {
                if t[k] as usize >= n_vertices {
                    return Err(Error::Invalid(format!(
                        "face {f} has vertex index {} out of range",
                        t[k]
                    )));
                }
                if t[k] == t[(k + 1) % 3] {
                    return Err(Error::Invalid(format!("face {f} repeats vertex {}", t[k])));
                }
                tail[3 * f + k] = t[k];
            }
        }
        // Match each directed side a->b with its opposite b->a by sorting.
        let key = |h: usize| -> (u32, u32) {
            let a = tail[h];
            let b = tail[next(h as u32) as usize];
            (a.min(b), a.max(b))
        };
        let mut order: Vec<u32> = (0..nh as u32).collect();
        order.sort_unstable_by_key(|&h| (key(h as usize), h));
        let mut twin = vec![u32::MAX; nh];
        let mut edge = vec![0u32; nh];
        let mut edge_half = Vec::with_capacity(nh / 2);
        let mut i = 0;
        while i < nh {
            let k = key(order[i] as usize);
            let mut j = i + 1;
            while j < nh && key(order[j] as usize) == k {
                j += 1;
            }
            let (v0, v1) = k;
            match j - i {
                1 => {
                    return Err(Error::Invalid(format!(
                        "edge ({v0}, {v1}) has only one face: the surface is not closed"
                    )))
                }
                2 => {}
                n => {
                    return Err(Error::Invalid(format!(
                        "edge ({v0}, {v1}) has {n} faces: the surface is not a 2-manifold"
                    )))
                }
            }
            let (h0, h1) = (order[i], order[i + 1]);
            if tail[h0 as usize] == tail[h1 as usize] {
                return Err(Error::Invalid(format!(
                    "faces {} and {} traverse edge ({v0}, {v1}) in the same direction: inconsistent orientation",
                    face(h0),
                    face(h1)
                )));
            }
            let e = edge_half.len() as u32;
            twin[h0 as usize] = h1;
            twin[h1 as usize] = h0;
            edge[h0 as usize] = e;
            edge[h1 as usize] = e;
            edge_half.push(h0);
            i = j;
        }
        let mut vertex_half = vec![u32::MAX; n_vertices];
        for (h, &v) in tail.iter().enumerate() {
            if vertex_half[v as usize] == u32::MAX {
                vertex_half[v as usize] = h as u32;
            }
        }
        if let Some(v) = vertex_half.iter().position(|&h| h == u32::MAX) {
            return Err(Error::Invalid(format!("vertex {v} belongs to no face")));
        }
        let he = Halfedges {
            tail,
            twin,
            edge,
            edge_half,
            vertex_half,
        };
        he.check_vertex_fans()?;
        Ok(he)
    }

    /// Number of halfedges.
    pub fn n_halfedges(&self) -> usize {
        self.tail.len()
    }

    /// Number of edges.
    pub fn n_edges(&self) -> usize {
        self.edge_half.len()
    }

    /// Number of faces.
    pub fn n_faces(&self) -> usize {
        self.tail.len() / 3
    }

    /// Number of vertices.
    pub fn n_vertices(&self) -> usize {
        self.vertex_half.len()
    }

    /// Head (tip) vertex of halfedge `h`.
    #[inline(always)]
    pub fn head(&self, h: u32) -> u32 {
        self.tail[next(h) as usize]
    }

    /// Next outgoing halfedge of the same vertex, turning clockwise... i.e.
    /// `twin(prev(h))`: successive calls visit every outgoing halfedge of
    /// `tail[h]` once around a manifold vertex.
    #[inline(always)]
    pub fn rotate(&self, h: u32) -> u32 {
        self.twin[prev(h) as usize]
    }

    /// Outgoing halfedges of vertex `v`, once around.
    pub fn outgoing(&self, v: u32) -> impl Iterator<Item = u32> + '_ {
        let start = self.vertex_half[v as usize];
        let mut cur = Some(start);
        std::iter::from_fn(move || {
            let h = cur?;
            let n = self.rotate(h);
            cur = if n == start { None } else { Some(n) };
            Some(h)
        })
    }

    /// Vertex degree counted in halfedges (a loop counts twice).
    pub fn degree(&self, v: u32) -> usize {
        self.outgoing(v).count()
    }

    /// Every vertex's fan of outgoing halfedges must hold all its halfedges;
    /// otherwise the vertex is a bow-tie (non-manifold vertex).
    fn check_vertex_fans(&self) -> Result<()> {
        let mut count = vec![0u32; self.n_vertices()];
        for &v in &self.tail {
            count[v as usize] += 1;
        }
        for v in 0..self.n_vertices() as u32 {
            let n = self
                .outgoing(v)
                .take(count[v as usize] as usize + 1)
                .count() as u32;
            if n != count[v as usize] {
                return Err(Error::Invalid(format!(
                    "vertex {v} joins {} separate fans of faces: a non-manifold (bow-tie) vertex",
                    if n < count[v as usize] {
                        "several"
                    } else {
                        "inconsistent"
                    }
                )));
            }
        }
        Ok(())
    }

    /// True if edge `e` can be flipped: its two sides lie in different faces.
    #[inline]
    pub fn is_flippable(&self, e: u32) -> bool {
        let h = self.edge_half[e as usize];
        face(h) != face(self.twin[h as usize])
    }

    /// Flip edge `e` inside its quad. With `h = edge_half[e]` running `a -> b`
    /// in triangle `(a, b, c)` and its twin in `(b, a, d)`, the edge becomes
    /// `c -> d`... precisely: afterwards face of `h` is `(d, c, a)` with `h`
    /// running `d -> c`, and the twin's face is `(c, d, b)`. The edge keeps
    /// its id; the four outer edges keep theirs. Returns false (and changes
    /// nothing) if both sides of `e` lie in one face.
    pub fn flip(&mut self, e: u32) -> bool {
        let h0 = self.edge_half[e as usize];
        let h1 = self.twin[h0 as usize];
        if face(h0) == face(h1) {
            return false;
        }
        let (h0n, h0p, h1n, h1p) = (next(h0), prev(h0), next(h1), prev(h1));
        let a = self.tail[h0 as usize];
        let b = self.tail[h1 as usize];
        let c = self.tail[h0p as usize];
        let d = self.tail[h1p as usize];
        // Old outer halfedges and their data: b->c (h0n), c->a (h0p),
        // a->d (h1n), d->b (h1p).
        let old = [h0n, h0p, h1n, h1p];
        let tw = [
            self.twin[h0n as usize],
            self.twin[h0p as usize],
            self.twin[h1n as usize],
            self.twin[h1p as usize],
        ];
        let ed = [
            self.edge[h0n as usize],
            self.edge[h0p as usize],
            self.edge[h1n as usize],
            self.edge[h1p as usize],
        ];
        // New slots: face of h0 = (d->c [h0], c->a [h0n], a->d [h0p]);
        // face of h1 = (c->d [h1], d->b [h1n], b->c [h1p]).
        // Old outer halfedge -> its new slot.
        let new = [h1p, h0n, h0p, h1n];
        let map = |x: u32| -> u32 {
            for k in 0..4 {
                if old[k] == x {
                    return new[k];
                }
            }
            x
        };
        self.tail[h0 as usize] = d;
        self.tail[h0n as usize] = c;
        self.tail[h0p as usize] = a;
        self.tail[h1 as usize] = c;
        self.tail[h1n as usize] = d;
        self.tail[h1p as usize] = b;
        for k in 0..4 {
            let s = new[k];
            let t = map(tw[k]);
            self.twin[s as usize] = t;
            self.twin[t as usize] = s;
            self.edge[s as usize] = ed[k];
            self.edge_half[ed[k] as usize] = s;
        }
        // h0 and h1 stay twins with edge e.
        self.vertex_half[a as usize] = h0p;
        self.vertex_half[b as usize] = h1p;
        self.vertex_half[c as usize] = h0n;
        self.vertex_half[d as usize] = h0;
        true
    }

    /// Check the structural invariants listed in the module documentation.
    pub fn check(&self) -> Result<()> {
        let nh = self.n_halfedges() as u32;
        for h in 0..nh {
            let t = self.twin[h as usize];
            if t >= nh || t == h || self.twin[t as usize] != h {
                return Err(Error::Invalid(format!(
                    "halfedge {h}: twin is not an involution"
                )));
            }
            if self.edge[h as usize] != self.edge[t as usize] {
                return Err(Error::Invalid(format!(
                    "halfedge {h}: twin has another edge id"
                )));
            }
            if self.tail[t as usize] != self.head(h) {
                return Err(Error::Invalid(format!(
                    "halfedge {h}: twin does not run backwards"
                )));
            }
        }
        for (e, &h) in self.edge_half.iter().enumerate() {
            if self.edge[h as usize] as usize != e {
                return Err(Error::Invalid(format!(
                    "edge {e}: edge_half points elsewhere"
                )));
            }
        }
        for (v, &h) in self.vertex_half.iter().enumerate() {
            if self.tail[h as usize] as usize != v {
                return Err(Error::Invalid(format!(
                    "vertex {v}: vertex_half does not leave it"
                )));
            }
        }
        Ok(())
    }

    /// Euler characteristic `V - E + F`.
    pub fn euler_characteristic(&self) -> i64 {
        self.n_vertices() as i64 - self.n_edges() as i64 + self.n_faces() as i64
    }
}

#[cfg(test)]
mod tests {
    use super::super::shapes::icosphere;
    use super::*;

    #[test]
    fn builds_and_checks_icosphere() {
        let m = icosphere(2, 1.0);
        let he = Halfedges::from_faces(m.n_vertices(), &m.faces).unwrap();
        he.check().unwrap();
        assert_eq!(he.euler_characteristic(), 2);
        assert_eq!(he.degree(0), 5);
        assert_eq!(he.degree(20), 6);
    }

    #[test]
    fn flip_twice_restores_the_quad() {
        let m = icosphere(1, 1.0);
        let he0 = Halfedges::from_faces(m.n_vertices(), &m.faces).unwrap();
        for e in 0..he0.n_edges() as u32 {
            let mut he = he0.clone();
            assert!(he.flip(e));
            he.check().unwrap();
            assert!(he.flip(e));
            he.check().unwrap();
            // The second flip brings back the original diagonal of the quad.
            let h = he.edge_half[e as usize];
            let pair = |he: &Halfedges, h: u32| {
                let (a, b) = (he.tail[h as usize], he.head(h));
                (a.min(b), a.max(b))
            };
            assert_eq!(pair(&he, h), pair(&he0, he0.edge_half[e as usize]));
        }
    }

    #[test]
    fn many_random_flips_keep_a_delta_complex() {
        // Flip edges of an icosahedron pseudo-randomly until loops and
        // multi-edges appear; invariants and Euler characteristic stay.
        let m = icosphere(0, 1.0);
        let mut he = Halfedges::from_faces(m.n_vertices(), &m.faces).unwrap();
        let mut x: u64 = 0x9E3779B97F4A7C15;
        let mut flips = 0;
        for _ in 0..5000 {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            let e = (x % he.n_edges() as u64) as u32;
            if he.flip(e) {
                flips += 1;
            }
            he.check().unwrap();
            assert_eq!(he.euler_characteristic(), 2);
            let total: usize = (0..12).map(|v| he.degree(v)).sum();
            assert_eq!(total, he.n_halfedges());
        }
        assert!(flips > 1000);
    }

    #[test]
    fn rejects_open_and_nonmanifold() {
        let m = icosphere(1, 1.0);
        let mut faces = m.faces.clone();
        faces.pop();
        let err = Halfedges::from_faces(m.n_vertices(), &faces).unwrap_err();
        assert!(err.to_string().contains("not closed"), "{err}");
        let mut faces = m.faces.clone();
        faces[0] = [faces[0][0], faces[0][2], faces[0][1]];
        assert!(Halfedges::from_faces(m.n_vertices(), &faces).is_err());
    }
}
