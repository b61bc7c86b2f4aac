//! Merging duplicate vertices ("welding").
//!
//! In: vertex positions (mm) and a tolerance `tol >= 0` in mm. Out: for every
//! vertex the index of the vertex it is merged into (itself if it survives).
//! What stays true: the lowest index of a group survives; vertices are taken
//! in index order and each one joins the lowest-indexed survivor within `tol`
//! (Euclidean distance), or becomes a survivor itself. Survivors are never
//! merged with each other, so any two survivors are more than `tol` apart
//! and the result does not depend on anything but the input order.
//!
//! With `tol = 0` only bit-identical coordinates merge (with `-0.0 == 0.0`),
//! through a hash map on the coordinates. With `tol > 0` a uniform grid of
//! cell size `tol` is hashed and the 27 cells around a vertex are searched
//! (spatial hashing; Teschner et al., "Optimized spatial hashing for
//! collision detection of deformable objects", Vision, Modeling and
//! Visualization 2003), which finds every survivor within `tol`.

use crate::error::{Error, Result};
use crate::mesh::{dist, Vec3};
use std::collections::HashMap;

/// Representative of every vertex: `rep[v] <= v`, `rep[rep[v]] == rep[v]`.
pub fn weld(positions: &[Vec3], tol: f64) -> Result<Vec<u32>> {
    if !tol.is_finite() || tol < 0.0 {
        return Err(Error::Invalid(format!(
            "merge tolerance {tol} mm: expected a finite number >= 0"
        )));
    }
    if tol == 0.0 {
        return Ok(weld_exact(positions));
    }
    let cell = |p: Vec3| -> [i64; 3] {
        // `as` saturates, so huge coordinates cannot overflow.
        [
            (p[0] / tol).floor() as i64,
            (p[1] / tol).floor() as i64,
            (p[2] / tol).floor() as i64,
        ]
    };
    let mut grid: HashMap<[i64; 3], Vec<u32>> = HashMap::new();
    let mut rep = Vec::with_capacity(positions.len());
    for (v, &p) in positions.iter().enumerate() {
        let c = cell(p);
        let mut found: Option<u32> = None;
        for dx in -1i64..=1 {
            for dy in -1i64..=1 {
                for dz in -1i64..=1 {
                    let key = [
                        c[0].saturating_add(dx),
                        c[1].saturating_add(dy),
                        c[2].saturating_add(dz),
                    ];
                    if let Some(list) = grid.get(&key) {
                        // Survivors are pushed in increasing order: the first
                        // within reach is the lowest in this cell.
                        if let Some(&s) = list
                            .iter()
                            .find(|&&s| dist(positions[s as usize], p) <= tol)
                        {
                            found = Some(found.map_or(s, |f| f.min(s)));
                        }
                    }
                }
            }
        }
        match found {
            Some(s) => rep.push(s),
            None => {
                rep.push(v as u32);
                grid.entry(c).or_default().push(v as u32);
            }
        }
    }
    Ok(rep)
}

fn weld_exact(positions: &[Vec3]) -> Vec<u32> {
    // `x + 0.0` turns -0.0 into +0.0, so the two zeros share a key.
    let key = |p: Vec3| {
        [
            (p[0] + 0.0).to_bits(),
            (p[1] + 0.0).to_bits(),
            (p[2] + 0.0).to_bits(),
        ]
    };
    let mut seen: HashMap<[u64; 3], u32> = HashMap::with_capacity(positions.len());
    positions
        .iter()
        .enumerate()
        .map(|(v, &p)| *seen.entry(key(p)).or_insert(v as u32))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_merges_identical_points_only() {
        let p = vec![
            [0.0, 0.0, 0.0],
            [1.0, 0.0, 0.0],
            [-0.0, 0.0, 0.0],
            [1.0, 0.0, 1e-300],
            [1.0, 0.0, 0.0],
        ];
        assert_eq!(weld(&p, 0.0).unwrap(), vec![0, 1, 0, 3, 1]);
    }

    #[test]
    fn tolerance_joins_the_lowest_survivor_in_reach() {
        // 0 and 2 are 0.15 apart (merge at tol 0.2); 1 is 0.3 from 0 but 0.15
        // from 2: 2 is not a survivor, so 1 survives on its own. Points just
        // across a cell border still merge.
        let p = vec![
            [0.0, 0.0, 0.0],
            [0.3, 0.0, 0.0],
            [0.15, 0.0, 0.0],
            [0.39, 0.0, 0.0],
            [5.0, 5.0, 5.0],
            [4.99, 5.01, 5.0],
        ];
        let r = weld(&p, 0.2).unwrap();
        assert_eq!(r, vec![0, 1, 0, 1, 4, 4]);
        assert!(weld(&p, -1.0).is_err());
        assert!(weld(&p, f64::NAN).is_err());
    }
}
