//! Handles of a closed oriented surface: find short non-separating loops and
//! cut them until the surface has genus 0.
//!
//! In: a [`TriMesh`] that is a closed, consistently oriented 2-manifold
//! (positions in mm) and [`HandleOptions`]. Out: one [`Handle`] record per
//! handle (loop length in mm, loop vertices, centre, touched neighbour
//! vertices, tube area removed) and, for [`cut_handles`], a genus-0 mesh
//! with, per vertex, the input vertex it stands for. What stays true: the
//! output is closed, consistently oriented and connected; each cut lowers
//! the genus by exactly one (`V - E + F = 2 - 2g`, checked after every cut);
//! input vertices that remain keep their ids and positions (copies and cap
//! centres follow). Errors: open or non-manifold input is refused
//! ([`Error::NotReady`], "repair first"); so is a genus over
//! [`HandleOptions::max_genus`] (reported, nothing attempted).
//!
//! Homology. One tree-cotree decomposition (Eppstein, "Dynamic generators
//! of topologically embedded graphs", ACM-SIAM SODA 2003: a spanning tree of
//! the vertices, a spanning tree of the dual graph over the other edges, and
//! `2g` leftover edges) gives every edge a Z2 label of `2g` bits such that
//! the XOR of the labels along any cycle is its homology class; a cycle is
//! non-separating exactly when that XOR is non-zero.
//!
//! Shortest loop (exact up to a length). Erickson and Whittlesey ("Greedy
//! optimal homotopy and homology generators", ACM-SIAM SODA 2005) show that
//! the shortest non-separating cycle through a vertex `r` is
//! `path(r, u) + (u, v) + path(v, r)` in the shortest-path tree of `r` for
//! the non-tree edge minimising the length among those whose loop has a
//! non-zero class: the cycle is the Z2 sum of the fundamental cycles of its
//! non-tree edges, each no longer than the cycle, so one of them is
//! non-separating. Two facts make this cheap and still exact: (1) the root
//! may be any vertex of the shortest cycle, and every non-separating cycle
//! has an edge with a non-zero label, so the roots are only the endpoints
//! of labelled edges; (2) a loop of length at most `L` through `r` only
//! uses vertices within `L` of `r`, so each Dijkstra stops at radius `L`.
//! `L` starts at [`START_RADIUS_EDGES`] mean edge lengths and doubles up to
//! the loop limit; the first radius at which any root has a loop gives the
//! exact shortest loop (ties: lowest root id). A handle longer than the
//! limit is reported with an upper bound: the best loop over
//! [`ROOT_SAMPLE`] roots, refined with [`LOOP_ROOTS`] roots along the best
//! loop for up to [`REFINE_ROUNDS`] rounds. Roots run in parallel; the
//! result does not depend on the thread count.
//!
//! Removing the tube. Cutting the loop of a thin tube and capping leaves two
//! capped stubs. Following the wavefront idea of Guskov and Wood
//! ("Topological noise removal", Graphics Interface 2001), fronts are grown
//! from each side of the cut, level by level (breadth-first vertex levels;
//! after each level the region is the faces whose three vertices are
//! reached). The growth ends when the front flares past
//! [`TUBE_STOP_FACTOR`] loop lengths: the tube has opened into the surface.
//! Candidate ends are the levels whose region is an annulus (connected,
//! Euler characteristic 0, bounded by the cut; the empty region counts)
//! with a far boundary (the front) at most [`TUBE_FRONT_FACTOR`] times the
//! loop length; the side's tube ends at the candidate after which the
//! front grows by the largest factor (where it opens fastest). If either side
//! never flares (it reaches the other side of the cut, as on a torus, or
//! runs over [`TUBE_MAX_VERTICES`]), or the two regions overlap or exceed
//! [`MAX_TUBE_AREA_FRACTION`] of the area, nothing is removed. The regions
//! are deleted and the two fronts capped; if the result is not one piece of
//! genus one lower, the plain cut is used instead.
//!
//! Capping. Each boundary loop is capped with the hole filling of
//! [`crate::repair::holes`] (the minimum-area dynamic programme of
//! Barequet and Sharir 1995 / Liepa 2003; a fan around a new centre vertex
//! for loops over 200 edges or when no triangulation is allowed).

use crate::error::{Error, Result};
use crate::mesh::halfedge::{face, Halfedges};
use crate::mesh::topology::face_components;
use crate::mesh::{dist, TriMesh, Vec3};
use crate::repair::holes::{fan, loop_centroid, triangulate_hole, HoleInput, HoleWeight};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::cmp::Ordering;
use std::collections::{BinaryHeap, HashSet};

