//! From mask values to one solid piece of voxels, ready for the surface.
//!
//! In: voxel values (x fastest), dimensions and a level. Out: a [`Solid`]:
//! a padded binary grid (`1` foreground, `0` background, a wall of `WALL`
//! around it) and a [`MaskReport`]. Steps: threshold (foreground where the
//! value is above the level), fill interior cavities (background voxels
//! not 18-connected to the border become foreground), keep the largest
//! 6-connected foreground piece (ties: the piece met first in voxel order).
//! What stays true afterwards: the foreground is one 6-connected piece, the
//! background one 18-connected piece through the padding. These are the
//! connectivities the surface table realises (`volume::table`), so the
//! surface is one closed sphere-with-handles (digital topology: Kong and
//! Rosenfeld 1989, Computer Vision, Graphics, and Image Processing
//! 48:357-393, on the (6, 18) pair).

use crate::error::{Error, Result};

/// Wall marker around the padded grid (never visited, never foreground).
pub const WALL: u8 = 3;

/// What the mask steps did.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct MaskReport {
    /// Voxels above the level.
    pub above_level: usize,
    /// Background voxels in cavities, made foreground.
    pub cavity_voxels_filled: usize,
    /// Cavities (18-connected background pieces off the border) filled.
    pub cavities_filled: usize,
    /// 6-connected foreground pieces after filling.
    pub pieces: usize,
    /// Voxels of the smaller pieces, dropped.
    pub dropped_voxels: usize,
    /// Voxels of the piece kept.
    pub kept_voxels: usize,
}

/// A padded binary grid: data voxel `(i, j, k)` sits at `(i + 2, j + 2, k + 2)`
/// of a grid of `dims + 4`; layer 1 and the layer before the last are
/// background padding, the outermost layers are [`WALL`].
#[derive(Debug, Clone)]
pub struct Solid {
    /// Data dimensions.
    pub dims: [usize; 3],
    /// Padded dimensions (`dims + 4`).
    pub size: [usize; 3],
    /// `0`, `1` or [`WALL`] per padded voxel, x fastest.
    pub grid: Vec<u8>,
}

impl Solid {
    /// Linear index of padded voxel `(x, y, z)`.
    #[inline]
    pub fn at(&self, x: usize, y: usize, z: usize) -> usize {
        x + self.size[0] * (y + self.size[1] * z)
    }

    /// A padded grid with the foreground `fg` (data voxels, x fastest), no
    /// cavity filling and no piece removal (for tests of the surface alone).
    pub fn from_bits(dims: [usize; 3], fg: &[bool]) -> Solid {
        let mut s = Solid::empty(dims);
        for k in 0..dims[2] {
            for j in 0..dims[1] {
                for i in 0..dims[0] {
                    if fg[i + dims[0] * (j + dims[1] * k)] {
                        let p = s.at(i + 2, j + 2, k + 2);
                        s.grid[p] = 1;
                    }
                }
            }
        }
        s
    }

    fn empty(dims: [usize; 3]) -> Solid {
        let size = [dims[0] + 4, dims[1] + 4, dims[2] + 4];
        let mut grid = vec![0u8; size[0] * size[1] * size[2]];
        for z in 0..size[2] {
            for y in 0..size[1] {
                for x in 0..size[0] {
                    let edge = |v: usize, n: usize| v == 0 || v == n - 1;
                    if edge(x, size[0]) || edge(y, size[1]) || edge(z, size[2]) {
                        grid[x + size[0] * (y + size[1] * z)] = WALL;
                    }
                }
            }
        }
        Solid { dims, size, grid }
    }

    /// Linear offsets of the 6 face neighbours.
    fn offsets6(&self) -> Vec<isize> {
        let (sx, sxy) = (
            self.size[0] as isize,
            (self.size[0] * self.size[1]) as isize,
        );
        vec![1, -1, sx, -sx, sxy, -sxy]
    }

    /// Linear offsets of the 18 face and edge neighbours.
    fn offsets18(&self) -> Vec<isize> {
        let (sx, sxy) = (
            self.size[0] as isize,
            (self.size[0] * self.size[1]) as isize,
        );
        let mut o = Vec::with_capacity(18);
        for dz in -1isize..=1 {
            for dy in -1isize..=1 {
                for dx in -1isize..=1 {
                    let nz = (dx != 0) as u8 + (dy != 0) as u8 + (dz != 0) as u8;
                    if nz == 1 || nz == 2 {
                        o.push(dx + dy * sx + dz * sxy);
                    }
                }
            }
        }
        o
    }
}

