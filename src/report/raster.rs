//! A small software rasteriser: a triangle mesh seen from a direction, to
//! an RGB image.
//!
//! In: vertex positions, triangles, a [`View`] (orthographic camera: the
//! direction towards the viewer and the up direction) and a [`Canvas`]
//! size. Out: a visibility buffer (for every sample, the nearest triangle
//! and its barycentric weights), then any number of images from it, one
//! per per-vertex colouring, shaded by Lambert's cosine law (Gouraud
//! interpolation of per-vertex intensities, H. Gouraud, IEEE Trans.
//! Computers C-20, 1971) with a z-buffer for hidden surfaces (E. Catmull,
//! PhD thesis, University of Utah, 1974). Triangles are scan-converted by
//! edge functions over their bounding box (J. Pineda, SIGGRAPH 1988):
//! a sample at the pixel centre is covered when all three edge functions
//! are >= 0 (edges included). Anti-aliasing by supersampling: `s x s`
//! samples per pixel, averaged (box filter).
//!
//! What stays true: pure arithmetic in a fixed order, so the same input
//! gives the same pixels on any thread count; the nearest triangle wins
//! whatever the drawing order (ties: the lower triangle index); samples
//! no triangle covers keep the background colour.

use super::png::Image;
use crate::mesh::{cross, dot, norm, scale, sub, Vec3};

/// An orthographic camera.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct View {
    /// Name shown in the report (`lateral`, `medial`, `dorsal`, ...).
    pub name: &'static str,
    /// Unit direction from the object towards the viewer.
    pub toward_viewer: Vec3,
    /// Up on the screen (need not be orthogonal to `toward_viewer`).
    pub up: Vec3,
}

impl View {
    /// Lateral, medial and dorsal views of hemisphere `hemi` (`L` or `R`):
    /// lateral looks at the hemisphere from its own side (`-x` for `L`,
    /// `+x` for `R`, RAS coordinates), medial from the other, dorsal from
    /// above with the lateral side up (so the long, anterior-posterior axis
    /// runs across the picture).
    pub fn hemisphere(hemi: &str) -> [View; 3] {
        let s = if hemi.eq_ignore_ascii_case("R") {
            1.0
        } else {
            -1.0
        };
        [
            View {
                name: "lateral",
                toward_viewer: [s, 0.0, 0.0],
                up: [0.0, 0.0, 1.0],
            },
            View {
                name: "medial",
                toward_viewer: [-s, 0.0, 0.0],
                up: [0.0, 0.0, 1.0],
            },
            View {
                name: "dorsal",
                toward_viewer: [0.0, 0.0, 1.0],
                up: [s, 0.0, 0.0],
            },
        ]
    }

    /// Right, up and toward-viewer unit vectors of the screen.
    fn basis(&self) -> (Vec3, Vec3, Vec3) {
        let f = unit(self.toward_viewer);
        let r = unit(cross(self.up, f));
        let u = cross(f, r);
        (r, u, f)
    }
}

fn unit(v: Vec3) -> Vec3 {
    let l = norm(v);
    if l > 0.0 {
        scale(v, 1.0 / l)
    } else {
        [0.0, 0.0, 1.0]
    }
}

/// Size of an image and its supersampling factor.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Canvas {
    pub width: usize,
    pub height: usize,
    /// Samples per pixel along each axis (1 = no anti-aliasing).
    pub supersample: usize,
}

/// For every sample: the nearest triangle (`u32::MAX` = none) and the
/// barycentric weights of its corners.
#[derive(Debug, Clone)]
pub struct Visibility {
    canvas: Canvas,
    face: Vec<u32>,
    weights: Vec<[f32; 3]>,
    depth: Vec<f64>,
    /// Per-vertex Lambert intensity for this view.
    intensity: Vec<f32>,
}

