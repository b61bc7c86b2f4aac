//! Marching cubes over a padded binary grid (Lorensen and Cline 1987,
//! "Marching cubes: a high resolution 3D surface construction algorithm",
//! SIGGRAPH '87, Computer Graphics 21(4):163-169), with the generated case
//! table of `volume::table`.
//!
//! In: a [`Solid`] (foreground/background per voxel, padded with background)
//! and, optionally, the voxel values and level for the vertex positions.
//! Out: vertex positions in voxel-index coordinates of the unpadded volume
//! and triangles, counter-clockwise seen from the background (outward).
//! What stays true: one vertex per cut grid edge (vertices are welded by
//! edge, so the mesh is indexed), a closed oriented 2-manifold (see the
//! table's proof), and the same output for any number of threads.
//!
//! Vertex position on a cut edge from foreground voxel `a` to background
//! voxel `b`: `a + s (b - a)` with `s = (v_a - level) / (v_a - v_b)` when
//! both values are known and straddle the level (linear interpolation, as
//! in the paper), else `s = 1/2` (padding, filled cavities, dropped
//! pieces); `s` is clamped to `[0.01, 0.99]` so that no two vertices
//! coincide.
//!
//! Speed: the grid is cut into z-slabs processed in parallel (rayon). A
//! first pass counts the vertices of each z-plane (x- and y-edges in the
//! plane, z-edges up to the next), so each plane's vertex numbers start at
//! a known offset; a second pass numbers the vertices of a plane in row
//! order into a per-plane edge cache and emits the triangles of each slab
//! between two cached planes. Chunks of planes are concatenated in z order,
//! which makes the numbering independent of the thread count.

use super::mask::Solid;
use super::table::{edge_corners, table};
use rayon::prelude::*;

/// Planes per parallel chunk (fixed, so the output never depends on threads).
const CHUNK: usize = 8;

/// Smallest and largest interpolation fraction along an edge.
const S_MIN: f64 = 0.01;

/// Values for interpolated vertex positions: the data voxels (x fastest,
/// unpadded) and the level.
#[derive(Debug, Clone, Copy)]
pub struct Interp<'a> {
    /// One value per data voxel.
    pub values: &'a [f64],
    /// The threshold level.
    pub level: f64,
}

/// The surface of the foreground of `solid`: positions in voxel-index
/// coordinates (data voxel `(i, j, k)` at `(i, j, k)`) and outward triangles.
pub fn march(solid: &Solid, interp: Option<Interp<'_>>) -> (Vec<[f64; 3]>, Vec<[u32; 3]>) {
    let [sx, sy, sz] = solid.size;
    // Vertex planes z = 1 ..= sz - 2 (padding to padding).
    let planes: Vec<usize> = (1..sz - 1).collect();
    let counts: Vec<usize> = planes
        .par_iter()
        .map(|&z| plane_vertices(solid, z, 0, None, None, interp))
        .collect();
    let mut offsets = Vec::with_capacity(planes.len() + 1);
    let mut total = 0usize;
    offsets.push(0);
    for c in &counts {
        total += c;
        offsets.push(total);
    }
    let mut positions = vec![[0.0f64; 3]; total];
    // Split the positions by chunk of planes.
    let mut slices: Vec<(usize, &mut [[f64; 3]])> = Vec::new();
    let mut rest: &mut [[f64; 3]] = &mut positions;
    let mut c0 = 0;
    while c0 < planes.len() {
        let c1 = (c0 + CHUNK).min(planes.len());
        let (head, tail) = rest.split_at_mut(offsets[c1] - offsets[c0]);
        slices.push((c0, head));
        rest = tail;
        c0 = c1;
    }
    let tris: Vec<Vec<[u32; 3]>> = slices
        .into_par_iter()
        .map(|(c0, pos)| {
            let c1 = (c0 + CHUNK).min(planes.len());
            let plane_len = sx * sy * 3;
            let mut cur = vec![u32::MAX; plane_len];
            let mut next = vec![u32::MAX; plane_len];
            let base = offsets[c0];
            let mut out = Vec::new();
            let local = |k: usize| offsets[k] - base..offsets[k + 1] - base;
            // Plane c0 with positions.
            {
                let r = local(c0);
                plane_vertices(
                    solid,
                    planes[c0],
                    offsets[c0],
                    Some(&mut cur),
                    Some(&mut pos[r]),
                    interp,
                );
            }
            for k in c0..c1 {
                if k + 1 >= planes.len() {
                    break;
                }
                if k + 1 < c1 {
                    let r = local(k + 1);
                    plane_vertices(
                        solid,
                        planes[k + 1],
                        offsets[k + 1],
                        Some(&mut next),
                        Some(&mut pos[r]),
                        interp,
                    );
                } else {
                    plane_vertices(
                        solid,
                        planes[k + 1],
                        offsets[k + 1],
                        Some(&mut next),
                        None,
                        interp,
                    );
                }
                slab(solid, planes[k], &cur, &next, &mut out);
                std::mem::swap(&mut cur, &mut next);
            }
            out
        })
        .collect();
    let n: usize = tris.iter().map(Vec::len).sum();
    let mut faces = Vec::with_capacity(n);
    for t in tris {
        faces.extend(t);
    }
    (positions, faces)
}