/// Roots (spread over the root set) of the fallback search for loops
/// longer than the exact range.
pub const ROOT_SAMPLE: usize = 8;
/// Vertices taken along the best loop as roots in each refinement round.
pub const LOOP_ROOTS: usize = 16;
/// Refinement rounds of root selection.
pub const REFINE_ROUNDS: usize = 3;
/// Largest genus handled at all (classes are 64-bit masks: 2g <= 64).
pub const MAX_GENUS: i64 = 32;
/// Default limit on the genus of a surface whose handles are cut.
pub const DEFAULT_MAX_GENUS: i64 = 20;
/// Default longest loop cut (mm); also the exact range of [`find_handles`].
pub const DEFAULT_MAX_LOOP_MM: f64 = 30.0;
/// First radius of the exact search, in mean edge lengths (then doubled).
const START_RADIUS_EDGES: f64 = 8.0;
/// A tube front may be this many times the cut loop's length.
pub const TUBE_FRONT_FACTOR: f64 = 1.9;
/// The tube growth stops when its front exceeds this many loop lengths.
const TUBE_STOP_FACTOR: f64 = 3.0;
/// The tube growth stops after this many vertices on one side.
const TUBE_MAX_VERTICES: usize = 20_000;
/// A tube whose two sides together exceed this fraction of the surface
/// area is not removed (only cut): it is not a small handle.
pub const MAX_TUBE_AREA_FRACTION: f64 = 0.25;
/// Loops with at most this many vertices are capped by the dynamic programme; longer ones get a fan.
const MAX_DP_LOOP: usize = 200;

/// One handle: its shortest non-separating loop found.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Handle {
    /// Loop length in mm.
    pub length_mm: f64,
    /// Loop vertices in order (ids of the input mesh).
    pub vertices: Vec<u32>,
    /// Mean position of the loop vertices (mm).
    pub centre: Vec3,
    /// Vertices adjacent to the loop but not on it (ids of the input mesh).
    pub neighbours: Vec<u32>,
    /// True when the loop was cut and capped.
    pub cut: bool,
    /// Area (mm^2) of the tube removed with the cut; 0 when the handle was
    /// only cut (or not cut).
    #[serde(default)]
    pub removed_area_mm2: f64,
}

/// Result of [`cut_handles`].
#[derive(Debug, Clone)]
pub struct HandleCut {
    /// The mesh after the cuts.
    pub mesh: TriMesh,
    /// Per output vertex: its input vertex (duplicates map to the vertex
    /// they copy), or `None` for a new cap vertex.
    pub origin: Vec<Option<u32>>,
    /// Handles in the order found; the last is uncut when it exceeded the limit.
    pub handles: Vec<Handle>,
    /// Genus of the output.
    pub genus: i64,
}

#[derive(Clone, Copy, PartialEq)]
struct Item(f64, u32);
impl Eq for Item {}
impl PartialOrd for Item {
    fn partial_cmp(&self, o: &Self) -> Option<Ordering> {
        Some(self.cmp(o))
    }
}
impl Ord for Item {
    fn cmp(&self, o: &Self) -> Ordering {
        o.0.total_cmp(&self.0).then(o.1.cmp(&self.1))
    }
}

fn alg(message: String) -> Error {
    Error::Algorithm {
        stage: "handles",
        message,
    }
}

fn build(mesh: &TriMesh) -> Result<Halfedges> {
    Halfedges::from_faces(mesh.n_vertices(), &mesh.faces).map_err(|e| {
        Error::NotReady(format!(
            "handle search needs a closed oriented manifold surface; run repair first ({e})"
        ))
    })
}

/// Genus of a closed oriented surface from its Euler characteristic.
fn genus_of(he: &Halfedges) -> i64 {
    (2 - he.euler_characteristic()) / 2
}

/// Z2 cohomology labels of a fixed tree-cotree decomposition (Eppstein
/// 2003): per edge a bit vector such that the XOR of the labels along any
/// cycle is its homology class in the basis of the leftover loops, so a
/// cycle is non-separating exactly when the XOR is non-zero. Tree edges
/// (a breadth-first tree from vertex 0) carry 0, leftover edge `k` carries
/// bit `k`, and a cotree edge the XOR of the other edges of its child face.
/// `None` when there are more than 64 leftover edges.
fn cohomology(he: &Halfedges) -> Option<Vec<u64>> {
    let nv = he.n_vertices();
    let ne = he.n_edges();
    let nf = he.n_faces();
    let mut tree = vec![false; ne];
    let mut seen_v = vec![false; nv];
    let mut queue = Vec::with_capacity(nv);
    if nv > 0 {
        seen_v[0] = true;
        queue.push(0u32);
    }
    let mut i = 0;
    while i < queue.len() {
        let v = queue[i];
        i += 1;
        for h in he.outgoing(v) {
            let w = he.head(h) as usize;
            if !seen_v[w] {
                seen_v[w] = true;
                tree[he.edge[h as usize] as usize] = true;
                queue.push(w as u32);
            }
        }
    }
    let mut seen = vec![false; nf];
    let mut parent_edge = vec![u32::MAX; nf];
    let mut cotree = vec![false; ne];
    let mut order = Vec::with_capacity(nf);
    if nf > 0 {
        seen[0] = true;
        order.push(0u32);
    }
    let mut i = 0;
    while i < order.len() {
        let f = order[i];
        i += 1;
        for k in 0..3 {
            let h = 3 * f + k;
            let e = he.edge[h as usize] as usize;
            if tree[e] || cotree[e] {
                continue;
            }
            let g = face(he.twin[h as usize]) as usize;
            if !seen[g] {
                seen[g] = true;
                parent_edge[g] = e as u32;
                cotree[e] = true;
                order.push(g as u32);
            }
        }
    }
    let mut class = vec![0u64; ne];
    let mut n_left = 0;
    for e in 0..ne {
        if !tree[e] && !cotree[e] {
            if n_left >= 64 {
                return None;
            }
            class[e] = 1u64 << n_left;
            n_left += 1;
        }
    }
    for &f in order.iter().rev() {
        let pe = parent_edge[f as usize];
        if pe == u32::MAX {
            continue;
        }
        let mut c = 0u64;
        for k in 0..3 {
            let e = he.edge[(3 * f + k) as usize];
            if e != pe {
                c ^= class[e as usize];
            }
        }
        class[pe as usize] = c;
    }
    Some(class)
}

