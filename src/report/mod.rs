//! The cohort QC report: one self-contained HTML file an analyst reads.
//!
//! In: the output folder of `horosphere run` (unit records, the QC table,
//! repaired surfaces, aligned spheres, resampled maps), optionally the study
//! folder (native input surfaces and maps) and a statistics folder of
//! `horosphere stats`. Out: the HTML bytes (images inline as
//! `data:image/png;base64`), written atomically by [`write_report`]; layout
//! and how to read it in `docs/report.md`.
//!
//! Pictures are drawn by our own rasteriser ([`raster`]: orthographic
//! views, z-buffer, Lambert shading, supersampling) and PNG encoder
//! ([`png`]), coloured with our own maps ([`colour`]); distortion
//! histograms by [`histogram`]; the page by [`html`]. Distortion measures
//! in [`load`].
//!
//! What stays true: the bytes depend only on the files read and the
//! options (no time stamps, no absolute paths; units are rendered in
//! parallel but assembled in QC-table order with pure arithmetic, so any
//! thread count gives the same file); a unit with missing or unreadable
//! files gets a note in its card, never a failed report; a folder that is
//! not a run output is an error naming what is missing.

pub mod colour;
pub mod histogram;
pub mod html;
pub mod load;
pub mod png;
pub mod raster;

use crate::error::{Error, Result};
use crate::io::atomic::write_bytes;
use crate::mesh::TriMesh;
use base64::Engine;
use colour::{percentile, ColourMap};
use load::{face_distortion, load_geometry, read_results, vertex_log_area_ratio, Targets};
use raster::{vertex_normals, Canvas, View, Visibility};
use rayon::prelude::*;
use std::path::{Path, PathBuf};

/// Relative path of the report `horosphere run` writes.
pub const RUN_REPORT: &str = "group/desc-cohort_report.html";

/// Options of the report.
#[derive(Debug, Clone, PartialEq)]
pub struct ReportOptions {
    /// The study folder (input surfaces and maps), when known.
    pub study: Option<PathBuf>,
    /// A folder written by `horosphere stats`; `None`: `RESULTS/stats` if
    /// it exists.
    pub stats: Option<PathBuf>,
    /// The per-vertex map the surfaces are coloured by.
    pub map: String,
    /// Size of one picture panel, pixels.
    pub panel: (usize, usize),
    /// Samples per pixel along each axis.
    pub supersample: usize,
}

impl Default for ReportOptions {
    fn default() -> Self {
        ReportOptions {
            study: None,
            stats: None,
            map: "thickness".into(),
            panel: (150, 112),
            supersample: 2,
        }
    }
}

/// What the report holds.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ReportSummary {
    pub units: usize,
    pub failed: usize,
    /// Units with pictures.
    pub pictured: usize,
    /// Inline images in the file.
    pub images: usize,
    /// Statistics maps shown.
    pub stats_maps: usize,
    pub bytes: usize,
}

/// Page background and the backdrop of pictures.
pub const BACKDROP: [u8; 3] = [247, 245, 240];

/// A PNG as a `data:` URI.
pub fn data_uri(img: &png::Image) -> Result<String> {
    let bytes = png::encode(img)?;
    Ok(format!(
        "data:image/png;base64,{}",
        base64::engine::general_purpose::STANDARD.encode(bytes)
    ))
}

/// Colour ranges shared by every unit of the cohort.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Ranges {
    /// Of the colouring map (sequential).
    pub values: (f64, f64),
    /// Half-width of the symmetric log-area-ratio range.
    pub log_area: f64,
    /// Upper end of the angle-distortion histogram (from 1).
    pub angle_max: f64,
}

/// Per-unit quantiles used to set the shared ranges.
#[derive(Debug, Clone, Copy, Default)]
struct UnitQuantiles {
    v_lo: Option<f64>,
    v_hi: Option<f64>,
    lar: Option<f64>,
    ang: Option<f64>,
}

fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

/// Median of the present values.
fn median(xs: impl Iterator<Item = Option<f64>>) -> Option<f64> {
    let v: Vec<f64> = xs.flatten().collect();
    finite(percentile(&v, 0.5))
}

