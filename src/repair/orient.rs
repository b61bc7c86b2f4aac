//! Consistent orientation by breadth-first search over the faces.
//!
//! In: faces where every edge has at most two faces. Out: for every face
//! whether to reverse it so that the two faces of every manifold edge
//! traverse it in opposite directions, or an error naming two faces that
//! cannot agree (the surface is not orientable, e.g. a Moebius strip).
//! What stays true: within each edge-connected piece the orientation that
//! reverses fewer faces is chosen (ties: the seed face, the lowest index,
//! keeps its orientation), so a surface with a few stray reversed faces gets
//! exactly those reversed. Which side is outward is decided later, from the
//! sign of the enclosed volume of the closed surface.
//!
//! The method is the usual propagation of orientation across manifold edges
//! (e.g. Botsch, Kobbelt, Pauly, Alliez, Levy, "Polygon Mesh Processing",
//! AK Peters 2010, ch. 2 and 8).

use crate::error::{Error, Result};
use crate::mesh::topology::EdgeTable;
use std::collections::VecDeque;

/// For every face, true if it must be reversed.
pub fn orient(n_vertices: usize, faces: &[[u32; 3]]) -> Result<Vec<bool>> {
    let edges = EdgeTable::new(&crate::mesh::TriMesh {
        positions: vec![[0.0; 3]; n_vertices],
        faces: faces.to_vec(),
    });
    // Neighbour across each face side: (face, same direction?).
    const NONE: u32 = u32::MAX;
    let mut nb: Vec<(u32, bool)> = vec![(NONE, false); faces.len() * 3];
    for e in 0..edges.len() {
        if edges.valence(e) != 2 {
            continue;
        }
        let inc = edges.faces_of(e);
        let (a, b) = (inc[0], inc[1]);
        let ta = faces[a.face as usize][a.slot as usize];
        let tb = faces[b.face as usize][b.slot as usize];
        let same = ta == tb;
        nb[3 * a.face as usize + a.slot as usize] = (b.face, same);
        nb[3 * b.face as usize + b.slot as usize] = (a.face, same);
    }
    // state: 0 unset, 1 keep, 2 reverse.
    let mut state = vec![0u8; faces.len()];
    let mut queue = VecDeque::new();
    let mut piece: Vec<u32> = Vec::new();
    for seed in 0..faces.len() {
        if state[seed] != 0 {
            continue;
        }
        state[seed] = 1;
        queue.push_back(seed as u32);
        piece.clear();
        while let Some(f) = queue.pop_front() {
            piece.push(f);
            let rev_f = state[f as usize] == 2;
            for k in 0..3 {
                let (g, same) = nb[3 * f as usize + k];
                if g == NONE {
                    continue;
                }
                // After the reversals the two faces must run opposite ways:
                // reverse g exactly when (same direction) xor (f reversed).
                let want = if same != rev_f { 2 } else { 1 };
                match state[g as usize] {
                    0 => {
                        state[g as usize] = want;
                        queue.push_back(g);
                    }
                    s if s == want => {}
                    _ => {
                        return Err(Error::NotReady(format!(
                            "faces {f} and {g} cannot be oriented consistently: the surface is not orientable"
                        )))
                    }
                }
            }
        }
        let reversed = piece.iter().filter(|&&f| state[f as usize] == 2).count();
        if 2 * reversed > piece.len() {
            for &f in &piece {
                state[f as usize] = 3 - state[f as usize];
            }
        }
    }
    Ok(state.iter().map(|&s| s == 2).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn moebius_strip_is_refused() {
        // Moebius strip from 5 quads, the last glued with a half twist:
        // vertices (i, top/bottom); the ends are joined top-to-bottom.
        let n = 5u32;
        let top = |i: u32| 2 * (i % n);
        let bot = |i: u32| 2 * (i % n) + 1;
        let mut faces = Vec::new();
        for i in 0..n {
            let (a, b) = (top(i), bot(i));
            let (c, d) = if i + 1 == n {
                (bot(0), top(0))
            } else {
                (top(i + 1), bot(i + 1))
            };
            faces.push([a, b, d]);
            faces.push([a, d, c]);
        }
        let e = orient(2 * n as usize, &faces).unwrap_err();
        assert!(e.to_string().contains("not orientable"), "{e}");
    }

    #[test]
    fn minority_gets_reversed() {
        // A square of two triangles, the second reversed: it is the one
        // reported (tie: the seed keeps its orientation).
        let faces = vec![[0, 1, 2], [0, 3, 2]];
        assert_eq!(orient(4, &faces).unwrap(), vec![false, true]);
        // Three in a strip, the first reversed: the first is the minority.
        let faces = vec![[0, 2, 1], [2, 1, 3], [2, 3, 4]];
        assert_eq!(orient(5, &faces).unwrap(), vec![true, false, false]);
    }
}