/// Read-only inputs of the per-root search.
struct Ctx<'a> {
    he: &'a Halfedges,
    /// Length of each edge (mm).
    len: Vec<f64>,
    /// Cohomology label of each edge ([`cohomology`]).
    class: Vec<u64>,
}

/// Per-thread scratch of the truncated Dijkstra (reset lazily by epoch).
struct Scratch {
    d: Vec<f64>,
    parent: Vec<u32>,
    path_class: Vec<u64>,
    stamp: Vec<u32>,
    done: Vec<u32>,
    epoch: u32,
    settled: Vec<u32>,
    heap: BinaryHeap<Item>,
}

impl Scratch {
    fn new(nv: usize) -> Scratch {
        Scratch {
            d: vec![f64::INFINITY; nv],
            parent: vec![u32::MAX; nv],
            path_class: vec![0; nv],
            stamp: vec![0; nv],
            done: vec![0; nv],
            epoch: 0,
            settled: Vec::new(),
            heap: BinaryHeap::new(),
        }
    }
}

/// Shortest non-separating loop through `root` of length at most `radius`
/// (Erickson and Whittlesey 2005): a shortest-path tree grown only to
/// distance `radius`, and over the edges `(u, v)` not in it whose loop
/// `path(root, u) + (u, v) + path(v, root)` has a non-zero class, the one of
/// least length. Returns (length, halfedge `u -> v`); the tree stays in
/// `s` for [`trace`].
fn root_loop(ctx: &Ctx, s: &mut Scratch, root: u32, radius: f64) -> Option<(f64, u32)> {
    let he = ctx.he;
    s.epoch = s.epoch.wrapping_add(1);
    if s.epoch == 0 {
        s.stamp.fill(0);
        s.done.fill(0);
        s.epoch = 1;
    }
    let ep = s.epoch;
    s.settled.clear();
    s.heap.clear();
    let r = root as usize;
    s.d[r] = 0.0;
    s.parent[r] = u32::MAX;
    s.path_class[r] = 0;
    s.stamp[r] = ep;
    s.heap.push(Item(0.0, root));
    while let Some(Item(dv, v)) = s.heap.pop() {
        let vi = v as usize;
        if s.done[vi] == ep || dv > s.d[vi] {
            continue;
        }
        if dv > radius {
            break;
        }
        s.done[vi] = ep;
        s.settled.push(v);
        for h in he.outgoing(v) {
            let w = he.head(h) as usize;
            if s.done[w] == ep {
                continue;
            }
            let e = he.edge[h as usize] as usize;
            let nd = dv + ctx.len[e];
            if s.stamp[w] != ep || nd < s.d[w] {
                s.stamp[w] = ep;
                s.d[w] = nd;
                s.parent[w] = h;
                s.path_class[w] = s.path_class[vi] ^ ctx.class[e];
                s.heap.push(Item(nd, w as u32));
            }
        }
    }
    let mut best: Option<(f64, u32, u32)> = None; // (length, edge, halfedge)
    for &u in &s.settled {
        let ui = u as usize;
        for h in he.outgoing(u) {
            let v = he.head(h);
            let vi = v as usize;
            if v <= u || s.done[vi] != ep {
                continue;
            }
            if s.parent[vi] == h || s.parent[ui] == he.twin[h as usize] {
                continue;
            }
            let e = he.edge[h as usize];
            if s.path_class[ui] ^ ctx.class[e as usize] ^ s.path_class[vi] == 0 {
                continue;
            }
            let l = s.d[ui] + ctx.len[e as usize] + s.d[vi];
            if l <= radius && best.is_none_or(|(bl, be, _)| l < bl || (l == bl && e < be)) {
                best = Some((l, e, h));
            }
        }
    }
    best.map(|(l, _, h)| (l, h))
}

