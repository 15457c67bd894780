//! The review panel: one PNG a reviewer would rather look at than read. From top to bottom: the
//! reading tinted over the image beside its deletion and insertion curves and the convergence of
//! integrated gradients; the randomisation cascade's maps in a row with their correlations; the
//! Shapley values over the image; each baseline's curves side by side; the second model's
//! reading; warnings and the caution.

use image::imageops::{self, FilterType};
use image::{Rgb, RgbImage};
use ndarray::{Array2, Array3};

use super::colour::lch_to_srgb;
use super::plot::{Axes, Corner, INK, PAPER, fill_rect, outline, text_centred, tick_label, ticks, wrap};
use super::{diverging, draw_text, map_rgb, opposing_colour, robust_scale, supporting_colour, text_width, tint};
use crate::methods::Rule;
use crate::review::Review;
use crate::review::against::Against;
use crate::review::curves::{Curve, Curves};
use crate::review::randomise::MethodCascade;
use crate::sign::Sign;

const WIDTH: u32 = 1220;
const MARGIN: u32 = 16;
const TILE: u32 = 256;
const RANDOM: [u8; 3] = [128, 128, 128];
const WARN: Rgb<u8> = Rgb([170, 40, 30]);

fn plum() -> [u8; 3] {
    lch_to_srgb(42.0, 45.0, 320.0)
}

fn canvas(h: u32) -> RgbImage {
    RgbImage::from_pixel(WIDTH, h, PAPER)
}

/// `img` scaled to fit a `w`×`h` box, aspect kept (nearest for maps, smooth for pictures).
fn fit(img: &RgbImage, w: u32, h: u32, smooth: bool) -> RgbImage {
    let s = (w as f32 / img.width() as f32).min(h as f32 / img.height() as f32);
    let (nw, nh) = (((img.width() as f32 * s).round() as u32).max(1), ((img.height() as f32 * s).round() as u32).max(1));
    imageops::resize(img, nw, nh, if smooth { FilterType::Triangle } else { FilterType::Nearest })
}

fn put(dst: &mut RgbImage, src: &RgbImage, x: u32, y: u32) {
    imageops::overlay(dst, src, x as i64, y as i64);
}

/// Text lines from (x, y), `size` pixels, wrapped at `width`; returns the y after them.
fn paragraph(img: &mut RgbImage, x: u32, mut y: u32, width: f32, size: f32, s: &str, ink: Rgb<u8>) -> u32 {
    for line in wrap(s, size, width) {
        draw_text(img, x, y, size, &line, ink);
        y += (size * 1.35) as u32;
    }
    y
}

fn range_of<'a>(vs: impl Iterator<Item = &'a f64>) -> (f64, f64) {
    let (lo, hi) = vs.filter(|v| v.is_finite()).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(*v), b.max(*v)));
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    let pad = ((hi - lo) * 0.08).max(1e-6);
    (lo - pad, hi + pad)
}

/// A curve's plot: the map's order solid, the random orders' mean dashed.
fn curve_plot(img: &mut RgbImage, left: u32, top: u32, w: u32, h: u32, title: &str, c: &Curve, colour: [u8; 3], legend_bottom: bool) {
    let yr = range_of(c.scores.iter().chain(&c.random_scores));
    let ax = Axes::in_box(left, top, w, h, (0.0, 1.0), yr);
    ax.frame(img, title, "share of pixels moved", &ticks(0.0, 1.0, 4), &ticks(yr.0, yr.1, 4));
    let pts = |s: &[f64]| c.fractions.iter().copied().zip(s.iter().copied()).collect::<Vec<_>>();
    ax.polyline(img, &pts(&c.random_scores), RANDOM, 1.8, Some(5.0));
    ax.polyline(img, &pts(&c.scores), colour, 2.2, None);
    let lead = c.lead.map(|l| format!(", lead {l:+.2}")).unwrap_or_default();
    let rows = [
        (colour, false, format!("map order, area {}{lead}", tick_label(c.auc))),
        (RANDOM, true, format!("random ({}), area {}", c.random_aucs.len(), tick_label(c.random_auc))),
    ];
    ax.legend_at(img, &rows, if legend_bottom { Corner::BottomRight } else { Corner::TopRight });
}

