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

    /// The neighbour rows of a scanline fill: the offset of each row next to
    /// the current one and whether its run is widened by one voxel at both
    /// ends. 18-connected: the 4 face rows widened (edge neighbours along
    /// x) and the 4 diagonal rows not; 6-connected: the 4 face rows only.
    /// Neighbours along the row itself are the run.
    fn rows(&self, eighteen: bool) -> Vec<(isize, bool)> {
        let (sx, sxy) = (
            self.size[0] as isize,
            (self.size[0] * self.size[1]) as isize,
        );
        let mut r = vec![
            (sx, eighteen),
            (-sx, eighteen),
            (sxy, eighteen),
            (-sxy, eighteen),
        ];
        if eighteen {
            for o in [sx + sxy, sx - sxy, -sx + sxy, -sx - sxy] {
                r.push((o, false));
            }
        }
        r
    }
}

/// Scanline flood fill (runs along x): change the voxels equal to `from`
/// connected to `seed` (through the run and the neighbour `rows`) to `to`;
/// return how many changed, recording the runs `(start, length)` when
/// asked. The wall around the grid stops every run and row scan, so no
/// bounds checks are needed.
fn fill_runs(
    grid: &mut [u8],
    seed: usize,
    from: u8,
    to: u8,
    rows: &[(isize, bool)],
    mut runs: Option<&mut Vec<(usize, usize)>>,
) -> usize {
    let mut count = 0usize;
    let mut stack = vec![seed];
    while let Some(p) = stack.pop() {
        if grid[p] != from {
            continue;
        }
        let mut l = p;
        while grid[l - 1] == from {
            l -= 1;
        }
        let mut r = p;
        while grid[r + 1] == from {
            r += 1;
        }
        grid[l..=r].fill(to);
        count += r - l + 1;
        if let Some(rs) = runs.as_deref_mut() {
            rs.push((l, r - l + 1));
        }
        for &(o, widen) in rows {
            let (a, b) = if widen { (l - 1, r + 1) } else { (l, r) };
            let (a, b) = ((a as isize + o) as usize, (b as isize + o) as usize);
            let mut q = a;
            while q <= b {
                if grid[q] == from && (q == a || grid[q - 1] != from) {
                    stack.push(q);
                }
                q += 1;
            }
        }
    }
    count
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
    const KEEP: u8 = 4;
    let rows18 = s.rows(true);
    let rows6 = s.rows(false);
    let start = s.at(1, 1, 1);
    fill_runs(&mut s.grid, start, 0, SEEN, &rows18, None);
    // Remaining zeros are cavities.
    let mut filled = 0usize;
    let mut cavities = 0usize;
    for p in 0..s.grid.len() {
        if s.grid[p] == 0 {
            cavities += 1;
            filled += fill_runs(&mut s.grid, p, 0, 1, &rows18, None);
        }
    }
    for v in s.grid.iter_mut() {
        if *v == SEEN {
            *v = 0;
        }
    }
    // 6-connected pieces, each as a list of runs.
    let mut runs: Vec<(usize, usize)> = Vec::new();
    let mut pieces: Vec<(usize, usize, usize)> = Vec::new(); // run range, voxels
    for p in 0..s.grid.len() {
        if s.grid[p] == 1 {
            let r0 = runs.len();
            let n = fill_runs(&mut s.grid, p, 1, KEEP, &rows6, Some(&mut runs));
            pieces.push((r0, runs.len(), n));
        }
    }
    let mut best = 0usize;
    for (i, pc) in pieces.iter().enumerate() {
        if pc.2 > pieces[best].2 {
            best = i;
        }
    }
    for (i, pc) in pieces.iter().enumerate() {
        if i != best {
            for &(a, len) in &runs[pc.0..pc.1] {
                s.grid[a..a + len].fill(0);
            }
        }
    }
    for v in s.grid.iter_mut() {
        if *v == KEEP {
            *v = 1;
        }
    }
    let kept = pieces[best].2;
    let total: usize = pieces.iter().map(|p| p.2).sum();
    let pieces = pieces.len();
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