/// The simple vertex cycle of the loop closed by halfedge `h` in the tree
/// left in `s` by [`root_loop`]: the two tree paths with their common part
/// towards the root trimmed.
fn trace(he: &Halfedges, s: &Scratch, h: u32) -> Vec<u32> {
    let path = |mut v: u32| -> Vec<u32> {
        let mut out = vec![v];
        while s.parent[v as usize] != u32::MAX {
            v = he.tail[s.parent[v as usize] as usize];
            out.push(v);
        }
        out
    };
    let mut pu = path(he.tail[h as usize]); // [u, ..., root]
    let mut pv = path(he.head(h)); // [v, ..., root]
    while pu.len() > 1 && pv.len() > 1 && pu[pu.len() - 2] == pv[pv.len() - 2] {
        pu.pop();
        pv.pop();
    }
    pv.pop(); // the meeting vertex stays once, in pu
              // Cycle u -> v -> ... -> meeting vertex -> ... -> u.
    let mut cyc = vec![he.tail[h as usize]];
    cyc.extend(pv.iter().copied());
    cyc.extend(pu.iter().rev().take(pu.len() - 1).copied());
    cyc
}

fn cycle_length(mesh: &TriMesh, cyc: &[u32]) -> f64 {
    let p = &mesh.positions;
    (0..cyc.len())
        .map(|i| dist(p[cyc[i] as usize], p[cyc[(i + 1) % cyc.len()] as usize]))
        .sum()
}

/// Shortest non-separating loop (module doc): exact when it is at most
/// `exact_up_to_mm` long, otherwise the best loop over the sampled roots.
pub fn shortest_nonseparating_loop(
    mesh: &TriMesh,
    exact_up_to_mm: f64,
) -> Result<Option<(f64, Vec<u32>)>> {
    let he = build(mesh)?;
    let g = genus_of(&he);
    if g == 0 {
        return Ok(None);
    }
    if g > MAX_GENUS {
        return Err(Error::Invalid(format!(
            "genus {g} is over the limit {MAX_GENUS} for handle cutting; not attempted"
        )));
    }
    Ok(search(mesh, &he, exact_up_to_mm))
}

fn search(mesh: &TriMesh, he: &Halfedges, exact_up_to_mm: f64) -> Option<(f64, Vec<u32>)> {
    let nv = he.n_vertices();
    let class = cohomology(he)?;
    let p = &mesh.positions;
    let len: Vec<f64> = he
        .edge_half
        .iter()
        .map(|&h| dist(p[he.tail[h as usize] as usize], p[he.head(h) as usize]))
        .collect();
    let ctx = Ctx { he, len, class };
    // Roots: endpoints of the edges with a non-zero label. Every
    // non-separating cycle crosses one (its labels XOR to non-zero), and
    // the Erickson-Whittlesey argument holds for any root on the cycle.
    let mut is_root = vec![false; nv];
    for (e, &c) in ctx.class.iter().enumerate() {
        if c != 0 {
            let h = he.edge_half[e];
            is_root[he.tail[h as usize] as usize] = true;
            is_root[he.head(h) as usize] = true;
        }
    }
    let roots: Vec<u32> = (0..nv as u32).filter(|&v| is_root[v as usize]).collect();
    if roots.is_empty() {
        return None;
    }
    // Exact pass with a doubling radius.
    let mean_edge = ctx.len.iter().sum::<f64>() / ctx.len.len().max(1) as f64;
    let mut radius = (START_RADIUS_EDGES * mean_edge).min(exact_up_to_mm);
    loop {
        let found = roots
            .par_iter()
            .map_init(
                || Scratch::new(nv),
                |s, &r| root_loop(&ctx, s, r, radius).map(|(l, _)| (l, r)),
            )
            .flatten()
            .min_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        if let Some((_, r)) = found {
            let mut s = Scratch::new(nv);
            let (_, h) = root_loop(&ctx, &mut s, r, radius)?;
            let cyc = trace(he, &s, h);
            return Some((cycle_length(mesh, &cyc), cyc));
        }
        if radius >= exact_up_to_mm || !radius.is_finite() {
            break;
        }
        radius = (2.0 * radius).min(exact_up_to_mm);
    }
    // No loop within the exact range: the best over sampled roots, refined
    // along the best loop (an upper bound, used to report long handles).
    let mut s = Scratch::new(nv);
    let mut tried = HashSet::new();
    let mut best: Option<(f64, Vec<u32>)> = None;
    let k = ROOT_SAMPLE.min(roots.len());
    let mut batch: Vec<u32> = (0..k).map(|i| roots[i * roots.len() / k]).collect();
    for _ in 0..=REFINE_ROUNDS {
        let mut improved = false;
        for r in batch {
            if !tried.insert(r) {
                continue;
            }
            if let Some((_, h)) = root_loop(&ctx, &mut s, r, f64::INFINITY) {
                let cyc = trace(he, &s, h);
                let l = cycle_length(mesh, &cyc);
                if best.as_ref().is_none_or(|(b, _)| l < *b - 1e-12) {
                    best = Some((l, cyc));
                    improved = true;
                }
            }
        }
        let (_, c) = best.as_ref()?;
        if !improved {
            break;
        }
        let k = LOOP_ROOTS.min(c.len());
        batch = (0..k).map(|i| c[i * c.len() / k]).collect();
    }
    best
}