/// Both curves of one fill in one small plot (the baseline strip).
fn both_curves(img: &mut RgbImage, left: u32, top: u32, w: u32, h: u32, title: &str, c: &Curves) {
    let (d, i) = (&c.deletion, &c.insertion);
    let yr = range_of(d.scores.iter().chain(&d.random_scores).chain(&i.scores).chain(&i.random_scores));
    let ax = Axes::in_box(left, top, w, h, (0.0, 1.0), yr);
    ax.frame(img, title, "share of pixels moved", &ticks(0.0, 1.0, 2), &ticks(yr.0, yr.1, 3));
    for (c, colour) in [(d, supporting_colour()), (i, opposing_colour())] {
        let pts = |s: &[f64]| c.fractions.iter().copied().zip(s.iter().copied()).collect::<Vec<_>>();
        ax.polyline(img, &pts(&c.random_scores), colour, 1.3, Some(4.0));
        ax.polyline(img, &pts(&c.scores), colour, 2.0, None);
    }
}

fn header(r: &Review) -> RgbImage {
    let mut img = canvas(74);
    let rd = &r.reading;
    let title = format!("Review of a reading: {} under {}, class {} \"{}\"", rd.input, rd.model_file, rd.target.index, rd.target.label);
    draw_text(&mut img, MARGIN, 10, 20.0, &title, INK);
    let scores = format!(
        "{}. Score, {}: at the input {:.3}{}{}",
        r.request,
        rd.score_kind.title(),
        rd.score_input,
        rd.score_baseline.map(|b| format!(", at the baseline {b:.3}")).unwrap_or_default(),
        rd.completeness_gap.map(|g| format!(", completeness gap {:.2} %", g * 100.0)).unwrap_or_default()
    );
    draw_text(&mut img, MARGIN, 40, 13.0, &scores, INK);
    img
}

/// The reading over the image, its curves, and the convergence plot.
fn first_row(r: &Review, pixels: &Array3<f32>, sign: Sign) -> RgbImage {
    let mut img = canvas(TILE + 40);
    let map = r.reading.map2d();
    if map.dim() == (pixels.shape()[0], pixels.shape()[1]) {
        let t = tint(pixels, &map, robust_scale(&map), sign, crate::methods::defaults::OPACITY);
        put(&mut img, &fit(&t, TILE, TILE, false), MARGIN, 8);
    }
    draw_text(&mut img, MARGIN, TILE + 14, 12.0, &format!("the reading, {} part", sign.name()), INK);
    let (pw, x0) = (300u32, MARGIN + TILE + 16);
    match &r.curves {
        Some(c) => {
            curve_plot(&mut img, x0, 4, pw, TILE + 30, &format!("Deletion, fill {}", c.fill), &c.deletion, supporting_colour(), false);
            curve_plot(&mut img, x0 + pw, 4, pw, TILE + 30, &format!("Insertion, fill {}", c.fill), &c.insertion, opposing_colour(), true);
        }
        None => draw_text(&mut img, x0 + 40, 40, 13.0, "deletion and insertion curves were not computed", INK),
    }
    let x1 = x0 + 2 * pw;
    match &r.convergence {
        Some(c) => convergence_plot(&mut img, x1, 4, WIDTH - x1 - 4, TILE + 30, c),
        None => draw_text(&mut img, x1 + 40, 40, 13.0, "convergence was not computed", INK),
    }
    img
}