/// Threshold `values` at `level`, fill cavities, keep the largest piece.
/// Errors: wrong value count, a NaN value (named by its voxel), a level
/// that is not finite, no voxel above the level.
pub fn solidify(values: &[f64], dims: [usize; 3], level: f64) -> Result<(Solid, MaskReport)> {
    let n = dims[0] * dims[1] * dims[2];
    if values.len() != n {
        return Err(Error::Invalid(format!(
            "{} voxel values for dimensions {dims:?}; expected {n}",
            values.len()
        )));
    }
    if !level.is_finite() {
        return Err(Error::Invalid(format!(
            "level {level}; expected a finite number"
        )));
    }
    if let Some(bad) = values.iter().position(|v| v.is_nan()) {
        let (i, j, k) = (
            bad % dims[0],
            (bad / dims[0]) % dims[1],
            bad / (dims[0] * dims[1]),
        );
        return Err(Error::Invalid(format!(
            "mask voxel ({i}, {j}, {k}) is NaN; expected a number in every voxel of a mask"
        )));
    }
    let mut s = Solid::empty(dims);
    let mut above = 0usize;
    for k in 0..dims[2] {
        for j in 0..dims[1] {
            let row = dims[0] * (j + dims[1] * k);
            let p0 = s.at(2, j + 2, k + 2);
            for i in 0..dims[0] {
                if values[row + i] > level {
                    s.grid[p0 + i] = 1;
                    above += 1;
                }
            }
        }
    }
    if above == 0 {
        return Err(Error::Invalid(format!(
            "the mask is empty: no voxel is above the level {level}; expected at least one"
        )));
    }
    // Cavities: background not reached from the padding (18-connected).
    const SEEN: u8 = 2;
    let o18 = s.offsets18();
    let start = s.at(1, 1, 1);
    s.grid[start] = SEEN;
    let mut stack = vec![start];
    while let Some(p) = stack.pop() {
        for &o in &o18 {
            let q = (p as isize + o) as usize;
            if s.grid[q] == 0 {
                s.grid[q] = SEEN;
                stack.push(q);
            }
        }
    }
    // Remaining zeros are cavities; count pieces with a second flood.
    let mut filled = 0usize;
    let mut cavities = 0usize;
    for p in 0..s.grid.len() {
        if s.grid[p] == 0 {
            cavities += 1;
            s.grid[p] = 1;
            filled += 1;
            stack.push(p);
            while let Some(c) = stack.pop() {
                for &o in &o18 {
                    let q = (c as isize + o) as usize;
                    if s.grid[q] == 0 {
                        s.grid[q] = 1;
                        filled += 1;
                        stack.push(q);
                    }
                }
            }
        }
    }
    for v in s.grid.iter_mut() {
        if *v == SEEN {
            *v = 0;
        }
    }
    // Largest 6-connected piece.
    let o6 = s.offsets6();
    let mut label = vec![0u32; s.grid.len()];
    let mut sizes: Vec<usize> = vec![0];
    for p in 0..s.grid.len() {
        if s.grid[p] == 1 && label[p] == 0 {
            let id = sizes.len() as u32;
            label[p] = id;
            let mut count = 1usize;
            stack.push(p);
            while let Some(c) = stack.pop() {
                for &o in &o6 {
                    let q = (c as isize + o) as usize;
                    if s.grid[q] == 1 && label[q] == 0 {
                        label[q] = id;
                        count += 1;
                        stack.push(q);
                    }
                }
            }
            sizes.push(count);
        }
    }
    let mut best = 1usize;
    for (id, &c) in sizes.iter().enumerate().skip(1) {
        if c > sizes[best] {
            best = id;
        }
    }
    let pieces = sizes.len() - 1;
    let kept = sizes[best];
    let total: usize = sizes.iter().sum();
    if pieces > 1 {
        for (g, &l) in s.grid.iter_mut().zip(&label) {
            if *g == 1 && l as usize != best {
                *g = 0;
            }
        }
    }
    Ok((
        s,
        MaskReport {
            above_level: above,
            cavity_voxels_filled: filled,
            cavities_filled: cavities,
            pieces,
            dropped_voxels: total - kept,
            kept_voxels: kept,
        },
    ))
}