/// Cut the surface along a simple vertex cycle: every loop vertex gets a
/// copy for the faces on its left. Returns the open positions and faces;
/// `origin` grows with the copies.
fn cut_open(
    mesh: &TriMesh,
    he: &Halfedges,
    cyc: &[u32],
    origin: &mut Vec<Option<u32>>,
) -> Result<(Vec<Vec3>, Vec<[u32; 3]>)> {
    let n = cyc.len();
    if n < 3 {
        return Err(alg("handle loop has fewer than 3 vertices".into()));
    }
    let find_half = |a: u32, b: u32| he.outgoing(a).find(|&h| he.head(h) == b);
    let mut faces = mesh.faces.clone();
    let mut positions = mesh.positions.clone();
    for i in 0..n {
        let v = cyc[i];
        let nxt = cyc[(i + 1) % n];
        let prv = cyc[(i + n - 1) % n];
        let (Some(h_out), Some(h_back)) = (find_half(v, nxt), find_half(v, prv)) else {
            return Err(alg(format!("handle loop edge missing at vertex {v}")));
        };
        let nv = positions.len() as u32;
        positions.push(positions[v as usize]);
        origin.push(origin.get(v as usize).copied().flatten());
        // Faces left of the loop at v: from h_out rotating until h_back.
        let mut h = h_out;
        let mut guard = 0;
        while h != h_back {
            let f = face(h) as usize;
            let c = (h % 3) as usize;
            faces[f][c] = nv;
            h = he.rotate(h);
            guard += 1;
            if guard > he.n_halfedges() {
                return Err(alg("vertex fan walk did not close".into()));
            }
        }
    }
    Ok((positions, faces))
}

/// Faces of the open (cut) mesh around each vertex, as offsets into one list.
fn vertex_faces(nv: usize, faces: &[[u32; 3]]) -> (Vec<usize>, Vec<u32>) {
    let mut start = vec![0usize; nv + 1];
    for t in faces {
        for &v in t {
            start[v as usize + 1] += 1;
        }
    }
    for i in 0..nv {
        start[i + 1] += start[i];
    }
    let mut fill = start.clone();
    let mut list = vec![0u32; start[nv]];
    for (f, t) in faces.iter().enumerate() {
        for &v in t {
            list[fill[v as usize]] = f as u32;
            fill[v as usize] += 1;
        }
    }
    (start, list)
}

fn ukey(a: u32, b: u32) -> (u32, u32) {
    (a.min(b), a.max(b))
}

fn uf_find(p: &mut [usize], mut i: usize) -> usize {
    while p[i] != i {
        p[i] = p[p[i]];
        i = p[i];
    }
    i
}

/// Grow the tube on one side of the cut (module doc, "Removing the tube"):
/// breadth-first levels of vertices from the side's boundary loop `side`
/// (level `k` = `k` edges away); after each level the region is the faces
/// whose three vertices are all reached. Among the levels whose region is
/// an annulus bounded by `side` and a front no longer than
/// [`TUBE_FRONT_FACTOR`] times the loop (the empty region included), returns
/// the one after which the front grows by the largest factor, or `None` when
/// the front never flared beyond [`TUBE_STOP_FACTOR`] loop lengths (it met
/// the other side of the cut, ran out of surface or of the vertex budget):
/// then the side is no tube end.
fn grow_tube(
    positions: &[Vec3],
    faces: &[[u32; 3]],
    vf: &(Vec<usize>, Vec<u32>),
    side: &[u32],
    other: &[bool],
    loop_len: f64,
) -> Option<Vec<u32>> {
    let nv = positions.len();
    let n = side.len();
    let loop_edges: HashSet<(u32, u32)> =
        (0..n).map(|i| ukey(side[i], side[(i + 1) % n])).collect();
    let (start, list) = vf;
    let mut inside = vec![false; nv];
    let mut queued = vec![false; nv];
    let mut level: Vec<u32> = side.to_vec();
    for &v in side {
        queued[v as usize] = true;
    }
    let mut added = HashSet::new();
    let mut order: Vec<u32> = Vec::new();
    let mut uf: Vec<usize> = Vec::new();
    let mut comps = 0usize;
    let mut edge_count = std::collections::HashMap::<(u32, u32), (u8, usize)>::new();
    let mut vert_count = std::collections::HashMap::<u32, u32>::new();
    let mut front = 0.0f64;
    let mut covered = 0usize;
    // Per level: (front length, valid annulus, faces); the empty region
    // (the cut loop itself as the front) comes first.
    let mut levels: Vec<(f64, bool, usize)> = vec![(loop_len, true, 0)];
    let mut popped = 0usize;
    while !level.is_empty() {
        if level.iter().any(|&v| other[v as usize]) {
            return None;
        }
        for &v in &level {
            inside[v as usize] = true;
        }
        popped += level.len();
        for &v in &level {
            let vi = v as usize;
            for &f in &list[start[vi]..start[vi + 1]] {
                let t = faces[f as usize];
                if added.contains(&f) || !t.iter().all(|&w| inside[w as usize]) {
                    continue;
                }
                added.insert(f);
                let id = order.len();
                order.push(f);
                uf.push(id);
                comps += 1;
                for &w in &t {
                    *vert_count.entry(w).or_insert(0) += 1;
                }
                for k in 0..3 {
                    let key = ukey(t[k], t[(k + 1) % 3]);
                    let l = dist(positions[key.0 as usize], positions[key.1 as usize]);
                    let is_loop = loop_edges.contains(&key);
                    match edge_count.get_mut(&key) {
                        None => {
                            edge_count.insert(key, (1, id));
                            if is_loop {
                                covered += 1;
                            } else {
                                front += l;
                            }
                        }
                        Some(entry) => {
                            entry.0 += 1;
                            if !is_loop {
                                front -= l;
                            }
                            let first = entry.1;
                            let (a, b) = (uf_find(&mut uf, first), uf_find(&mut uf, id));
                            if a != b {
                                uf[a] = b;
                                comps -= 1;
                            }
                        }
                    }
                }
            }
        }
        let chi = vert_count.len() as i64 - edge_count.len() as i64 + order.len() as i64;
        let valid = comps == 1 && chi == 0 && covered == n && front <= TUBE_FRONT_FACTOR * loop_len;
        levels.push((front, valid, order.len()));
        if front > TUBE_STOP_FACTOR * loop_len {
            // The tube ends where it opens fastest: the valid level whose
            // next front grows by the largest factor (the deepest on ties).
            let mut pick = (0.0f64, 0usize);
            for w in levels.windows(2) {
                let ((f, ok, k), (f_next, _, _)) = (w[0], w[1]);
                if ok && f > 0.0 && f_next / f >= pick.0 {
                    pick = (f_next / f, k);
                }
            }
            order.truncate(pick.1);
            return Some(order);
        }
        if popped > TUBE_MAX_VERTICES {
            return None;
        }
        let mut next = Vec::new();
        for &v in &level {
            let vi = v as usize;
            for &f in &list[start[vi]..start[vi + 1]] {
                for &w in &faces[f as usize] {
                    if !queued[w as usize] {
                        queued[w as usize] = true;
                        next.push(w);
                    }
                }
            }
        }
        next.sort_unstable();
        level = next;
    }
    None
}