/// Screen coordinates of points seen by `view`, fitted into a canvas of
/// `w x h` samples with a margin: x to the right, y down (samples), depth
/// towards the viewer. The fit uses the projected bounding box of
/// `positions`.
pub fn project(positions: &[Vec3], view: &View, w: usize, h: usize) -> Vec<[f64; 3]> {
    let (r, u, f) = view.basis();
    let mut lo = [f64::INFINITY; 2];
    let mut hi = [f64::NEG_INFINITY; 2];
    let cam: Vec<[f64; 3]> = positions
        .iter()
        .map(|&p| {
            let c = [dot(p, r), dot(p, u), dot(p, f)];
            for k in 0..2 {
                if c[k].is_finite() {
                    lo[k] = lo[k].min(c[k]);
                    hi[k] = hi[k].max(c[k]);
                }
            }
            c
        })
        .collect();
    let span_x = (hi[0] - lo[0]).max(1e-12);
    let span_y = (hi[1] - lo[1]).max(1e-12);
    let margin = 0.94;
    let s = (margin * w as f64 / span_x).min(margin * h as f64 / span_y);
    let (cx, cy) = (0.5 * (lo[0] + hi[0]), 0.5 * (lo[1] + hi[1]));
    cam.into_iter()
        .map(|c| {
            [
                0.5 * w as f64 + (c[0] - cx) * s,
                0.5 * h as f64 - (c[1] - cy) * s,
                c[2],
            ]
        })
        .collect()
}

/// The per-vertex Lambert intensity seen by `view`: ambient 0.3 plus
/// diffuse 0.7 times the cosine between the normal (turned towards the
/// viewer) and a light above and left of the viewer.
pub fn intensities(normals: &[Vec3], view: &View) -> Vec<f32> {
    let (r, u, f) = view.basis();
    let light = unit([
        f[0] + 0.45 * u[0] - 0.35 * r[0],
        f[1] + 0.45 * u[1] - 0.35 * r[1],
        f[2] + 0.45 * u[2] - 0.35 * r[2],
    ]);
    normals
        .iter()
        .map(|&n| {
            let n = if dot(n, f) < 0.0 { scale(n, -1.0) } else { n };
            (0.3 + 0.7 * dot(n, light).max(0.0)) as f32
        })
        .collect()
}

impl Visibility {
    /// Scan-convert screen-space triangles (`screen` from [`project`] on a
    /// canvas of `width * s x height * s` samples).
    pub fn from_screen(
        screen: &[[f64; 3]],
        faces: &[[u32; 3]],
        intensity: Vec<f32>,
        canvas: Canvas,
    ) -> Visibility {
        let s = canvas.supersample.max(1);
        let (w, h) = (canvas.width * s, canvas.height * s);
        let mut vis = Visibility {
            canvas,
            face: vec![u32::MAX; w * h],
            weights: vec![[0.0; 3]; w * h],
            depth: vec![f64::NEG_INFINITY; w * h],
            intensity,
        };
        for (fi, t) in faces.iter().enumerate() {
            let (Some(&a), Some(&b), Some(&c)) = (
                screen.get(t[0] as usize),
                screen.get(t[1] as usize),
                screen.get(t[2] as usize),
            ) else {
                continue;
            };
            vis.triangle(fi as u32, a, b, c, w, h);
        }
        vis
    }