/// Pictures and figures of one unit.
#[derive(Debug, Clone, Default)]
pub struct UnitPictures {
    /// Panel captions (`native lateral`, ...), in strip order.
    pub panels: Vec<String>,
    /// Strip coloured by the map (data URI).
    pub by_map: Option<String>,
    /// Strip coloured by the per-vertex log area ratio.
    pub by_area: Option<String>,
    /// Histograms: per-face log area ratio and angle distortion.
    pub hist_area: Option<String>,
    pub hist_angle: Option<String>,
    /// Per-face quantiles shown beside the histograms.
    pub area_p5_p95: Option<(f64, f64)>,
    pub angle_p50_p95: Option<(f64, f64)>,
    pub native_from: String,
    pub values_from: String,
    pub notes: Vec<String>,
}

struct Rendered {
    quant: UnitQuantiles,
}

fn quantiles(geom: &load::UnitGeometry) -> Rendered {
    let mut q = UnitQuantiles::default();
    if let Some(v) = &geom.values {
        q.v_lo = finite(percentile(v, 0.02));
        q.v_hi = finite(percentile(v, 0.98));
    }
    if let (Some(n), Some(s)) = (&geom.native, &geom.sphere) {
        let (lar, ang) = face_distortion(n, s);
        let lo = percentile(&lar, 0.02).abs();
        let hi = percentile(&lar, 0.98).abs();
        q.lar = finite(lo.max(hi));
        q.ang = finite(percentile(&ang, 0.95));
    }
    Rendered { quant: q }
}

/// Render the views of `mesh` once and shade them with each colouring.
fn strips(
    mesh: &TriMesh,
    views: &[View],
    canvas: Canvas,
    colourings: &[&[[u8; 3]]],
) -> Vec<Vec<png::Image>> {
    let normals = vertex_normals(&mesh.positions, &mesh.faces);
    let mut out: Vec<Vec<png::Image>> = vec![Vec::new(); colourings.len()];
    for v in views {
        let vis = Visibility::render(&mesh.positions, &mesh.faces, &normals, v, canvas);
        for (k, c) in colourings.iter().enumerate() {
            out[k].push(vis.shade(&mesh.faces, c, BACKDROP));
        }
    }
    out
}

/// Side by side, separated by a gap of backdrop.
fn join(panels: &[png::Image]) -> Option<png::Image> {
    let first = panels.first()?;
    let gap = 4;
    let w = panels.iter().map(|p| p.width).sum::<usize>() + gap * (panels.len() - 1);
    let mut img = png::Image::filled(w, first.height, BACKDROP);
    let mut x = 0;
    for p in panels {
        img.blit(p, x, 0);
        x += p.width + gap;
    }
    Some(img)
}

fn hist_style(marker: f64) -> histogram::HistogramStyle {
    histogram::HistogramStyle {
        width: 200,
        height: 56,
        bar: [52, 96, 120],
        background: [255, 255, 255],
        axis: [90, 90, 90],
        marker: Some(marker),
    }
}

fn pictures(
    geom: load::UnitGeometry,
    hemi: &str,
    ranges: &Ranges,
    opts: &ReportOptions,
) -> Result<UnitPictures> {
    let mut p = UnitPictures {
        native_from: geom.native_from.clone(),
        values_from: geom.values_from.clone(),
        notes: geom.notes.clone(),
        ..UnitPictures::default()
    };
    let Some(sphere) = &geom.sphere else {
        return Ok(p);
    };
    let views = View::hemisphere(hemi);
    let canvas = Canvas {
        width: opts.panel.0,
        height: opts.panel.1,
        supersample: opts.supersample.max(1),
    };
    let n = sphere.n_vertices();
    let by_map: Vec<[u8; 3]> = match &geom.values {
        Some(v) => v
            .iter()
            .map(|&x| ColourMap::Ember.value(x, ranges.values.0, ranges.values.1))
            .collect(),
        None => vec![colour::MISSING; n],
    };
    let lar_v = geom
        .native
        .as_ref()
        .map(|nat| vertex_log_area_ratio(nat, sphere));
    let by_area: Vec<[u8; 3]> = match &lar_v {
        Some(l) => l
            .iter()
            .map(|&x| ColourMap::Tide.value(x, -ranges.log_area, ranges.log_area))
            .collect(),
        None => vec![colour::MISSING; n],
    };
    let mut map_panels = Vec::new();
    let mut area_panels = Vec::new();
    if let Some(nat) = &geom.native {
        let s = strips(nat, &views, canvas, &[&by_map, &by_area]);
        map_panels.extend(s[0].iter().cloned());
        area_panels.extend(s[1].iter().cloned());
        p.panels
            .extend(views.iter().map(|v| format!("surface {}", v.name)));
    }
    let s = strips(sphere, &views, canvas, &[&by_map, &by_area]);
    map_panels.extend(s[0].iter().cloned());
    area_panels.extend(s[1].iter().cloned());
    p.panels
        .extend(views.iter().map(|v| format!("sphere {}", v.name)));
    if geom.values.is_some() {
        if let Some(img) = join(&map_panels) {
            p.by_map = Some(data_uri(&img)?);
        }
    }
    if let (Some(nat), true) = (&geom.native, lar_v.is_some()) {
        if let Some(img) = join(&area_panels) {
            p.by_area = Some(data_uri(&img)?);
        }
        let (lar, ang) = face_distortion(nat, sphere);
        let la = ranges.log_area;
        p.hist_area = Some(data_uri(&histogram::histogram_image(
            &lar,
            -la,
            la,
            40,
            &hist_style(0.0),
        ))?);
        p.hist_angle = Some(data_uri(&histogram::histogram_image(
            &ang,
            1.0,
            ranges.angle_max,
            40,
            &hist_style(1.0),
        ))?);
        p.area_p5_p95 = Some((percentile(&lar, 0.05), percentile(&lar, 0.95)));
        p.angle_p50_p95 = Some((percentile(&ang, 0.5), percentile(&ang, 0.95)));
    }
    Ok(p)
}