/// Boundary loops of the faces not `removed`, each in the order its faces
/// traverse it, found from the candidate start vertices `cand` (every
/// boundary vertex must be among them). `None` when a boundary vertex is
/// pinched or a loop does not close.
fn boundary_cycles(
    faces: &[[u32; 3]],
    removed: &[bool],
    vf: &(Vec<usize>, Vec<u32>),
    cand: &[u32],
) -> Option<Vec<Vec<u32>>> {
    let (start, list) = vf;
    let mut next = std::collections::HashMap::<u32, u32>::new();
    let mut starts = Vec::new();
    for &a in cand {
        let ai = a as usize;
        let around = &list[start[ai]..start[ai + 1]];
        for &f in around {
            if removed[f as usize] {
                continue;
            }
            let t = faces[f as usize];
            let k = t.iter().position(|&v| v == a)?;
            let b = t[(k + 1) % 3];
            // Is there a kept face with the halfedge b -> a?
            let twin = around.iter().any(|&g| {
                !removed[g as usize] && {
                    let u = faces[g as usize];
                    (0..3).any(|j| u[j] == b && u[(j + 1) % 3] == a)
                }
            });
            if !twin {
                if next.insert(a, b).is_some() {
                    return None;
                }
                starts.push(a);
            }
        }
    }
    starts.sort_unstable();
    let mut seen = HashSet::new();
    let mut loops = Vec::new();
    for s in starts {
        if seen.contains(&s) {
            continue;
        }
        let mut lp = Vec::new();
        let mut v = s;
        while seen.insert(v) {
            lp.push(v);
            v = *next.get(&v)?;
        }
        if v != s {
            return None;
        }
        loops.push(lp);
    }
    Some(loops)
}

/// What a cut removed.
struct CutInfo {
    removed_area: f64,
}