    fn triangle(&mut self, fi: u32, a: [f64; 3], b: [f64; 3], c: [f64; 3], w: usize, h: usize) {
        let area = (b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0]);
        if !area.is_finite() || area.abs() <= 1e-12 {
            return;
        }
        let x0 = a[0].min(b[0]).min(c[0]).floor().max(0.0);
        let y0 = a[1].min(b[1]).min(c[1]).floor().max(0.0);
        let x1 = a[0].max(b[0]).max(c[0]).ceil().min(w as f64);
        let y1 = a[1].max(b[1]).max(c[1]).ceil().min(h as f64);
        if x0 >= x1 || y0 >= y1 {
            return;
        }
        let inv = 1.0 / area;
        for y in y0 as usize..y1 as usize {
            let py = y as f64 + 0.5;
            for x in x0 as usize..x1 as usize {
                let px = x as f64 + 0.5;
                // Weight of a corner: the signed area opposite it, over the whole.
                let wa = ((b[0] - px) * (c[1] - py) - (b[1] - py) * (c[0] - px)) * inv;
                let wb = ((c[0] - px) * (a[1] - py) - (c[1] - py) * (a[0] - px)) * inv;
                let wc = 1.0 - wa - wb;
                let wc2 = ((a[0] - px) * (b[1] - py) - (a[1] - py) * (b[0] - px)) * inv;
                if wa < 0.0 || wb < 0.0 || wc2 < 0.0 {
                    continue;
                }
                let z = wa * a[2] + wb * b[2] + wc * c[2];
                let i = y * w + x;
                if z > self.depth[i] {
                    self.depth[i] = z;
                    self.face[i] = fi;
                    self.weights[i] = [wa as f32, wb as f32, wc as f32];
                }
            }
        }
    }

    /// Render a mesh seen by `view` on `canvas`.
    pub fn render(
        positions: &[Vec3],
        faces: &[[u32; 3]],
        normals: &[Vec3],
        view: &View,
        canvas: Canvas,
    ) -> Visibility {
        let s = canvas.supersample.max(1);
        let screen = project(positions, view, canvas.width * s, canvas.height * s);
        Visibility::from_screen(&screen, faces, intensities(normals, view), canvas)
    }

    /// Samples covered by some triangle.
    pub fn covered(&self) -> usize {
        self.face.iter().filter(|&&f| f != u32::MAX).count()
    }

    /// The triangle seen at sample `(x, y)`.
    pub fn face_at(&self, x: usize, y: usize) -> Option<u32> {
        let w = self.canvas.width * self.canvas.supersample.max(1);
        self.face.get(y * w + x).copied().filter(|&f| f != u32::MAX)
    }

    /// The image with per-vertex `colours` (sRGB) shaded by the view's
    /// light, on `background`, averaged over each pixel's samples.
    pub fn shade(&self, faces: &[[u32; 3]], colours: &[[u8; 3]], background: [u8; 3]) -> Image {
        let s = self.canvas.supersample.max(1);
        let (w, h) = (self.canvas.width, self.canvas.height);
        let sw = w * s;
        let mut img = Image::filled(w, h, background);
        let n = (s * s) as f32;
        for y in 0..h {
            for x in 0..w {
                let mut acc = [0f32; 3];
                for sy in 0..s {
                    for sx in 0..s {
                        let i = (y * s + sy) * sw + x * s + sx;
                        let c = self.sample(i, faces, colours).unwrap_or([
                            f32::from(background[0]),
                            f32::from(background[1]),
                            f32::from(background[2]),
                        ]);
                        for k in 0..3 {
                            acc[k] += c[k];
                        }
                    }
                }
                img.set(
                    x,
                    y,
                    [
                        (acc[0] / n).round().clamp(0.0, 255.0) as u8,
                        (acc[1] / n).round().clamp(0.0, 255.0) as u8,
                        (acc[2] / n).round().clamp(0.0, 255.0) as u8,
                    ],
                );
            }
        }
        img
    }

    fn sample(&self, i: usize, faces: &[[u32; 3]], colours: &[[u8; 3]]) -> Option<[f32; 3]> {
        let f = *self.face.get(i)?;
        let t = faces.get(f as usize)?;
        let wts = self.weights.get(i)?;
        let mut c = [0f32; 3];
        for k in 0..3 {
            let v = t[k] as usize;
            let col = colours.get(v).copied().unwrap_or(super::colour::MISSING);
            let li = self.intensity.get(v).copied().unwrap_or(1.0);
            for j in 0..3 {
                c[j] += wts[k] * li * f32::from(col[j]);
            }
        }
        Some(c)
    }
}

