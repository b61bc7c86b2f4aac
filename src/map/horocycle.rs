//! Horocyclic distances from the pole vertex.
//!
//! In: an intrinsic triangulation ([`Intrinsic`], unscaled Penner
//! coordinates) and a pole vertex `p`. Out: for every other vertex `i` the
//! number `d_i = min lam_e` over the edges `e = (p, i)` of the Delaunay
//! triangulation for the scaling `u_p = -M`, `u = 0` elsewhere, with `M` so
//! large that every triangle has the pole as a corner. These are the bounds
//! of the constrained minimisation: a vertex whose log factor reaches
//! `-d_i` touches the horosphere at the pole (Springborn, "Ideal hyperbolic
//! polyhedra and discrete uniformization", Discrete Comput. Geom. 64 (2020)
//! 63-108; Gillespie, Springborn, Crane, "Discrete conformal equivalence of
//! polyhedral surfaces", ACM Trans. Graph. 40(4) (2021) 103).
//!
//! What stays true: `M` is chosen adaptively (start at 60, multiply by 1.6)
//! until every triangle touches the pole, every vertex is joined to it, and
//! `M` exceeds the spread of the `d_i` by 20; beyond that the `d_i` no longer
//! change. Vertices end up alone inside loops at the pole, in folded
//! triangles `(p, i, p)`; the Delta-complex supports that and such edges are
//! never flipped.

use super::intrinsic::{FlipWork, Intrinsic, Scaling};
use crate::error::{Error, Result};

/// The distances and what it took to get them.
#[derive(Debug, Clone)]
pub struct Horocycles {
    /// `d_i` per vertex (`0` at the pole).
    pub d: Vec<f64>,
    /// The final `M`.
    pub m: f64,
    /// Flips performed.
    pub flips: u64,
    /// Rounds of `M`.
    pub rounds: u32,
}

/// Horocyclic distances of every vertex from `pole`, starting from (a copy
/// of) `input`.
pub fn horocyclic_distances(
    input: &Intrinsic,
    pole: u32,
    work: &mut FlipWork,
) -> Result<Horocycles> {
    let n = input.he.n_vertices();
    if pole as usize >= n {
        return Err(Error::Invalid(format!(
            "pole vertex {pole} is not below the vertex count {n}"
        )));
    }
    let zero = vec![0.0; n];
    let mut x = input.clone();
    let mut m = 60.0;
    let mut flips = 0u64;
    let mut d = vec![f64::INFINITY; n];
    for round in 1..=12u32 {
        let s = Scaling {
            u: &zero,
            pole,
            t: -m,
        };
        flips += x.flip_to_delaunay(&s, work)?;
        let he = &x.he;
        let all_touch =
            (0..he.n_faces() as u32).all(|f| (0..3).any(|k| he.tail[(3 * f + k) as usize] == pole));
        d.iter_mut().for_each(|v| *v = f64::INFINITY);
        for h in he.outgoing(pole) {
            let i = he.head(h);
            if i != pole {
                let l = x.lam[he.edge[h as usize] as usize];
                if l < d[i as usize] {
                    d[i as usize] = l;
                }
            }
        }
        d[pole as usize] = 0.0;
        let all_joined = d.iter().all(|v| v.is_finite());
        if all_touch && all_joined {
            let (lo, hi) = d
                .iter()
                .enumerate()
                .filter(|(i, _)| *i as u32 != pole)
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), (_, &v)| {
                    (lo.min(v), hi.max(v))
                });
            if m > hi - lo + 20.0 {
                return Ok(Horocycles {
                    d,
                    m,
                    flips,
                    rounds: round,
                });
            }
        }
        m *= 1.6;
    }
    Err(Error::Algorithm {
        stage: "map: horocyclic distances",
        message: format!("no pole-dominated triangulation up to M = {m:.0}: the edge lengths span too many orders of magnitude"),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;

    #[test]
    fn distances_are_stable_and_minimal() {
        let m = icosphere(2, 1.0);
        let pos: Vec<[f64; 3]> = m
            .positions
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let r = 1.0 + 0.3 * ((i * 7919) % 13) as f64 / 13.0;
                [p[0] * r, p[1] * r, p[2] * r * 2.0]
            })
            .collect();
        let mut x = Intrinsic::from_mesh(&pos, &m.faces).unwrap();
        let z = vec![0.0; x.he.n_vertices()];
        let mut w = FlipWork::default();
        x.flip_to_delaunay(&Scaling::plain(&z), &mut w).unwrap();
        let h = horocyclic_distances(&x, 4, &mut w).unwrap();
        assert!(h.flips > 0);
        // A larger M gives the same distances (uniformization.md section 4).
        let mut y = x.clone();
        let s = Scaling {
            u: &z,
            pole: 4,
            t: -(h.m * 2.0),
        };
        y.flip_to_delaunay(&s, &mut w).unwrap();
        let mut worst: f64 = 0.0;
        let mut d2 = vec![f64::INFINITY; z.len()];
        for hh in y.he.outgoing(4) {
            let i = y.he.head(hh) as usize;
            d2[i] = d2[i].min(y.lam[y.he.edge[hh as usize] as usize]);
        }
        for (i, (a, b)) in d2.iter().zip(&h.d).enumerate() {
            if i != 4 {
                worst = worst.max((a - b).abs());
            }
        }
        assert!(worst < 1e-9, "{worst}");
        // Each distance is at most the pole edge's own log length in the input
        // (the horocyclic distance shrinks under Ptolemy flips toward the pole).
        for hh in x.he.outgoing(4) {
            let i = x.he.head(hh) as usize;
            assert!(h.d[i] <= x.lam[x.he.edge[hh as usize] as usize] + 1e-12);
        }
    }
}
