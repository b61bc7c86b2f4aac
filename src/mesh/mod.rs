//! The shared mesh core: an indexed triangle mesh and the halfedge
//! Delta-complex the mapper flips on.
//!
//! In: positions in millimetres (`f64`) and triangles as `u32` vertex indices,
//! counter-clockwise seen from outside. Out: geometric measures (areas,
//! volume, normals) and the combinatorial structures built from the faces
//! ([`topology::EdgeTable`] for any mesh, [`halfedge::Halfedges`] for closed
//! 2-manifolds). Invariant of a validated [`TriMesh`]: every index is below
//! the vertex count and every coordinate is finite; nothing else is assumed
//! (inspect reports the rest, repair fixes what it can).

pub mod curvature;
pub mod halfedge;
pub mod intersect;
pub mod topology;

use crate::error::{Error, Result};

/// A point or vector in millimetres.
pub type Vec3 = [f64; 3];

/// An indexed triangle mesh: vertex positions (mm) and triangles.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct TriMesh {
    /// Vertex positions in millimetres.
    pub positions: Vec<Vec3>,
    /// Triangles as vertex indices, counter-clockwise seen from outside.
    pub faces: Vec<[u32; 3]>,
}

impl TriMesh {
    /// A mesh from positions and faces, validated with [`TriMesh::validate`].
    pub fn new(positions: Vec<Vec3>, faces: Vec<[u32; 3]>) -> Result<Self> {
        let mesh = TriMesh { positions, faces };
        mesh.validate()?;
        Ok(mesh)
    }

    /// Number of vertices.
    pub fn n_vertices(&self) -> usize {
        self.positions.len()
    }

    /// Number of triangles.
    pub fn n_faces(&self) -> usize {
        self.faces.len()
    }

    /// Check the invariant: at least one vertex and one face, finite
    /// coordinates, indices in range. The error names the first offending
    /// vertex or face.
    pub fn validate(&self) -> Result<()> {
        if self.positions.is_empty() {
            return Err(Error::Invalid("mesh has no vertices".into()));
        }
        if self.faces.is_empty() {
            return Err(Error::Invalid("mesh has no faces".into()));
        }
        if self.positions.len() > u32::MAX as usize - 1 {
            return Err(Error::Invalid(format!(
                "mesh has {} vertices, more than the supported {}",
                self.positions.len(),
                u32::MAX - 1
            )));
        }
        if let Some((i, p)) = self
            .positions
            .iter()
            .enumerate()
            .find(|(_, p)| !p.iter().all(|c| c.is_finite()))
        {
            return Err(Error::Invalid(format!(
                "vertex {i} has a non-finite coordinate ({}, {}, {}); expected finite millimetres",
                p[0], p[1], p[2]
            )));
        }
        let n = self.positions.len() as u32;
        if let Some((f, t)) = self
            .faces
            .iter()
            .enumerate()
            .find(|(_, t)| t.iter().any(|&v| v >= n))
        {
            return Err(Error::Invalid(format!(
                "face {f} has vertex index out of range ({}, {}, {}); expected indices below the vertex count {n}",
                t[0], t[1], t[2]
            )));
        }
        Ok(())
    }

    /// The three corner positions of face `f`.
    #[inline]
    pub fn corners(&self, f: usize) -> [Vec3; 3] {
        let t = self.faces[f];
        [
            self.positions[t[0] as usize],
            self.positions[t[1] as usize],
            self.positions[t[2] as usize],
        ]
    }

    /// Area-weighted normal of face `f` (length = twice the area).
    #[inline]
    pub fn face_cross(&self, f: usize) -> Vec3 {
        let [a, b, c] = self.corners(f);
        cross(sub(b, a), sub(c, a))
    }

    /// Area of face `f` in mm^2.
    #[inline]
    pub fn face_area(&self, f: usize) -> f64 {
        0.5 * norm(self.face_cross(f))
    }

    /// Total surface area in mm^2.
    pub fn area(&self) -> f64 {
        (0..self.n_faces()).map(|f| self.face_area(f)).sum()
    }