/// Unit normals of a mesh's vertices (area-weighted face normals).
pub fn vertex_normals(positions: &[Vec3], faces: &[[u32; 3]]) -> Vec<Vec3> {
    let mut n = vec![[0.0; 3]; positions.len()];
    for t in faces {
        let (Some(&a), Some(&b), Some(&c)) = (
            positions.get(t[0] as usize),
            positions.get(t[1] as usize),
            positions.get(t[2] as usize),
        ) else {
            continue;
        };
        let fc = cross(sub(b, a), sub(c, a));
        for &v in t {
            if let Some(x) = n.get_mut(v as usize) {
                *x = [x[0] + fc[0], x[1] + fc[1], x[2] + fc[2]];
            }
        }
    }
    n.into_iter().map(unit).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn canvas(w: usize, h: usize) -> Canvas {
        Canvas {
            width: w,
            height: h,
            supersample: 1,
        }
    }

    #[test]
    fn a_known_triangle_covers_the_right_pixels() {
        // Corners at sample coordinates (1,1), (9,1), (1,9): the pixel
        // centres (x + 1/2, y + 1/2) inside or on the edges are those with
        // x >= 1, y >= 1 and x + y <= 9: 8 + 7 + ... + 1 = 36 pixels.
        let screen = [[1.0, 1.0, 0.0], [9.0, 1.0, 0.0], [1.0, 9.0, 0.0]];
        for faces in [[[0u32, 1, 2]], [[0u32, 2, 1]]] {
            let vis = Visibility::from_screen(&screen, &faces, vec![1.0; 3], canvas(12, 12));
            assert_eq!(vis.covered(), 36);
            for y in 0..12 {
                for x in 0..12 {
                    let inside = x >= 1 && y >= 1 && x + y <= 9;
                    assert_eq!(vis.face_at(x, y).is_some(), inside, "pixel ({x},{y})");
                }
            }
        }
        // Colours interpolate: a pixel near corner 0 is nearly its colour.
        let vis = Visibility::from_screen(&screen, &[[0, 1, 2]], vec![1.0; 3], canvas(12, 12));
        let img = vis.shade(
            &[[0, 1, 2]],
            &[[255, 0, 0], [0, 255, 0], [0, 0, 255]],
            [0; 3],
        );
        let c = img.get(1, 1).unwrap();
        assert!(c[0] > 200 && c[1] < 40 && c[2] < 40, "{c:?}");
        assert_eq!(img.get(0, 0), Some([0, 0, 0]), "background");
    }

    #[test]
    fn the_nearest_triangle_wins_in_any_drawing_order() {
        // Two overlapping squares' worth of triangles; the far one (z = -1)
        // drawn first or last, the near one (z = +1) must be seen.
        let screen = [
            [0.0, 0.0, -1.0],
            [10.0, 0.0, -1.0],
            [0.0, 10.0, -1.0],
            [0.0, 0.0, 1.0],
            [10.0, 0.0, 1.0],
            [0.0, 10.0, 1.0],
        ];
        let far = [0u32, 1, 2];
        let near = [3u32, 4, 5];
        for faces in [[far, near], [near, far]] {
            let vis = Visibility::from_screen(&screen, &faces, vec![1.0; 6], canvas(10, 10));
            let near_index = faces.iter().position(|f| *f == near).unwrap() as u32;
            assert_eq!(vis.face_at(2, 2), Some(near_index));
            let colours = [[0, 0, 255]; 3]
                .into_iter()
                .chain([[255, 0, 0]; 3])
                .collect::<Vec<_>>();
            let img = vis.shade(&faces, &colours, [0; 3]);
            assert_eq!(img.get(2, 2), Some([255, 0, 0]));
        }
    }

    #[test]
    fn a_lit_sphere_is_brightest_towards_the_light() {
        let m = crate::mesh::shapes::icosphere(3, 1.0);
        let normals = vertex_normals(&m.positions, &m.faces);
        let view = View::hemisphere("L")[0];
        let c = Canvas {
            width: 40,
            height: 40,
            supersample: 2,
        };
        let vis = Visibility::render(&m.positions, &m.faces, &normals, &view, c);
        // A disk of radius ~ 0.94 * 20 px: area ~ 1110 px of 1600 (4 samples each).
        let frac = vis.covered() as f64 / (80.0 * 80.0);
        let disk = std::f64::consts::PI * 0.47 * 0.47;
        assert!((frac - disk).abs() < 0.03, "covered {frac}, disk {disk}");
        let img = vis.shade(&m.faces, &vec![[200, 200, 200]; m.n_vertices()], [0; 3]);
        // Light comes from the upper left: that side is brighter than the lower right.
        let ul = img.get(13, 13).unwrap()[0];
        let lr = img.get(27, 27).unwrap()[0];
        assert!(ul > lr + 30, "upper left {ul}, lower right {lr}");
        // The same bytes again.
        let vis2 = Visibility::render(&m.positions, &m.faces, &normals, &view, c);
        assert_eq!(
            vis2.shade(&m.faces, &vec![[200, 200, 200]; m.n_vertices()], [0; 3]),
            img
        );
    }
}
