//! Taubin lambda|mu smoothing (Taubin 1995, "A signal processing approach
//! to fair surface design", SIGGRAPH '95, pp. 351-358).
//!
//! In: a mesh, a number of iterations, `lambda > 0` and `mu < -lambda`.
//! Out: the mesh with moved vertices; faces unchanged. Each iteration is
//! one step `x += lambda * L x` then one step `x += mu * L x` with the
//! umbrella operator `L x_i = mean of neighbours - x_i` (uniform weights,
//! as in the paper). The pair is a low-pass filter with pass-band
//! frequency `k_pb = 1/lambda + 1/mu`, so, unlike plain Laplacian
//! smoothing, it does not shrink the surface. Each step reads the previous
//! positions only, so the result is the same for any number of threads.

use crate::mesh::topology::vertex_neighbours;
use crate::mesh::TriMesh;
use rayon::prelude::*;

/// Taubin's example values: `lambda = 0.5`, `k_pb = 0.1` gives `mu = -0.5263`.
pub const LAMBDA: f64 = 0.5;
/// See [`LAMBDA`]: `mu = 1 / (k_pb - 1 / lambda)` with `k_pb = 0.1`.
pub const MU: f64 = 1.0 / (0.1 - 1.0 / LAMBDA);

/// Smooth `mesh` in place with `iterations` lambda|mu pairs.
pub fn taubin(mesh: &mut TriMesh, iterations: usize, lambda: f64, mu: f64) {
    if iterations == 0 {
        return;
    }
    let n = mesh.n_vertices();
    // Neighbour lists (CSR), each undirected edge once per end, sorted.
    let (start, nbr) = vertex_neighbours(n, &mesh.faces);
    let mut next = mesh.positions.clone();
    for _ in 0..iterations {
        for &w in &[lambda, mu] {
            let cur = &mesh.positions;
            next.par_iter_mut().enumerate().for_each(|(i, out)| {
                let ns = &nbr[start[i]..start[i + 1]];
                let p = cur[i];
                if ns.is_empty() {
                    *out = p;
                    return;
                }
                let mut m = [0.0; 3];
                for &j in ns {
                    let q = cur[j as usize];
                    m[0] += q[0];
                    m[1] += q[1];
                    m[2] += q[2];
                }
                let inv = 1.0 / ns.len() as f64;
                for k in 0..3 {
                    out[k] = p[k] + w * (m[k] * inv - p[k]);
                }
            });
            std::mem::swap(&mut mesh.positions, &mut next);
        }
    }
}