/// Cut along `cyc`, remove the tube on both sides when it is one (module
/// doc), cap the two boundary loops and drop vertices no face uses.
fn cut_remove_cap(
    mesh: &TriMesh,
    he: &Halfedges,
    cyc: &[u32],
    loop_len: f64,
    origin: &mut Vec<Option<u32>>,
    remove_tube: bool,
) -> Result<(TriMesh, CutInfo)> {
    let n0 = mesh.n_vertices();
    let (positions, faces) = cut_open(mesh, he, cyc, origin)?;
    let nv = positions.len();
    let tri_area = |t: &[u32; 3]| {
        let [a, b, c] = t.map(|v| positions[v as usize]);
        0.5 * crate::mesh::norm(crate::mesh::cross(
            crate::mesh::sub(b, a),
            crate::mesh::sub(c, a),
        ))
    };
    let mut removed = vec![false; faces.len()];
    let mut removed_area = 0.0;
    if remove_tube {
        let left: Vec<u32> = (n0 as u32..nv as u32).collect();
        let right: Vec<u32> = cyc.to_vec();
        let vf = vertex_faces(nv, &faces);
        let mut on_left = vec![false; nv];
        let mut on_right = vec![false; nv];
        left.iter().for_each(|&v| on_left[v as usize] = true);
        right.iter().for_each(|&v| on_right[v as usize] = true);
        let a = grow_tube(&positions, &faces, &vf, &left, &on_right, loop_len);
        let b = grow_tube(&positions, &faces, &vf, &right, &on_left, loop_len);
        let (a, b) = match (a, b) {
            (Some(a), Some(b)) => (a, b),
            _ => (Vec::new(), Vec::new()),
        };
        let mut overlap = false;
        for &f in a.iter().chain(&b) {
            overlap |= removed[f as usize];
            removed[f as usize] = true;
        }
        removed_area = a
            .iter()
            .chain(&b)
            .map(|&f| tri_area(&faces[f as usize]))
            .sum();
        let total: f64 = faces.iter().map(tri_area).sum();
        if overlap || removed_area > MAX_TUBE_AREA_FRACTION * total {
            removed.fill(false);
            removed_area = 0.0;
        }
    }
    // Boundary halfedges can only start at loop vertices, their copies and
    // vertices of removed faces: look there only.
    let vf = vertex_faces(nv, &faces);
    let mut cand: Vec<u32> = cyc.to_vec();
    cand.extend(n0 as u32..nv as u32);
    for (f, t) in faces.iter().enumerate() {
        if removed[f] {
            cand.extend_from_slice(t);
        }
    }
    cand.sort_unstable();
    cand.dedup();
    let loops = boundary_cycles(&faces, &removed, &vf, &cand)
        .filter(|l| l.len() == 2)
        .ok_or_else(|| alg("the cut did not leave exactly two simple boundary loops".into()))?;
    let kept: Vec<[u32; 3]> = faces
        .iter()
        .zip(&removed)
        .filter(|(_, &r)| !r)
        .map(|(t, _)| *t)
        .collect();
    let mut positions = positions;
    let mut faces = kept;
    for lp in &loops {
        cap(&mut positions, &mut faces, origin, lp);
    }
    // A loop vertex whose original side went with the tube hands its id
    // back to its copy, so surviving input vertices keep their ids.
    let mut used = vec![false; positions.len()];
    for t in &faces {
        for &v in t {
            used[v as usize] = true;
        }
    }
    let mut rename: Vec<u32> = (0..positions.len() as u32).collect();
    for (i, &v) in cyc.iter().enumerate() {
        let copy = n0 + i;
        if !used[v as usize] && used[copy] {
            rename[copy] = v;
            used[v as usize] = true;
            used[copy] = false;
        }
    }
    for t in &mut faces {
        *t = t.map(|v| rename[v as usize]);
    }
    // Compact.
    let mut new_id = vec![u32::MAX; positions.len()];
    let mut out_p = Vec::with_capacity(positions.len());
    let mut out_o = Vec::with_capacity(positions.len());
    for v in 0..positions.len() {
        if used[v] {
            new_id[v] = out_p.len() as u32;
            out_p.push(positions[v]);
            out_o.push(origin.get(v).copied().flatten());
        }
    }
    *origin = out_o;
    let faces = faces
        .iter()
        .map(|t| t.map(|v| new_id[v as usize]))
        .collect();
    Ok((TriMesh::new(out_p, faces)?, CutInfo { removed_area }))
}

/// Cap a boundary loop whose existing faces traverse `lp[i] -> lp[i+1]`.
fn cap(
    positions: &mut Vec<Vec3>,
    faces: &mut Vec<[u32; 3]>,
    origin: &mut Vec<Option<u32>>,
    lp: &[u32],
) {
    let n = lp.len();
    let pts: Vec<Vec3> = lp.iter().map(|&v| positions[v as usize]).collect();
    let mut tris = None;
    if n <= MAX_DP_LOOP {
        let on: HashSet<u32> = lp.iter().copied().collect();
        let mut existing = HashSet::new();
        for f in faces.iter() {
            for k in 0..3 {
                let (a, b) = (f[k], f[(k + 1) % 3]);
                if on.contains(&a) && on.contains(&b) {
                    existing.insert((a.min(b), a.max(b)));
                }
            }
        }
        let normals = vec![None; n];
        let forbidden = |i: usize, k: usize| {
            let (a, b) = (lp[i], lp[k]);
            existing.contains(&(a.min(b), a.max(b)))
        };
        tris = triangulate_hole(
            &HoleInput {
                points: &pts,
                outer_normals: &normals,
                forbidden: &forbidden,
            },
            HoleWeight::MinArea,
        );
    }
    match tris {
        Some(t) => {
            for [a, b, c] in t {
                faces.push([lp[a], lp[b], lp[c]]);
            }
        }
        None => {
            let c = positions.len() as u32;
            positions.push(loop_centroid(&pts));
            origin.push(None);
            for [a, b, _] in fan(n) {
                faces.push([lp[a], lp[b], c]);
            }
        }
    }
}