/// Number the cut edges of plane `z` (x-, y-edges in the plane, z-edges to
/// plane `z + 1`) in row order from `first`; record the numbers in `map`
/// (index `(y * sx + x) * 3 + axis`) and the positions in `pos` when given.
/// Returns the count.
fn plane_vertices(
    solid: &Solid,
    z: usize,
    first: usize,
    mut map: Option<&mut [u32]>,
    mut pos: Option<&mut [[f64; 3]]>,
    interp: Option<Interp<'_>>,
) -> usize {
    let [sx, sy, _] = solid.size;
    let g = &solid.grid;
    let steps = [1usize, sx, sx * sy];
    let mut count = 0usize;
    for y in 1..sy - 1 {
        let row = solid.at(0, y, z);
        for x in 1..sx - 1 {
            let p = row + x;
            let a = g[p];
            for (d, &step) in steps.iter().enumerate() {
                let b = g[p + step];
                if a ^ b != 1 {
                    continue;
                }
                if let Some(m) = map.as_deref_mut() {
                    m[(y * sx + x) * 3 + d] = (first + count) as u32;
                }
                if let Some(ps) = pos.as_deref_mut() {
                    ps[count] = vertex(solid, [x, y, z], d, a == 1, interp);
                }
                count += 1;
            }
        }
    }
    count
}

/// Position of the vertex on the edge from padded voxel `lo` along axis `d`.
fn vertex(
    solid: &Solid,
    lo: [usize; 3],
    d: usize,
    lo_is_fg: bool,
    interp: Option<Interp<'_>>,
) -> [f64; 3] {
    let mut hi = lo;
    hi[d] += 1;
    let (fg, bg) = if lo_is_fg { (lo, hi) } else { (hi, lo) };
    let mut s = 0.5;
    if let Some(ip) = interp {
        let val = |v: [usize; 3]| -> Option<f64> {
            let [nx, ny, nz] = solid.dims;
            let (i, j, k) = (
                v[0].checked_sub(2)?,
                v[1].checked_sub(2)?,
                v[2].checked_sub(2)?,
            );
            if i < nx && j < ny && k < nz {
                ip.values.get(i + nx * (j + ny * k)).copied()
            } else {
                None
            }
        };
        if let (Some(va), Some(vb)) = (val(fg), val(bg)) {
            if va > ip.level && vb <= ip.level && va.is_finite() && vb.is_finite() {
                s = ((va - ip.level) / (va - vb)).clamp(S_MIN, 1.0 - S_MIN);
            }
        }
    }
    let mut p = [0.0; 3];
    for k in 0..3 {
        let a = fg[k] as f64 - 2.0;
        let b = bg[k] as f64 - 2.0;
        p[k] = a + s * (b - a);
    }
    p
}

/// Spread a 4-bit column code (bit 0: (y, z), 1: (y+1, z), 2: (y, z+1),
/// 3: (y+1, z+1)) to corner bits 0, 2, 4, 6.
const SPREAD: [u8; 16] = {
    let mut t = [0u8; 16];
    let mut c = 0;
    while c < 16 {
        t[c] = ((c & 1) | ((c & 2) << 1) | ((c & 4) << 2) | ((c & 8) << 3)) as u8;
        c += 1;
    }
    t
};

/// Triangles of the cubes between planes `z` and `z + 1`.
fn slab(solid: &Solid, z: usize, cur: &[u32], next: &[u32], out: &mut Vec<[u32; 3]>) {
    let [sx, sy, _] = solid.size;
    let g = &solid.grid;
    let tbl = table();
    // Per cube edge: (dx, dy, dz, axis).
    let mut edge_at = [(0usize, 0usize, 0usize, 0usize); 12];
    for (e, slot) in edge_at.iter_mut().enumerate() {
        let (lo, _) = edge_corners(e);
        *slot = (lo & 1, (lo >> 1) & 1, (lo >> 2) & 1, e / 4);
    }
    let sxy = sx * sy;
    let col = |p: usize| -> u8 {
        let b = |q: usize| u8::from(g[q] == 1);
        b(p) | (b(p + sx) << 1) | (b(p + sxy) << 2) | (b(p + sx + sxy) << 3)
    };
    for y in 1..sy - 2 {
        let row = solid.at(0, y, z);
        let mut left = col(row + 1);
        for x in 1..sx - 2 {
            let right = col(row + x + 1);
            let config = SPREAD[left as usize] | (SPREAD[right as usize] << 1);
            left = right;
            if config == 0 || config == 255 {
                continue;
            }
            for t in &tbl[config as usize] {
                let mut f = [0u32; 3];
                for (slot, &e) in f.iter_mut().zip(t) {
                    let (dx, dy, dz, d) = edge_at[e as usize];
                    let m = if dz == 0 { cur } else { next };
                    *slot = m[((y + dy) * sx + x + dx) * 3 + d];
                }
                out.push(f);
            }
        }
    }
}