fn convergence_plot(img: &mut RgbImage, left: u32, top: u32, w: u32, h: u32, c: &crate::review::convergence::Convergence) {
    const FLOOR: f64 = 1e-7;
    let steps: Vec<f64> = c.rules.first().map(|l| l.points.iter().map(|p| p.steps as f64).collect()).unwrap_or_default();
    let gaps: Vec<f64> = c.rules.iter().flat_map(|l| l.points.iter().filter_map(|p| p.gap)).map(|g| g.max(FLOOR)).collect();
    let hi = gaps.iter().copied().fold(c.warn_gap, f64::max) * 2.0;
    let lo = gaps.iter().copied().fold(c.target_gap, f64::min) / 2.0;
    let (s0, s1) = (steps.first().copied().unwrap_or(1.0), steps.last().copied().unwrap_or(2.0).max(steps.first().copied().unwrap_or(1.0) * 2.0));
    let mut ax = Axes::in_box(left, top, w, h, (s0 / 1.2, s1 * 1.2), (lo, hi));
    ax.log_x = true;
    ax.log_y = true;
    let decades: Vec<f64> = (lo.log10().floor() as i32..=hi.log10().ceil() as i32).map(|e| 10f64.powi(e)).filter(|v| *v >= lo && *v <= hi).collect();
    ax.frame(img, &format!("IG completeness gap, baseline {}", c.baseline), "steps", &steps, &decades);
    ax.hline(img, c.warn_gap, WARN.0);
    ax.hline(img, c.target_gap, RANDOM);
    let colours = [(Rule::Midpoint, supporting_colour()), (Rule::Trapezoid, opposing_colour()), (Rule::GaussLegendre, plum())];
    let mut rows = vec![];
    for (rule, colour) in colours {
        let Some(l) = c.ladder(rule) else { continue };
        let pts: Vec<(f64, f64)> = l.points.iter().filter_map(|p| p.gap.map(|g| (p.steps as f64, g.max(FLOOR)))).collect();
        ax.polyline(img, &pts, colour, 2.0, None);
        for p in &pts {
            let (x, y) = ax.at(p.0, p.1);
            fill_rect(img, x as i64 - 2, y as i64 - 2, 5, 5, colour, 1.0);
        }
        let reach = l.steps_to_gap.map(|s| format!("{s}")).unwrap_or_else(|| "—".into());
        rows.push((colour, false, format!("{}: {} % at {reach}", rule.name(), tick_label(c.target_gap * 100.0))));
    }
    rows.push((WARN.0, true, "5 %, the paper's check".to_string()));
    // Gaps fall with the steps: the lower left is where the lines are least.
    ax.legend_at(img, &rows, Corner::BottomLeft);
}

fn cascade_rows(mcs: &[MethodCascade], total: usize, init: &str, seed: u64, share: f64) -> RgbImage {
    let n = mcs.iter().map(|m| m.steps.len() + 1).max().unwrap_or(1) as u32;
    let tile = ((WIDTH - 2 * MARGIN) / n).saturating_sub(8).clamp(48, 128);
    let row_h = tile + 60;
    let mut img = canvas(44 + row_h * mcs.len() as u32);
    draw_text(&mut img, MARGIN, 8, 16.0, "Randomisation cascade (Adebayo et al. 2018): |map| as the layers are re-drawn from the output side", INK);
    let sub = format!("{init}; seed {seed}. Under each map: Spearman ρ of |map| with the original, and the overlap of the top {} %.", share * 100.0);
    draw_text(&mut img, MARGIN, 28, 11.0, &sub, INK);
    for (i, mc) in mcs.iter().enumerate() {
        let y = 44 + row_h * i as u32;
        let mut x = MARGIN;
        let tile_of = |img: &mut RgbImage, m: &Array2<f32>, l1: &str, l2: &str, x: u32| {
            let mag = m.mapv(f32::abs);
            put(img, &fit(&map_rgb(&mag, robust_scale(&mag), Sign::Magnitude), tile, tile, false), x, y + 16);
            for (k, l) in [l1, l2].iter().enumerate() {
                let mut s = l.to_string();
                while text_width(&s, 10.0) > tile as f32 + 6.0 && s.len() > 3 {
                    s.pop();
                }
                draw_text(img, x, y + 18 + tile + 12 * k as u32, 10.0, &s, INK);
            }
        };
        draw_text(&mut img, MARGIN, y, 12.0, &format!("{} ({})", mc.method, mc.settings), INK);
        tile_of(&mut img, &mc.original, "original", "", x);
        for st in &mc.steps {
            x += tile + 8;
            let f = |v: Option<f64>| v.map(|v| format!("{v:.2}")).unwrap_or_else(|| "—".into());
            // The layer this step re-drew, counted from the input side as people count layers.
            let label = format!("+ layer {} of {total}", (total + 1).saturating_sub(st.layers_randomised));
            tile_of(&mut img, &st.map, &label, &format!("ρ {} · top {}", f(st.spearman), f(st.top_overlap)), x);
        }
        let ink = if mc.independent { WARN } else { INK };
        draw_text(&mut img, MARGIN, y + tile + 44, 11.0, &mc.verdict, ink);
    }
    img
}