fn describe(
    mesh: &TriMesh,
    he: &Halfedges,
    len: f64,
    cyc: &[u32],
    origin: &[Option<u32>],
    cut: bool,
) -> Handle {
    let on: HashSet<u32> = cyc.iter().copied().collect();
    let mut nb: Vec<u32> = Vec::new();
    for &v in cyc {
        for h in he.outgoing(v) {
            let w = he.head(h);
            if !on.contains(&w) {
                if let Some(Some(o)) = origin.get(w as usize) {
                    nb.push(*o);
                }
            }
        }
    }
    nb.sort_unstable();
    nb.dedup();
    let pts: Vec<Vec3> = cyc.iter().map(|&v| mesh.positions[v as usize]).collect();
    Handle {
        length_mm: len,
        vertices: cyc
            .iter()
            .filter_map(|&v| origin.get(v as usize).copied().flatten())
            .collect(),
        centre: loop_centroid(&pts),
        neighbours: nb,
        cut,
        removed_area_mm2: 0.0,
    }
}

/// Options of [`cut_handles`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HandleOptions {
    /// Handles whose shortest loop is longer (mm) are reported, not cut.
    pub max_loop_mm: f64,
    /// A surface of higher genus is refused before any search.
    pub max_genus: i64,
    /// Remove the tube of a handle on both sides of the cut (module doc);
    /// false only cuts and caps.
    pub remove_tubes: bool,
}

impl Default for HandleOptions {
    fn default() -> Self {
        HandleOptions {
            max_loop_mm: DEFAULT_MAX_LOOP_MM,
            max_genus: DEFAULT_MAX_GENUS,
            remove_tubes: true,
        }
    }
}

/// Find and cut handles until genus 0 or until a loop exceeds
/// `opts.max_loop_mm` (that handle is reported with `cut: false` and left).
/// Errors: non-manifold or open input ([`Error::NotReady`]: repair first);
/// genus over `opts.max_genus` or [`MAX_GENUS`] ([`Error::NotReady`],
/// nothing attempted).
pub fn cut_handles(mesh: &TriMesh, opts: &HandleOptions) -> Result<HandleCut> {
    let mut cur = mesh.clone();
    let mut origin: Vec<Option<u32>> = (0..mesh.n_vertices() as u32).map(Some).collect();
    let mut handles = Vec::new();
    let he0 = build(&cur)?;
    let g0 = genus_of(&he0);
    let limit = opts.max_genus.min(MAX_GENUS);
    if g0 > limit {
        return Err(Error::NotReady(format!(
            "the surface has genus {g0}, over the limit {limit} for handle cutting; not attempted (too many handles for a local fix)"
        )));
    }
    let exact_up_to = if opts.max_loop_mm.is_finite() {
        opts.max_loop_mm
    } else {
        DEFAULT_MAX_LOOP_MM
    };
    let mut he = he0;
    loop {
        let g = genus_of(&he);
        if g <= 0 {
            return Ok(HandleCut {
                mesh: cur,
                origin,
                handles,
                genus: g,
            });
        }
        let Some((len, cyc)) = search(&cur, &he, exact_up_to) else {
            return Err(alg(format!(
                "no non-separating loop found on a surface of genus {g}"
            )));
        };
        let ok = len <= opts.max_loop_mm;
        let mut record = describe(&cur, &he, len, &cyc, &origin, ok);
        if !ok {
            handles.push(record);
            return Ok(HandleCut {
                mesh: cur,
                origin,
                handles,
                genus: g,
            });
        }
        // Remove the tube; if the result is not what a cut must give (genus
        // one lower, one piece), fall back to the plain cut.
        let mut next = None;
        if opts.remove_tubes {
            let mut o = origin.clone();
            let (m, info) = cut_remove_cap(&cur, &he, &cyc, len, &mut o, true)?;
            if info.removed_area > 0.0 {
                if let Ok(h2) = build(&m) {
                    if genus_of(&h2) == g - 1 && face_components(&m).1 == 1 {
                        record.removed_area_mm2 = info.removed_area;
                        next = Some((m, o, h2));
                    }
                }
            }
        }
        let (m, o, h2) = match next {
            Some(x) => x,
            None => {
                let mut o = origin.clone();
                let (m, _) = cut_remove_cap(&cur, &he, &cyc, len, &mut o, false)?;
                let h2 = build(&m)?;
                (m, o, h2)
            }
        };
        if genus_of(&h2) != g - 1 {
            return Err(alg(format!(
                "cutting a loop of {len:.3} mm did not lower the genus from {g}"
            )));
        }
        handles.push(record);
        cur = m;
        origin = o;
        he = h2;
    }
}

/// Locate the handles without keeping the cut: the loops [`cut_handles`]
/// would cut with no length limit (exact up to [`DEFAULT_MAX_LOOP_MM`]).
pub fn find_handles(mesh: &TriMesh) -> Result<Vec<Handle>> {
    let opts = HandleOptions {
        max_loop_mm: f64::INFINITY,
        ..HandleOptions::default()
    };
    Ok(cut_handles(mesh, &opts)?
        .handles
        .into_iter()
        .map(|h| Handle {
            cut: false,
            removed_area_mm2: 0.0,
            ..h
        })
        .collect())
}

#[cfg(test)]
mod tests;
