//! The HTML page of the report.
//!
//! In: the cohort results ([`super::load::CohortResults`]), each unit's
//! pictures, the shared colour ranges and the statistics pictures. Out: one
//! HTML5 document with its style sheet inline and every image a
//! `data:image/png;base64` URI: no script, no external resource, so it
//! opens the same anywhere and can be mailed or archived as one file.
//!
//! Sections, in order: header with counts, the research-use caution, the
//! QC table (one row per subject and hemisphere, failed ones included,
//! status as a coloured chip and a row stripe), topology findings,
//! landmark residuals, unit cards (pictures, distortion histograms,
//! notes), statistics maps with a colour bar. What stays true: all text
//! from files is HTML-escaped; numbers are printed with fixed precision;
//! no time stamp or path outside the output root appears.

use super::colour::{colour_bar, ColourMap};
use super::load::{CohortResults, UnitEntry};
use super::{data_uri, Ranges, StatsPicture, UnitPictures};
use crate::error::Result;
use std::fmt::Write;

/// Escape text for HTML element content and attribute values.
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            _ => o.push(c),
        }
    }
    o
}

const STYLE: &str = r#"
:root{--ink:#23262b;--muted:#5d636b;--line:#d9d4c7;--paper:#f7f5f0;--card:#fffdf8;
--ok:#2e7d5b;--rep:#b7791f;--bad:#b23a3a;--accent:#2f5d6e}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);font:14px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif}
main{max-width:1280px;margin:0 auto;padding:20px 28px 60px}
header.top{display:flex;flex-wrap:wrap;align-items:flex-end;gap:16px 40px;border-bottom:3px solid var(--accent);padding-bottom:12px}
header.top h1{margin:0;font-size:26px;letter-spacing:.01em}
header.top .sub{color:var(--muted)}
.tiles{display:flex;gap:10px;margin-left:auto}
.tile{background:var(--card);border:1px solid var(--line);border-radius:6px;padding:6px 14px;text-align:center;min-width:84px}
.tile b{display:block;font-size:22px}
.tile.ok b{color:var(--ok)}.tile.rep b{color:var(--rep)}.tile.bad b{color:var(--bad)}
.caution{margin:16px 0;padding:10px 14px;border-left:6px solid var(--rep);background:#fbf3e4}
nav.toc{margin:10px 0 4px;color:var(--muted)}nav.toc a{color:var(--accent);margin-right:14px}
h2{margin:30px 0 8px;font-size:19px;color:var(--accent);border-bottom:1px solid var(--line);padding-bottom:3px}
p.help{color:var(--muted);margin:4px 0 10px;max-width:900px}
.scroll{overflow-x:auto}
table{border-collapse:collapse;background:var(--card);font-variant-numeric:tabular-nums}
th,td{border:1px solid var(--line);padding:3px 7px;text-align:right;white-space:nowrap}
th{background:#ece8dd;font-weight:600;text-align:center;position:sticky;top:0}
td.l,th.l{text-align:left}
td.err{white-space:normal;max-width:360px;text-align:left;color:var(--bad);font-size:12px}
tr.ok td:first-child{box-shadow:inset 5px 0 var(--ok)}
tr.repaired td:first-child{box-shadow:inset 5px 0 var(--rep)}
tr.failed td:first-child{box-shadow:inset 5px 0 var(--bad)}
tr.failed{background:#fbeeee}
.chip{display:inline-block;min-width:70px;text-align:center;border-radius:10px;padding:0 8px;color:#fff;font-size:12px;font-weight:600}
.chip.ok{background:var(--ok)}.chip.repaired{background:var(--rep)}.chip.failed{background:var(--bad)}
td.flag{background:#f6dfc4}
.cards{display:grid;grid-template-columns:1fr;gap:14px}
.card{background:var(--card);border:1px solid var(--line);border-radius:8px;padding:10px 14px}
.card.failed{border-left:6px solid var(--bad)}.card.repaired{border-left:6px solid var(--rep)}.card.ok{border-left:6px solid var(--ok)}
.card h3{margin:0 0 6px;font-size:16px;display:flex;gap:12px;align-items:center}
.strip{margin:4px 0}
.strip .cap{font-size:12px;color:var(--muted)}
.strip img,.stats img{display:block;max-width:100%;image-rendering:auto;border:1px solid var(--line)}
.hists{display:flex;flex-wrap:wrap;gap:18px;margin-top:6px}
.hist .cap{font-size:12px;color:var(--muted)}
.notes{font-size:12px;color:var(--muted);margin:4px 0 0;padding-left:18px}
.legend{display:flex;flex-wrap:wrap;gap:24px;align-items:center;margin:6px 0 12px}
.bar{font-size:12px;color:var(--muted)}
.bar .ends{display:flex;justify-content:space-between}
.lm{display:inline-block;height:8px;background:var(--accent);vertical-align:middle;margin-left:4px}
footer{margin-top:40px;color:var(--muted);font-size:12px;border-top:1px solid var(--line);padding-top:8px}
"#;

/// Everything the page shows.
pub struct Page<'a> {
    pub cohort: &'a CohortResults,
    pub pictures: &'a [UnitPictures],
    pub ranges: Ranges,
    pub map: &'a str,
    pub stats: &'a [StatsPicture],
    pub study_given: bool,
}

fn num(s: &str, digits: usize) -> String {
    match s.parse::<f64>() {
        Ok(x) if x.is_finite() => format!("{x:.digits$}"),
        _ => esc(s),
    }
}

fn fmt(x: f64, digits: usize) -> String {
    if x.is_finite() {
        format!("{x:.digits$}")
    } else {
        "n/a".into()
    }
}

fn status_class(s: &str) -> &'static str {
    match s {
        "ok" => "ok",
        "repaired" => "repaired",
        _ => "failed",
    }
}

fn bar_html(map: ColourMap, lo: &str, mid: Option<&str>, hi: &str, label: &str) -> Result<String> {
    let uri = data_uri(&colour_bar(map, 220, 14))?;
    Ok(format!(
        "<div class=\"bar\"><div>{}</div><img src=\"{uri}\" width=\"220\" height=\"14\" alt=\"colour bar: {}\"><div class=\"ends\"><span>{}</span>{}<span>{}</span></div></div>",
        esc(label),
        esc(label),
        esc(lo),
        mid.map(|m| format!("<span>{}</span>", esc(m))).unwrap_or_default(),
        esc(hi)
    ))
}

impl Page<'_> {
    /// The HTML document.
    pub fn render(&self) -> Result<String> {
        let mut h = String::with_capacity(1 << 20);
        let units = &self.cohort.units;
        let count = |s: &str| units.iter().filter(|u| u.field("status") == s).count();
        let n_failed = units
            .iter()
            .filter(|u| status_class(u.field("status")) == "failed")
            .count();
        let _ = write!(
            h,
            "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<link rel=\"icon\" href=\"data:,\">\
<title>horosphere cohort QC report</title><style>{STYLE}</style></head><body><main>\n"
        );
        let _ = writeln!(
            h,
            "<header class=\"top\"><div><h1>Cohort QC report</h1><div class=\"sub\">horosphere {} &middot; {} units (subject &times; hemisphere)</div></div>\
<div class=\"tiles\"><div class=\"tile\"><b>{}</b>units</div><div class=\"tile ok\"><b>{}</b>ok</div><div class=\"tile rep\"><b>{}</b>repaired</div><div class=\"tile bad\"><b>{}</b>failed</div></div></header>",
            env!("CARGO_PKG_VERSION"),
            units.len(),
            units.len(),
            count("ok"),
            count("repaired"),
            n_failed
        );
        h.push_str(
            "<div class=\"caution\" role=\"note\"><b>Research use only.</b> horosphere is not a medical device and must not be used for diagnosis or treatment decisions. \
Every result in this report needs review by a trained analyst. Local ethics approval and data-protection rules apply to the data shown here.</div>\n",
        );
        h.push_str("<nav class=\"toc\"><a href=\"#qc\">QC table</a><a href=\"#topology\">Topology</a><a href=\"#landmarks\">Landmarks</a><a href=\"#units\">Units</a>");
        if !self.stats.is_empty() {
            h.push_str("<a href=\"#stats\">Statistics</a>");
        }
        h.push_str("</nav>\n");
        self.qc_table(&mut h);
        self.topology(&mut h);
        self.landmarks(&mut h);
        self.unit_cards(&mut h)?;
        self.stats_section(&mut h)?;
        let _ = write!(
            h,
            "<footer>Written by horosphere {} from the files of this output folder; the same files give the same report. How to read it: docs/report.md.</footer>\n</main></body></html>\n",
            env!("CARGO_PKG_VERSION")
        );
        Ok(h)
    }

    fn qc_table(&self, h: &mut String) {
        h.push_str("<h2 id=\"qc\">QC table</h2><p class=\"help\">One row per subject and hemisphere, failed ones included (the stripe and chip give the status). \
Holes, handles and pieces are the input's defects; distortion columns are the mapper's (per face); landmark residuals are degrees on the sphere. Shaded cells stand out from the cohort (see docs/report.md).</p>\n");
        h.push_str("<div class=\"scroll\"><table id=\"qc-table\"><thead><tr>\
<th class=\"l\">unit</th><th>status</th><th class=\"l\">failed stage / error</th><th>vertices</th><th>holes</th><th>handles</th><th>pieces</th>\
<th>repair added</th><th>map path</th><th>Newton its</th><th>angle p50</th><th>angle p95</th><th>log area p5</th><th>log area p95</th><th>inverted</th><th>landmarks</th><th>RMS &deg;</th><th>max &deg;</th></tr></thead><tbody>\n");
        // Cohort medians for flagging unusual values.
        let med = |col: &str| -> f64 {
            let v: Vec<f64> = self
                .cohort
                .units
                .iter()
                .filter_map(|u| u.field(col).parse::<f64>().ok())
                .collect();
            super::colour::percentile(&v, 0.5)
        };
        let rms_med = med("landmark_rms_deg");
        let ang_med = med("angle_distortion_p95");
        for u in &self.cohort.units {
            let st = u.field("status");
            let cls = status_class(st);
            let err = if u.field("error").is_empty() {
                String::new()
            } else {
                format!(
                    "<b>{}</b>: {}",
                    esc(u.field("failed_stage")),
                    esc(u.field("error"))
                )
            };
            let flag = |col: &str, m: f64| -> &'static str {
                match u.field(col).parse::<f64>() {
                    Ok(x) if m.is_finite() && m > 0.0 && x > 2.0 * m => " flag",
                    _ => "",
                }
            };
            let nonzero = |col: &str| -> &'static str {
                match u.field(col).parse::<f64>() {
                    Ok(x) if x > 0.0 => " flag",
                    _ => "",
                }
            };
            let handles = u.field("genus");
            let _ = writeln!(
                h,
                "<tr class=\"{cls}\" data-unit=\"{}\"><td class=\"l\"><a href=\"#u-{}\">{}</a></td><td><span class=\"chip {cls}\">{}</span></td><td class=\"err\">{err}</td>\
<td>{}</td><td class=\"{}\">{}</td><td class=\"{}\">{}</td><td class=\"{}\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"{}\">{}</td><td>{}</td><td>{}</td><td class=\"{}\">{}</td><td>{}</td><td class=\"{}\">{}</td><td>{}</td></tr>",
                esc(&u.name()),
                esc(&u.name()),
                esc(&u.name()),
                esc(st),
                esc(u.field("vertices")),
                nonzero("boundary_loops"),
                esc(u.field("boundary_loops")),
                nonzero("genus"),
                esc(handles),
                nonzero("pieces_dropped"),
                esc(u.field("pieces_dropped")),
                esc(u.field("vertices_added")),
                esc(u.field("map_path")),
                esc(u.field("map_iterations")),
                num(u.field("angle_distortion_p50"), 3),
                flag("angle_distortion_p95", ang_med),
                num(u.field("angle_distortion_p95"), 3),
                num(u.field("log_area_ratio_p5"), 2),
                num(u.field("log_area_ratio_p95"), 2),
                nonzero("inverted_faces"),
                esc(u.field("inverted_faces")),
                esc(u.field("landmarks")),
                flag("landmark_rms_deg", rms_med),
                num(u.field("landmark_rms_deg"), 2),
                num(u.field("landmark_max_deg"), 2),
            );
        }
        h.push_str("</tbody></table></div>\n");
    }

    fn topology(&self, h: &mut String) {
        h.push_str("<h2 id=\"topology\">Topology findings</h2><p class=\"help\">What inspection found in each input surface and what repair changed. \
Units whose input was ready to map as given are summarised in one line.</p>\n");
        let cols = [
            ("components", "pieces"),
            ("boundary_loops", "holes"),
            ("genus", "handles (genus)"),
            ("non_manifold_edges", "non-manifold edges"),
            ("duplicate_vertices", "duplicate vertices"),
            ("degenerate_faces", "degenerate faces"),
            ("holes_filled", "holes filled"),
            ("pieces_dropped", "pieces dropped"),
            ("vertices_merged", "vertices merged"),
            ("faces_dropped", "faces dropped"),
            ("faces_reoriented", "faces reoriented"),
            ("handles_found", "handles found"),
            ("handles_cut", "handles cut"),
            ("handle_loops_mm", "handle loops (mm)"),
            ("handle_locations", "handle centres x;y;z (mm)"),
        ];
        let with: Vec<&UnitEntry> = self
            .cohort
            .units
            .iter()
            .filter(|u| u.field("ready_to_map") != "true")
            .collect();
        let clean = self.cohort.units.len() - with.len();
        let _ = writeln!(
            h,
            "<p>{clean} of {} input surfaces were closed, single-piece, genus-0 manifolds ready to map as given.</p>",
            self.cohort.units.len()
        );
        if with.is_empty() {
            return;
        }
        h.push_str("<div class=\"scroll\"><table id=\"topology-table\"><thead><tr><th class=\"l\">unit</th><th>status</th>");
        for (_, label) in cols {
            let _ = write!(h, "<th>{label}</th>");
        }
        h.push_str("</tr></thead><tbody>\n");
        for u in with {
            let cls = status_class(u.field("status"));
            let _ = write!(
                h,
                "<tr class=\"{cls}\"><td class=\"l\">{}</td><td><span class=\"chip {cls}\">{}</span></td>",
                esc(&u.name()),
                esc(u.field("status"))
            );
            for (c, _) in cols {
                let v = u.field(c);
                let bad = match c {
                    "components" => v.parse::<u64>().is_ok_and(|x| x > 1),
                    _ => v.parse::<f64>().is_ok_and(|x| x > 0.0),
                };
                let _ = write!(
                    h,
                    "<td{}>{}</td>",
                    if bad { " class=\"flag\"" } else { "" },
                    esc(v)
                );
            }
            h.push_str("</tr>\n");
        }
        h.push_str("</tbody></table></div>\n");
    }

    fn landmarks(&self, h: &mut String) {
        h.push_str("<h2 id=\"landmarks\">Landmark residuals</h2><p class=\"help\">Angle in degrees on the sphere between each landmark after alignment and its template position. \
Bars are drawn to a common scale (the widest is the cohort's largest residual).</p>\n");
        let mut names: Vec<String> = Vec::new();
        let mut max = 0.0f64;
        for u in &self.cohort.units {
            if let Some(a) = u.record.as_ref().and_then(|r| r.align.as_ref()) {
                for l in &a.residuals {
                    if !names.contains(&l.name) {
                        names.push(l.name.clone());
                    }
                    if let Some(d) = l.residual_degrees {
                        max = max.max(d);
                    }
                }
            }
        }
        if names.is_empty() {
            h.push_str("<p>No unit was aligned with landmarks.</p>\n");
            return;
        }
        h.push_str("<div class=\"scroll\"><table id=\"landmark-table\"><thead><tr><th class=\"l\">unit</th>");
        for n in &names {
            let _ = write!(h, "<th>{}</th>", esc(n));
        }
        h.push_str("<th>RMS</th></tr></thead><tbody>\n");
        for u in &self.cohort.units {
            let Some(a) = u.record.as_ref().and_then(|r| r.align.as_ref()) else {
                continue;
            };
            if a.residuals.is_empty() {
                continue;
            }
            let _ = write!(h, "<tr><td class=\"l\">{}</td>", esc(&u.name()));
            for n in &names {
                match a
                    .residuals
                    .iter()
                    .find(|l| &l.name == n)
                    .and_then(|l| l.residual_degrees)
                {
                    Some(d) => {
                        let w = if max > 0.0 {
                            (d / max * 40.0).round()
                        } else {
                            0.0
                        };
                        let _ = write!(
                            h,
                            "<td>{}<span class=\"lm\" style=\"width:{}px\"></span></td>",
                            fmt(d, 2),
                            w as u32
                        );
                    }
                    None => h.push_str("<td></td>"),
                }
            }
            let _ = writeln!(
                h,
                "<td>{}</td></tr>",
                a.rms_degrees.map_or("n/a".into(), |x| fmt(x, 2))
            );
        }
        h.push_str("</tbody></table></div>\n");
    }

    fn unit_cards(&self, h: &mut String) -> Result<()> {
        let r = self.ranges;
        let _ = writeln!(
            h,
            "<h2 id=\"units\">Units</h2><p class=\"help\">Each unit: the mapped surface and its aligned sphere from the lateral, medial and dorsal side, \
coloured by {} and by area distortion (log of the sphere's share of area over the surface's share, per vertex: blue = shrunk on the sphere, red = enlarged). \
Colours use one scale for the whole cohort. Histograms are per face, surface to aligned sphere: log area ratio (dotted line at 0) and angle distortion, the ratio of the singular values of each triangle's map (dotted line at 1 = angles kept); the QC table's distortion columns are the mapper's, before alignment.</p>",
            esc(self.map)
        );
        h.push_str("<div class=\"legend\">");
        h.push_str(&bar_html(
            ColourMap::Ember,
            &fmt(r.values.0, 2),
            None,
            &fmt(r.values.1, 2),
            self.map,
        )?);
        h.push_str(&bar_html(
            ColourMap::Tide,
            &fmt(-r.log_area, 2),
            Some("0"),
            &fmt(r.log_area, 2),
            "log area ratio",
        )?);
        let _ = write!(
            h,
            "<div class=\"bar\">histogram ranges: log area ratio {} to {}; angle distortion 1 to {}<br>grey = no value</div>",
            fmt(-r.log_area, 2),
            fmt(r.log_area, 2),
            fmt(r.angle_max, 2)
        );
        h.push_str("</div>\n<div class=\"cards\">\n");
        for (u, p) in self.cohort.units.iter().zip(self.pictures) {
            let st = u.field("status");
            let cls = status_class(st);
            let _ = write!(
                h,
                "<section class=\"card {cls}\" id=\"u-{}\"><h3>{} <span class=\"chip {cls}\">{}</span></h3>",
                esc(&u.name()),
                esc(&u.name()),
                esc(st)
            );
            if !u.field("error").is_empty() {
                let _ = write!(
                    h,
                    "<div class=\"err\" style=\"color:var(--bad)\"><b>{}</b>: {}</div>",
                    esc(u.field("failed_stage")),
                    esc(u.field("error"))
                );
            }
            let caption = p.panels.join(" &middot; ");
            if let Some(uri) = &p.by_map {
                let _ = write!(
                    h,
                    "<div class=\"strip\"><div class=\"cap\">{} ({}) &mdash; {}</div><img src=\"{uri}\" alt=\"{} of {}\"></div>",
                    esc(self.map),
                    esc(&p.values_from),
                    caption,
                    esc(self.map),
                    esc(&u.name())
                );
            }
            if let Some(uri) = &p.by_area {
                let _ = write!(
                    h,
                    "<div class=\"strip\"><div class=\"cap\">area distortion (log area ratio per vertex) &mdash; {}</div><img src=\"{uri}\" alt=\"area distortion of {}\"></div>",
                    caption,
                    esc(&u.name())
                );
            }
            if p.hist_area.is_some() || p.hist_angle.is_some() {
                h.push_str("<div class=\"hists\">");
                if let (Some(uri), Some((a, b))) = (&p.hist_area, p.area_p5_p95) {
                    let _ = write!(
                        h,
                        "<div class=\"hist\"><div class=\"cap\">log area ratio per face: p5 {}, p95 {}</div><img src=\"{uri}\" alt=\"log area ratio histogram of {}\"></div>",
                        fmt(a, 2),
                        fmt(b, 2),
                        esc(&u.name())
                    );
                }
                if let (Some(uri), Some((a, b))) = (&p.hist_angle, p.angle_p50_p95) {
                    let _ = write!(
                        h,
                        "<div class=\"hist\"><div class=\"cap\">angle distortion per face: median {}, p95 {}</div><img src=\"{uri}\" alt=\"angle distortion histogram of {}\"></div>",
                        fmt(a, 3),
                        fmt(b, 3),
                        esc(&u.name())
                    );
                }
                h.push_str("</div>");
            }
            let mut notes = p.notes.clone();
            if !p.native_from.is_empty() {
                notes.insert(0, format!("surface shown: {}", p.native_from));
            }
            if u.record.is_none() {
                notes.push("no unit record: the unit has not run".into());
            } else if st == "failed" {
                notes.push("no pictures: the unit failed before its sphere was written".into());
            }
            if !notes.is_empty() {
                h.push_str("<ul class=\"notes\">");
                for n in notes {
                    let _ = write!(h, "<li>{}</li>", esc(&n));
                }
                h.push_str("</ul>");
            }
            h.push_str("</section>\n");
        }
        h.push_str("</div>\n");
        if !self.study_given {
            h.push_str("<p class=\"help\">The study folder was not given: surfaces that repair left unchanged are shown only as spheres.</p>\n");
        }
        Ok(())
    }

    fn stats_section(&self, h: &mut String) -> Result<()> {
        if self.stats.is_empty() {
            return Ok(());
        }
        h.push_str("<h2 id=\"stats\">Statistics on the common sphere</h2><p class=\"help\">Maps of the vertex-wise linear model on the common sphere, seen from the lateral, medial and dorsal side. \
Blue is a negative, red a positive value; the scale is symmetric about 0 and covers 99% of the vertices. Significance (Benjamini-Hochberg q) is in the stats folder's files.</p>\n");
        for s in self.stats {
            let _ = write!(
                h,
                "<div class=\"card stats\"><h3>{} {}</h3>",
                esc(if s.hemi.is_empty() { "cohort" } else { &s.hemi }),
                esc(if s.stat == "t" {
                    "t statistic"
                } else {
                    "effect"
                })
            );
            if !s.summary.is_empty() {
                h.push_str("<table class=\"stats-summary\"><tbody>");
                for (k, v) in &s.summary {
                    let _ = write!(
                        h,
                        "<tr><th class=\"l\">{}</th><td class=\"l\">{}</td></tr>",
                        esc(&k.replace('_', " ")),
                        esc(v)
                    );
                }
                h.push_str("</tbody></table>");
            }
            h.push_str("<div class=\"legend\">");
            h.push_str(&bar_html(
                ColourMap::Tide,
                &fmt(-s.range, 2),
                Some("0"),
                &fmt(s.range, 2),
                &s.stat,
            )?);
            h.push_str("</div>");
            let _ = writeln!(
                h,
                "<div class=\"strip\"><div class=\"cap\">{}</div><img src=\"{}\" alt=\"{} map {}\"></div></div>",
                s.panels.join(" &middot; "),
                s.strip,
                esc(&s.stat),
                esc(&s.hemi)
            );
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup() {
        assert_eq!(
            esc("<a href=\"x\">&'</a>"),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;&lt;/a&gt;"
        );
    }
}
