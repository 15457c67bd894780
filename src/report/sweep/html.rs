//! `report.html` of a sweep: one self-contained file (styles inline, pictures as data: URIs,
//! plots as inline SVG drawn with plotters, no script, nothing fetched) that opens in any
//! browser with no network.

use std::fmt::Write as _;

use anyhow::Result;
use base64::Engine;
use plotters::prelude::*;

use super::pictures::{atlas_picture, png_bytes};
use crate::sweep::stats::Interval;
use crate::sweep::{GroupSummary, RANKED, RecurringHotspot, Row, ShardResult, ranking};

/// Thumbnails by image path: the picture and its tinted map, PNG bytes.
type Thumbs = std::collections::BTreeMap<String, (Vec<u8>, Vec<u8>)>;

pub(super) fn esc(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

pub(super) fn data_uri(png: &[u8]) -> String {
    format!("data:image/png;base64,{}", base64::engine::general_purpose::STANDARD.encode(png))
}

fn pct(i: &Option<Interval>) -> String {
    i.map_or("—".into(), |i| format!("{:.0} % <small>({:.0}–{:.0})</small>", 100.0 * i.estimate, 100.0 * i.low, 100.0 * i.high))
}

fn diff_pct(i: &Option<Interval>) -> String {
    i.map_or("—".into(), |i| format!("{:+.0} pts <small>({:+.0} to {:+.0})</small>", 100.0 * i.estimate, 100.0 * i.low, 100.0 * i.high))
}

fn share(i: &Option<Interval>) -> String {
    i.map_or("—".into(), |i| format!("{:.3} <small>({:.3}–{:.3})</small>", i.estimate, i.low, i.high))
}

fn diff_share(i: &Option<Interval>) -> String {
    i.map_or("—".into(), |i| format!("{:+.3} <small>({:+.3} to {:+.3})</small>", i.estimate, i.low, i.high))
}

const STYLE: &str = "body{font-family:sans-serif;margin:24px;color:#1d2327;background:#fbfbf9;max-width:1400px}\
h1{font-size:22px}h2{font-size:17px;margin-top:28px}table{border-collapse:collapse;font-size:13px}\
td,th{border-bottom:1px solid #dde;padding:4px 8px;text-align:left;vertical-align:top}th{background:#eef0f2}\
small{color:#667}.caution{border-left:4px solid #a998e6;padding:6px 10px;background:#f3f1fb}\
.suspect{color:#b0203c;font-weight:bold}.atlases{display:flex;flex-wrap:wrap;gap:18px}\
.atlases figure{margin:0}img.pix{image-rendering:pixelated}figcaption{font-size:12px;max-width:300px}";

/// The report of a finished sweep (or shard).
pub fn sweep_html(result: &ShardResult, groups: &[GroupSummary], recurring: &[RecurringHotspot], thumbs: &Thumbs) -> Result<String> {
    let rows = &result.rows;
    let mut h = String::new();
    let suspect = rows.iter().filter(|r| r.suspect).count();
    writeln!(h, "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>spurion sweep</title><style>{STYLE}</style></head><body>")?;
    writeln!(h, "<h1>spurion sweep</h1><p class=\"caution\">{}</p>", esc(crate::CAUTION))?;
    let settings: serde_json::Value = serde_json::from_str(&result.settings).unwrap_or_default();
    let method = settings["request"]["method"]["name"].as_str().unwrap_or("?");
    let baseline = settings["request"]["baseline"]["kind"].as_str().unwrap_or("?");
    writeln!(
        h,
        "<p>{} images read, {} could not be read; {} suspect ({}). Method <b>{}</b>, baseline <b>{}</b>{}.</p>",
        rows.len(),
        result.skipped.len(),
        suspect,
        pct(&crate::sweep::stats::wilson(suspect, rows.len())),
        esc(method),
        esc(baseline),
        if result.shard.count > 1 { format!("; this is shard {} of {}", result.shard.index, result.shard.count) } else { String::new() }
    )?;
    let verdicts: std::collections::BTreeMap<&str, usize> = rows.iter().filter_map(|r| r.verdict.as_deref()).fold(Default::default(), |mut m, v| {
        *m.entry(v).or_default() += 1;
        m
    });
    if !verdicts.is_empty() {
        let parts: Vec<String> = verdicts.iter().map(|(v, n)| format!("{n} {}", esc(v))).collect();
        writeln!(h, "<p>The curator's ledger: {} (the rest have no verdict).</p>", parts.join(", "))?;
    }
    completeness(&mut h, rows)?;
    groups_table(&mut h, groups)?;
    atlases(&mut h, result, groups)?;
    super::recurring::section(&mut h, recurring, &result.images_root)?;
    writeln!(h, "<h2>Mark share by group</h2><p><small>Share of each image's supporting attribution on its found regions together.</small></p>")?;
    h.push_str(&histograms(rows, groups)?);
    ranked(&mut h, result, thumbs)?;
    if !result.skipped.is_empty() {
        writeln!(h, "<h2>Images that could not be read</h2><table><tr><th>image</th><th>why</th></tr>")?;
        for s in &result.skipped {
            writeln!(h, "<tr><td>{}</td><td>{}</td></tr>", esc(&s.path), esc(&s.reason))?;
        }
        writeln!(h, "</table>")?;
    }
    writeln!(
        h,
        "<p><small>Intervals are 95 %: Wilson's for rates, Newcombe's hybrid score interval for a group's rate minus the others', \
         the percentile bootstrap (2,000 resamples) for mean mark share. Thresholds of the flag were set on spurion's demo \
         data; on other data they are a starting point, not a calibration.</small></p></body></html>"
    )?;
    Ok(h)
}

/// Integrated gradients' completeness over the sweep: the largest gap, and every reading whose
/// refinement stopped at its cap before its target, by name.
fn completeness(h: &mut String, rows: &[Row]) -> Result<()> {
    let gaps: Vec<f64> = rows.iter().filter_map(|r| r.completeness_gap).filter(|g| g.is_finite()).collect();
    if gaps.is_empty() {
        return Ok(());
    }
    let largest = gaps.iter().fold(0f64, |m, g| m.max(*g));
    let missed: Vec<&Row> = rows.iter().filter(|r| r.completeness_reached == Some(false)).collect();
    write!(h, "<p>Completeness gap: largest {:.2} % over {} readings", 100.0 * largest, gaps.len())?;
    if missed.is_empty() {
        writeln!(h, ".</p>")?;
        return Ok(());
    }
    let names: Vec<String> = missed
        .iter()
        .take(20)
        .map(|r| format!("{} ({})", esc(&r.path), r.completeness_gap.map_or("—".into(), |g| format!("{:.2} %", 100.0 * g))))
        .collect();
    writeln!(
        h,
        "; <span class=\"suspect\">{} reading{} did not reach the target gap</span>: the refinement stopped at its cap, and \
         their maps are coarser estimates of the path integral than asked for: {}{}.</p>",
        missed.len(),
        if missed.len() == 1 { "" } else { "s" },
        names.join(", "),
        if missed.len() > 20 { ", …" } else { "" }
    )?;
    Ok(())
}

fn groups_table(h: &mut String, groups: &[GroupSummary]) -> Result<()> {
    writeln!(
        h,
        "<h2>Groups</h2><table><tr><th>group</th><th>images</th><th>suspect</th><th>vs others</th><th>mean mark share</th>\
         <th>vs others</th><th>removal flips the top class</th><th>vs others</th><th>repeated patches</th></tr>"
    )?;
    for g in groups {
        let patches = if g.repeated_patches.is_empty() {
            format!("none <small>({} images compared)</small>", g.repeated_patch_images)
        } else {
            let boxes: Vec<String> = g.repeated_patches.iter().map(|p| format!("{:?} ({:.0} %)", p.bbox, 100.0 * p.share)).collect();
            format!("{} <small>{}</small>", g.repeated_patches.len(), esc(&boxes.join(", ")))
        };
        writeln!(
            h,
            "<tr><td><b>{}</b></td><td>{}</td><td>{} · {}</td><td>{}</td><td>{}</td><td>{}</td><td>{} · {}</td><td>{}</td><td>{}</td></tr>",
            esc(&g.group),
            g.images,
            g.suspect,
            pct(&g.suspect_rate),
            diff_pct(&g.suspect_rate_vs_others),
            share(&g.mean_mark_share),
            diff_share(&g.mark_share_vs_others),
            g.flips,
            pct(&g.flip_rate),
            diff_pct(&g.flip_rate_vs_others),
            patches
        )?;
    }
    writeln!(h, "</table>")?;
    Ok(())
}

fn atlases(h: &mut String, result: &ShardResult, groups: &[GroupSummary]) -> Result<()> {
    writeln!(
        h,
        "<h2>Where the model looks, per group (atlas)</h2><p><small>The mean share of supporting attribution at each \
         position of the model's grid over the group's images; the box marks where the most sits.</small></p><div class=\"atlases\">"
    )?;
    for g in groups {
        let Some(a) = result.atlas.get(&g.group) else { continue };
        let mut img = atlas_picture(&a.mean());
        let caption = match &g.atlas_hottest {
            Some(hb) => {
                let up = img.width() / a.sum.dim().1.max(1) as u32;
                outline(&mut img, hb.bbox, up);
                format!("box {:?} holds {:.0} % of the support on {:.1} % of the area", hb.bbox, 100.0 * hb.share, 100.0 * hb.area_share)
            }
            None => "no support".into(),
        };
        writeln!(
            h,
            "<figure><img class=\"pix\" width=\"256\" src=\"{}\" alt=\"atlas of {}\"><figcaption><b>{}</b> · {} images · {}</figcaption></figure>",
            data_uri(&png_bytes(&img)?),
            esc(&g.group),
            esc(&g.group),
            a.count,
            esc(&caption)
        )?;
    }
    writeln!(h, "</div>")?;
    Ok(())
}

/// Outlines box `[x0, y0, x1, y1]` (grid cells) on an atlas picture scaled up `up` times.
fn outline(img: &mut image::RgbImage, b: [usize; 4], up: u32) {
    let ink = image::Rgb([242, 95, 208]);
    let (x0, y0, x1, y1) = (b[0] as u32 * up, b[1] as u32 * up, (b[2] as u32 * up).min(img.width()) - 1, (b[3] as u32 * up).min(img.height()) - 1);
    for x in x0..=x1 {
        img.put_pixel(x, y0, ink);
        img.put_pixel(x, y1, ink);
    }
    for y in y0..=y1 {
        img.put_pixel(x0, y, ink);
        img.put_pixel(x1, y, ink);
    }
}

/// Small multiples: one histogram of mark share per group, on one scale of 0..1.
fn histograms(rows: &[Row], groups: &[GroupSummary]) -> Result<String> {
    const BINS: usize = 25;
    let mut svg = String::new();
    {
        let n = groups.len().max(1);
        let cols = n.min(3);
        let lines = n.div_ceil(cols);
        let root = SVGBackend::with_string(&mut svg, (340 * cols as u32, 220 * lines as u32)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| anyhow::anyhow!("{e}"))?;
        let areas = root.split_evenly((lines, cols));
        for (g, area) in groups.iter().zip(areas.iter()) {
            let mut counts = [0u32; BINS];
            for r in rows.iter().filter(|r| r.group == g.group) {
                let v = r.mark_share.unwrap_or(0.0).clamp(0.0, 1.0);
                counts[((v * BINS as f64) as usize).min(BINS - 1)] += 1;
            }
            let top = counts.iter().copied().max().unwrap_or(0).max(1);
            let mut chart = ChartBuilder::on(area)
                .caption(format!("{} ({} images)", g.group, g.images), ("sans-serif", 14))
                .margin(8)
                .x_label_area_size(28)
                .y_label_area_size(34)
                .build_cartesian_2d(0f64..1f64, 0u32..top + top / 5 + 1)
                .map_err(|e| anyhow::anyhow!("{e}"))?;
            chart
                .configure_mesh()
                .x_desc("mark share")
                .y_desc("images")
                .x_labels(6)
                .y_labels(5)
                .draw()
                .map_err(|e| anyhow::anyhow!("{e}"))?;
            let fill = RGBColor(181, 112, 43).filled();
            chart
                .draw_series(counts.iter().enumerate().map(|(i, &c)| {
                    let (a, b) = (i as f64 / BINS as f64, (i + 1) as f64 / BINS as f64);
                    Rectangle::new([(a, 0), (b, c)], fill)
                }))
                .map_err(|e| anyhow::anyhow!("{e}"))?;
        }
        root.present().map_err(|e| anyhow::anyhow!("{e}"))?;
    }
    Ok(svg)
}

fn ranked(h: &mut String, result: &ShardResult, thumbs: &Thumbs) -> Result<()> {
    let mut rows: Vec<&Row> = result.rows.iter().collect();
    rows.sort_by(|a, b| ranking(a, b));
    writeln!(
        h,
        "<h2>Images ranked by mark share (top {})</h2><table><tr><th>#</th><th>image</th><th>as fed</th><th>supporting attribution</th>\
         <th>group</th><th>top class</th><th>mark share</th><th>lift</th><th>removal: probability</th><th>evidence</th><th>regions</th><th>verdict</th></tr>",
        RANKED.min(rows.len())
    )?;
    for (i, r) in rows.iter().take(RANKED).enumerate() {
        let (plain, tint) = match thumbs.get(&r.path) {
            Some((p, t)) => (
                format!("<img class=\"pix\" width=\"96\" src=\"{}\" alt=\"{}\">", data_uri(p), esc(&r.path)),
                format!("<img class=\"pix\" width=\"96\" src=\"{}\" alt=\"map of {}\">", data_uri(t), esc(&r.path)),
            ),
            None => ("—".into(), "—".into()),
        };
        let flag = if r.suspect { "<span class=\"suspect\">SUSPECT</span> " } else { "" };
        let missed = if r.completeness_reached == Some(false) {
            format!(" <small>(gap {} not reached)</small>", r.completeness_gap.map_or("—".into(), |g| format!("{:.2} %", 100.0 * g)))
        } else {
            String::new()
        };
        writeln!(
            h,
            "<tr><td>{}</td><td>{flag}{}{missed}</td><td>{plain}</td><td>{tint}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            i + 1,
            esc(&r.path),
            esc(&r.group),
            esc(&r.top_label),
            r.mark_share.map_or("—".into(), |v| format!("{v:.3}")),
            r.lift.map_or("—".into(), |v| format!("{v:.1}")),
            r.removal_probability_drop.map_or("—".into(), |v| format!("{:+.2}", -v)),
            esc(&r.evidence),
            esc(&r.region_labels),
            esc(r.verdict.as_deref().unwrap_or("—"))
        )?;
    }
    writeln!(h, "</table>")?;
    Ok(())
}