fn shapley_block(r: &Review, pixels: &Array3<f32>) -> Option<RgbImage> {
    let s = r.shapley.as_ref()?;
    let mut img = canvas(TILE + 56);
    let w = pixels.shape()[1];
    let grey = super::picture_rgb(&pixels.mean_axis(ndarray::Axis(2))?.insert_axis(ndarray::Axis(2)));
    let mut tile = fit(&grey, TILE, TILE, true);
    let scale = tile.width() as f32 / w as f32;
    let top = s.cells.iter().map(|c| c.value.abs()).fold(0.0, f64::max).max(1e-12);
    for c in &s.cells {
        let [x0, y0, x1, y1] = c.bbox.map(|v| (v as f32 * scale).round() as i64);
        let col = diverging((c.value / top) as f32);
        let alpha = 0.6 * ((c.value.abs() / top) as f32).sqrt().max(0.15);
        match &c.pixels {
            // A region: its own pixels, each tile pixel looked up on the image.
            Some(m) => {
                for ty in 0..tile.height() {
                    for tx in 0..tile.width() {
                        let (iy, ix) = (((ty as f32 + 0.5) / scale) as usize, ((tx as f32 + 0.5) / scale) as usize);
                        if m.get((iy, ix)).copied().unwrap_or(false) {
                            super::plot::blend_pixel(&mut tile, tx as i64, ty as i64, col, alpha);
                        }
                    }
                }
            }
            None => {
                fill_rect(&mut tile, x0, y0, x1 - x0, y1 - y0, col, alpha);
                outline(&mut tile, x0, y0, x1 - x0, y1 - y0, [90, 90, 90]);
            }
        }
        if x1 - x0 >= 30 && y1 - y0 >= 16 && s.grid.is_some() {
            // A light label behind the figure so it reads on dark film.
            let t = tick_label(c.value);
            let tw = text_width(&t, 10.0) as i64;
            let (cx, cy) = ((x0 + x1) / 2, (y0 + y1) / 2);
            fill_rect(&mut tile, cx - tw / 2 - 2, cy - 7, tw + 4, 13, PAPER.0, 0.75);
            text_centred(&mut tile, cx as f32, (cy - 6).max(0) as u32, 10.0, &t, INK);
        }
    }
    put(&mut img, &tile, MARGIN, 30);
    let what = match s.grid {
        Some(n) => format!("{n}×{n} grid cells"),
        None => "found regions and the rest".to_string(),
    };
    draw_text(&mut img, MARGIN, 8, 16.0, &format!("Region Shapley values (Castro et al. 2009): {what}, absent parts from {}", s.fill), INK);
    let tx = MARGIN + TILE + 20;
    let mut y = 34;
    let mut lines = vec![
        format!(
            "Sum of the values {}; F(x) − F(fill) = {} = {} (efficiency).",
            super::number4(s.sum),
            super::difference_text(s.score_input, s.score_baseline),
            super::number4(s.score_input - s.score_baseline)
        ),
        format!("{}.", s.estimator),
    ];
    if let Some(rho) = s.map_agreement {
        lines.push(format!("The reading's map summed over the same parts ranks them with Spearman ρ {rho:.2} against these values."));
    }
    let mut ranked: Vec<&crate::review::shapley::Cell> = s.cells.iter().collect();
    ranked.sort_by(|a, b| b.value.abs().total_cmp(&a.value.abs()));
    for c in ranked.iter().take(5) {
        let se = c.stderr.map(|e| format!(" ± {e:.3}")).unwrap_or_default();
        lines.push(format!("{} at [{}, {}, {}, {}]: {:+.4}{se}", c.label, c.bbox[0], c.bbox[1], c.bbox[2], c.bbox[3], c.value));
    }
    for l in lines {
        y = paragraph(&mut img, tx, y, (WIDTH - tx - MARGIN) as f32, 13.0, &l, INK) + 4;
    }
    Some(img)
}

fn strip_block(r: &Review, pixels: &Array3<f32>, sign: Sign) -> Option<RgbImage> {
    if r.strip.is_empty() {
        return None;
    }
    let (cell_w, cell_h, per_row) = (390u32, 200u32, 3usize);
    let rows = r.strip.len().div_ceil(per_row) as u32;
    let mut img = canvas(40 + rows * cell_h);
    draw_text(&mut img, MARGIN, 8, 16.0, "Baseline strip: each baseline's reading with its deletion (amber) and insertion (teal) curves", INK);
    draw_text(&mut img, MARGIN, 28, 11.0, "Solid: the map's order; dashed: random orders. Lead: how far the map's order beats random, as a share of F(x) − F(baseline).", INK);
    for (i, e) in r.strip.iter().enumerate() {
        let (x, y) = (MARGIN + (i % per_row) as u32 * cell_w, 44 + (i / per_row) as u32 * cell_h);
        let map = e.reading.map2d();
        if map.dim() == (pixels.shape()[0], pixels.shape()[1]) {
            let t = tint(pixels, &map, robust_scale(&map), sign, crate::methods::defaults::OPACITY);
            put(&mut img, &fit(&t, 130, 130, false), x, y + 22);
        }
        draw_text(&mut img, x, y + 4, 12.0, &format!("{}, fill {}", e.title, e.curves.fill), INK);
        let lead = |c: &Curve| c.lead.map(|l| format!("{l:+.2}")).unwrap_or_else(|| "—".into());
        let gap = e.reading.completeness_gap.map(|g| format!("gap {:.1} %", g * 100.0)).unwrap_or_default();
        draw_text(&mut img, x, y + 158, 11.0, &format!("lead: deletion {}, insertion {}", lead(&e.curves.deletion), lead(&e.curves.insertion)), INK);
        draw_text(&mut img, x, y + 172, 11.0, &gap, INK);
        both_curves(&mut img, x + 136, y, cell_w - 146, 190, "", &e.curves);
    }
    Some(img)
}