/// One statistics map rendered on the common sphere.
#[derive(Debug, Clone)]
pub struct StatsPicture {
    /// `hemi-L`, ... or empty.
    pub hemi: String,
    /// `t` or `effect`.
    pub stat: String,
    pub strip: String,
    pub panels: Vec<String>,
    /// Symmetric colour range `[-r, r]`.
    pub range: f64,
    /// Summary fields (formula, contrast, df, significant vertices, ...).
    pub summary: Vec<(String, String)>,
}

fn find_stats(root: &Path, opts: &ReportOptions) -> Result<Option<PathBuf>> {
    match &opts.stats {
        Some(d) if d.is_dir() => Ok(Some(d.clone())),
        Some(d) => Err(Error::bad_file(
            d,
            "folder",
            "not found; expected the output folder of `horosphere stats`",
        )),
        None => {
            let d = root.join("stats");
            Ok(d.is_dir().then_some(d))
        }
    }
}

fn stats_pictures(dir: &Path, opts: &ReportOptions) -> Result<Vec<StatsPicture>> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .map_err(|e| Error::io(dir, e))?
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with("stat-t.shape.gii"))
        .collect();
    names.sort();
    if names.is_empty() {
        return Err(Error::bad_file(
            dir,
            "folder",
            "no `stat-t.shape.gii` map; expected the output folder of `horosphere stats`",
        ));
    }
    let canvas = Canvas {
        width: opts.panel.0 + opts.panel.0 / 2,
        height: opts.panel.0 + opts.panel.0 / 2,
        supersample: opts.supersample.max(1),
    };
    let mut out = Vec::new();
    for name in names {
        let prefix = name.trim_end_matches("stat-t.shape.gii").to_string();
        let hemi_tag = prefix.trim_end_matches('_').to_string();
        let hemi = hemi_tag.strip_prefix("hemi-").unwrap_or("L");
        let summary_path = dir.join(format!("{prefix}stat-summary.json"));
        let summary: Vec<(String, String)> = std::fs::read(&summary_path)
            .ok()
            .and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok())
            .map(|v| {
                [
                    "formula",
                    "contrast",
                    "units",
                    "df",
                    "vertices",
                    "masked_vertices",
                    "q_threshold",
                    "significant_vertices",
                ]
                .iter()
                .filter_map(|k| {
                    let x = v.get(*k)?;
                    let s = match x {
                        serde_json::Value::String(s) => s.clone(),
                        other => other.to_string(),
                    };
                    Some((k.to_string(), s))
                })
                .collect()
            })
            .unwrap_or_default();
        for (j, stat) in ["t", "effect"].into_iter().enumerate() {
            let p = dir.join(format!("{prefix}stat-{stat}.shape.gii"));
            if !p.is_file() {
                continue;
            }
            let v = gifti::read_shape(&p)?;
            let vals: Vec<f64> = v.values.iter().map(|&x| f64::from(x)).collect();
            let Some(k) = (0..=8u32).find(|&k| 10 * 4usize.pow(k) + 2 == vals.len()) else {
                return Err(Error::bad_file(
                    &p,
                    "DataArray 0",
                    format!(
                        "{} values; expected the vertex count of an icosahedral target (10*4^k+2)",
                        vals.len()
                    ),
                ));
            };
            let mesh = crate::mesh::shapes::icosphere(k, 100.0);
            let abs: Vec<f64> = vals.iter().map(|x| x.abs()).collect();
            let mut r = percentile(&abs, 0.99);
            if !r.is_finite() || r <= 0.0 {
                r = 1.0;
            }
            let colours: Vec<[u8; 3]> = vals
                .iter()
                .map(|&x| ColourMap::Tide.value(x, -r, r))
                .collect();
            let views = View::hemisphere(hemi);
            let s = strips(&mesh, &views, canvas, &[&colours]);
            let Some(img) = join(&s[0]) else { continue };
            out.push(StatsPicture {
                hemi: hemi_tag.clone(),
                stat: stat.into(),
                strip: data_uri(&img)?,
                panels: views.iter().map(|v| v.name.to_string()).collect(),
                range: r,
                summary: if j == 0 { summary.clone() } else { Vec::new() },
            });
        }
    }
    Ok(out)
}