    /// Signed enclosed volume in mm^3 (divergence theorem); positive for a
    /// closed, outward-oriented surface. Computed relative to the centroid of
    /// the vertices to limit cancellation.
    pub fn signed_volume(&self) -> f64 {
        let c = self.centroid();
        self.faces
            .iter()
            .map(|t| {
                let a = sub(self.positions[t[0] as usize], c);
                let b = sub(self.positions[t[1] as usize], c);
                let d = sub(self.positions[t[2] as usize], c);
                dot(a, cross(b, d)) / 6.0
            })
            .sum()
    }

    /// Mean of the vertex positions.
    pub fn centroid(&self) -> Vec3 {
        let n = self.positions.len().max(1) as f64;
        let s = self.positions.iter().fold([0.0; 3], |acc, p| add(acc, *p));
        scale(s, 1.0 / n)
    }

    /// Axis-aligned bounding box `(min, max)`.
    pub fn bounding_box(&self) -> (Vec3, Vec3) {
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        for p in &self.positions {
            for k in 0..3 {
                lo[k] = lo[k].min(p[k]);
                hi[k] = hi[k].max(p[k]);
            }
        }
        (lo, hi)
    }

    /// Vertex areas: one third of the area of each incident face (barycentric
    /// lumped mass). Sums to [`TriMesh::area`].
    pub fn vertex_areas(&self) -> Vec<f64> {
        let mut w = vec![0.0; self.n_vertices()];
        for (f, t) in self.faces.iter().enumerate() {
            let a = self.face_area(f) / 3.0;
            for &v in t {
                w[v as usize] += a;
            }
        }
        w
    }

    /// Unit vertex normals (area-weighted average of incident face normals);
    /// a vertex with no faces gets the zero vector.
    pub fn vertex_normals(&self) -> Vec<Vec3> {
        let mut n = vec![[0.0; 3]; self.n_vertices()];
        for f in 0..self.n_faces() {
            let c = self.face_cross(f);
            for &v in &self.faces[f] {
                n[v as usize] = add(n[v as usize], c);
            }
        }
        for v in &mut n {
            let l = norm(*v);
            if l > 0.0 {
                *v = scale(*v, 1.0 / l);
            }
        }
        n
    }
}

/// `a + b`.
#[inline]
pub fn add(a: Vec3, b: Vec3) -> Vec3 {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2]]
}

/// `a - b`.
#[inline]
pub fn sub(a: Vec3, b: Vec3) -> Vec3 {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}

/// `s a`.
#[inline]
pub fn scale(a: Vec3, s: f64) -> Vec3 {
    [a[0] * s, a[1] * s, a[2] * s]
}

/// Dot product.
#[inline]
pub fn dot(a: Vec3, b: Vec3) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

/// Cross product.
#[inline]
pub fn cross(a: Vec3, b: Vec3) -> Vec3 {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

/// Euclidean norm.
#[inline]
pub fn norm(a: Vec3) -> f64 {
    dot(a, a).sqrt()
}

/// Distance between two points.
#[inline]
pub fn dist(a: Vec3, b: Vec3) -> f64 {
    norm(sub(a, b))
}

/// Test shapes built from formulas, used by tests, benchmarks and the
/// synthetic generator: icosahedral spheres, tori and the like.
pub mod shapes;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tetrahedron_measures() {
        // Right-angled corner tetrahedron: volume 1/6, area 3/2 + sqrt(3)/2.
        let m = TriMesh::new(
            vec![[0., 0., 0.], [1., 0., 0.], [0., 1., 0.], [0., 0., 1.]],
            vec![[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]],
        )
        .unwrap();
        assert!((m.signed_volume() - 1.0 / 6.0).abs() < 1e-15);
        assert!((m.area() - (1.5 + 3f64.sqrt() / 2.0)).abs() < 1e-14);
        let va: f64 = m.vertex_areas().iter().sum();
        assert!((va - m.area()).abs() < 1e-14);
    }

    #[test]
    fn validate_names_the_offender() {
        let e = TriMesh::new(vec![[0., 0., f64::NAN]], vec![[0, 0, 0]]).unwrap_err();
        assert!(e.to_string().contains("vertex 0"), "{e}");
        let e = TriMesh::new(vec![[0.; 3]; 3], vec![[0, 1, 2], [0, 1, 3]]).unwrap_err();
        assert!(e.to_string().contains("face 1"), "{e}");
        assert!(TriMesh::new(vec![], vec![]).is_err());
    }
}