fn against_block(a: &Against, r: &Review, pixels: &Array3<f32>, sign: Sign) -> RgbImage {
    let mut img = canvas(TILE + 60);
    draw_text(&mut img, MARGIN, 8, 16.0, "Model against model: the same image and request under two models", INK);
    for (k, (rd, side)) in [(&r.reading, &a.first), (&a.second_reading, &a.second)].into_iter().enumerate() {
        let x = MARGIN + k as u32 * (TILE + 12);
        let map = rd.map2d();
        if map.dim() == (pixels.shape()[0], pixels.shape()[1]) {
            let t = tint(pixels, &map, robust_scale(&map), sign, crate::methods::defaults::OPACITY);
            put(&mut img, &fit(&t, TILE, TILE, false), x, 32);
        }
        draw_text(&mut img, x, 32 + TILE + 4, 11.0, &format!("{}: top {} \"{}\"", side.model_file, side.top, side.top_label), INK);
    }
    let tx = MARGIN + 2 * (TILE + 12) + 12;
    let mut y = 36;
    let f = |v: Option<f64>| v.map(|v| format!("{v:.3}")).unwrap_or_else(|| "—".into());
    let mut lines = vec![];
    for s in &a.agreement {
        lines.push(format!("{}: Spearman ρ {}, top {} % overlap {}", s.sign.name(), f(s.spearman), a.share * 100.0, f(s.top_overlap)));
    }
    for side in [&a.first, &a.second] {
        lines.push(format!(
            "{}: score {:.3}, mark share {} (lift {}) on the found regions",
            side.model_file,
            side.score_input,
            f(side.mark_share),
            f(side.lift)
        ));
    }
    lines.extend(a.notes.iter().cloned());
    for l in lines {
        y = paragraph(&mut img, tx, y, (WIDTH - tx - MARGIN) as f32, 13.0, &l, INK) + 4;
    }
    img
}

fn footer(r: &Review) -> RgbImage {
    let mut lines: Vec<(String, Rgb<u8>)> = r.warnings.iter().map(|w| (format!("Warning: {w}"), WARN)).collect();
    lines.extend(r.skipped.iter().map(|s| (format!("Not run: {}: {}", s.test, s.reason), WARN)));
    lines.push((crate::CAUTION.to_string(), INK));
    let mut scratch = canvas(2000);
    let mut y = 8;
    for (l, ink) in &lines {
        y = paragraph(&mut scratch, MARGIN, y, (WIDTH - 2 * MARGIN) as f32, 12.0, l, *ink) + 2;
    }
    imageops::crop_imm(&scratch, 0, 0, WIDTH, (y + 8).min(2000)).to_image()
}

/// The whole panel. `pixels` is what the reading's map lies on (the picture, or a tensor shown
/// as a picture); `against` the second model's comparison, if any.
pub fn review_panel(r: &Review, against: Option<&Against>, pixels: &Array3<f32>, sign: Sign) -> RgbImage {
    let mut parts = vec![header(r), first_row(r, pixels, sign)];
    if let Some(c) = &r.cascade {
        parts.push(cascade_rows(&c.methods, c.layers.len(), &c.init, c.seed, c.top_share));
    }
    parts.extend(shapley_block(r, pixels));
    parts.extend(strip_block(r, pixels, sign));
    if let Some(a) = against {
        parts.push(against_block(a, r, pixels, sign));
    }
    parts.push(footer(r));
    let h: u32 = parts.iter().map(|p| p.height() + 6).sum();
    let mut out = canvas(h);
    let mut y = 0;
    for p in &parts {
        put(&mut out, p, 0, y);
        y += p.height() + 6;
    }
    out
}