use crate::io::gifti;

/// Build the report of the run output `results`. `progress(done, total)`
/// is called as units are rendered (from worker threads).
pub fn build_report(
    results: &Path,
    opts: &ReportOptions,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<(Vec<u8>, ReportSummary)> {
    let cohort = read_results(results)?;
    let stats_dir = find_stats(results, opts)?;
    let targets = Targets::default();
    let total = cohort.units.len();
    let study = opts.study.as_deref();
    // Pass 1: shared colour ranges from per-unit quantiles (medians over units).
    let quant: Vec<UnitQuantiles> = cohort
        .units
        .par_iter()
        .with_max_len(1)
        .map(|u| match &u.record {
            Some(r) => quantiles(&load_geometry(results, study, r, &opts.map, &targets)).quant,
            None => UnitQuantiles::default(),
        })
        .collect();
    let v_lo = median(quant.iter().map(|q| q.v_lo)).unwrap_or(0.0);
    let v_hi = median(quant.iter().map(|q| q.v_hi)).unwrap_or(1.0);
    let ranges = Ranges {
        values: if v_hi > v_lo {
            (v_lo, v_hi)
        } else {
            (v_lo, v_lo + 1.0)
        },
        log_area: median(quant.iter().map(|q| q.lar))
            .filter(|&x| x > 0.0)
            .unwrap_or(1.0),
        angle_max: median(quant.iter().map(|q| q.ang))
            .map(|x| 1.0 + 1.5 * (x - 1.0))
            .filter(|&x| x > 1.0)
            .unwrap_or(2.0),
    };
    // Pass 2: pictures.
    let done = std::sync::atomic::AtomicUsize::new(0);
    let pics: Vec<Result<UnitPictures>> = cohort
        .units
        .par_iter()
        .with_max_len(1)
        .map(|u| {
            let r = match &u.record {
                Some(r) => {
                    let g = load_geometry(results, study, r, &opts.map, &targets);
                    pictures(g, &u.hemi, &ranges, opts)
                }
                None => Ok(UnitPictures::default()),
            };
            let k = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
            progress(k, total);
            r
        })
        .collect();
    let pics: Vec<UnitPictures> = pics.into_iter().collect::<Result<_>>()?;
    let stats = match &stats_dir {
        Some(d) => stats_pictures(d, opts)?,
        None => Vec::new(),
    };
    let page = html::Page {
        cohort: &cohort,
        pictures: &pics,
        ranges,
        map: &opts.map,
        stats: &stats,
        study_given: study.is_some(),
    };
    let text = page.render()?;
    let bytes = text.into_bytes();
    let summary = ReportSummary {
        units: total,
        failed: cohort
            .units
            .iter()
            .filter(|u| u.field("status") == "failed")
            .count(),
        pictured: pics
            .iter()
            .filter(|p| p.by_map.is_some() || p.by_area.is_some())
            .count(),
        images: count_images(&bytes),
        stats_maps: stats.len(),
        bytes: bytes.len(),
    };
    Ok((bytes, summary))
}

fn count_images(bytes: &[u8]) -> usize {
    let pat = b"<img ";
    bytes.windows(pat.len()).filter(|w| w == pat).count()
}

/// Build the report and write it to `out` atomically.
pub fn write_report(
    results: &Path,
    out: &Path,
    opts: &ReportOptions,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<ReportSummary> {
    let (bytes, summary) = build_report(results, opts, progress)?;
    write_bytes(out, &bytes)?;
    Ok(summary)
}
