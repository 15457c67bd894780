//! The curator's tools on the slide: the verdict bar (keys 1–4), the note, the ledger's save
//! status, and drawing regions (a box, or a freehand outline) over marks no finder caught.

use std::path::Path;

use egui::{Color32, FontId, Painter, Pos2, Rect, Response, RichText, Stroke, pos2, vec2};

use crate::gui::panels::{fmt_opt, removal_text};
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::state::{DrawMode, Shown, SlidePlace};
use crate::ledger::Verdict;
use crate::regions::drawn::{DrawnShape, Shape, drawn_region};

/// The words for a verdict in the inspector (its name, and what it means where it is not plain).
pub fn verdict_word(v: Option<Verdict>) -> &'static str {
    match v {
        None => "no verdict",
        Some(Verdict::Marked) => "marked (carries a spurious mark)",
        Some(v) => v.name(),
    }
}

/// The verdict buttons, the note, the drawing tools and the ledger's status, above the picture.
pub(in crate::gui::panels) fn curator_bar(ui: &mut egui::Ui, app: &mut Inspector, path: &Path, out: &mut Vec<Intent>) {
    let key = app.ledger.key_of(path);
    let entry = app.ledger.entry_of(path).cloned();
    let verdict = entry.as_ref().and_then(|e| e.verdict);
    ui.horizontal_wrapped(|ui| {
        ui.label(RichText::new("verdict").color(look::ASH));
        ui.add_enabled_ui(key.is_ok(), |ui| {
            for v in Verdict::ALL {
                let r = ui.selectable_label(verdict == Some(v), format!("{} {}", v.key(), v.name()));
                if r.on_hover_text(format!("key {}: {}", v.key(), verdict_word(Some(v)))).clicked() {
                    out.push(Intent::Verdict(Some(v)));
                }
            }
            // Always there (greyed without a verdict), so the controls after it never move.
            if ui.add_enabled(verdict.is_some(), egui::Button::new("0 clear").small()).on_hover_text("key 0: no verdict").clicked() {
                out.push(Intent::Verdict(None));
            }
            ui.separator();
            let l = ui.label("note");
            let stored = entry.as_ref().map(|e| e.note.clone()).unwrap_or_default();
            let k = key.clone().unwrap_or_default();
            let mut text = match &app.ledger.note_draft {
                Some((dk, t)) if *dk == k => t.clone(),
                _ => stored,
            };
            let r = ui
                .add(egui::TextEdit::singleline(&mut text).hint_text("free text, kept in the ledger").desired_width(190.0))
                .labelled_by(l.id);
            if r.changed() {
                app.ledger.note_draft = Some((k, text));
            }
            if r.lost_focus() {
                app.commit_note();
            }
        });
        ui.separator();
        ui.label(RichText::new("draw").color(look::ASH));
        for (mode, name, hint) in [
            (DrawMode::Box, "box", "drag a box over a mark the finders missed (Esc stops)"),
            (DrawMode::Outline, "outline", "drag around a mark to outline it freehand (Esc stops)"),
        ] {
            let on = app.draw.mode == mode;
            if ui.add_enabled(key.is_ok(), egui::Button::selectable(on, name)).on_hover_text(hint).clicked() {
                app.draw.mode = if on { DrawMode::Off } else { mode };
                app.draw.points.clear();
            }
        }
    });
    let (line, bad) = app.ledger.status_line();
    let line = match &key {
        Err(why) if app.ledger.ledger().is_some() => format!("{line} · this image has no place in it: {why}"),
        _ => line,
    };
    ui.label(RichText::new(line).small().color(if bad { look::SIGNAL } else { look::ASH }));
}

/// A shape from what was dragged, on an image of `size` (`[width, height]`): a box with its
/// corners on pixel edges, or the outline's points; `Err` when it is too small to hold a pixel.
pub fn shape_of(mode: DrawMode, points: &[[f32; 2]], size: [usize; 2]) -> Result<Shape, String> {
    let clamp = |p: [f32; 2]| [f64::from(p[0]).clamp(0.0, size[0] as f64), f64::from(p[1]).clamp(0.0, size[1] as f64)];
    let shape = match mode {
        DrawMode::Off => return Err("not drawing".into()),
        DrawMode::Box => {
            let (Some(a), Some(b)) = (points.first(), points.last()) else { return Err("no box was dragged".into()) };
            let (a, b) = (clamp(*a), clamp(*b));
            if (a[0] - b[0]).abs() < 1.0 || (a[1] - b[1]).abs() < 1.0 {
                return Err("the box is less than a pixel wide or high: drag it larger".into());
            }
            Shape::Rect { bbox: [a[0].min(b[0]).floor(), a[1].min(b[1]).floor(), a[0].max(b[0]).ceil(), a[1].max(b[1]).ceil()] }
        }
        DrawMode::Outline => {
            let pts: Vec<[f64; 2]> = points.iter().map(|p| clamp(*p)).map(|[x, y]| [(x * 10.0).round() / 10.0, (y * 10.0).round() / 10.0]).collect();
            Shape::Polygon { points: pts }
        }
    };
    shape.check().map_err(|e| format!("{e:#}"))?;
    let probe = DrawnShape { label: String::new(), shape: shape.clone() };
    drawn_region(&probe, size[1], size[0]).map_err(|_| "the shape drawn covers no pixel's centre: draw it larger".to_string())?;
    Ok(shape)
}

/// Dragging on the slide in a drawing mode: the shape grows while the button is down and is
/// added to the ledger when it is let go.
pub(in crate::gui::panels) fn draw_drag(app: &mut Inspector, resp: &Response, place: &SlidePlace, path: &Path, size: [usize; 2], out: &mut Vec<Intent>) {
    let mode = app.draw.mode;
    if mode == DrawMode::Off {
        return;
    }
    // Every position the pointer passed this frame, not only the last: a slow frame must not
    // cut corners off an outline.
    let (mut moved, latest, origin) = resp.ctx.input(|i| {
        let moved: Vec<Pos2> = i.events.iter().filter_map(|e| if let egui::Event::PointerMoved(p) = e { Some(*p) } else { None }).collect();
        (moved, i.pointer.latest_pos(), i.pointer.press_origin())
    });
    moved.extend(latest);
    if resp.drag_started() {
        // The drag is noticed only once the pointer has moved: it began where it was pressed.
        app.draw.points = origin.or(latest).map(|p| vec![place.to_image(p)]).unwrap_or_default();
    }
    if (resp.dragged() || resp.drag_stopped()) && !app.draw.points.is_empty() {
        for p in moved {
            let at = place.to_image(p);
            match mode {
                DrawMode::Box => {
                    app.draw.points.truncate(1);
                    app.draw.points.push(at);
                }
                _ => {
                    // A point every screen pixel and a half or so keeps outlines smooth and short.
                    let last = *app.draw.points.last().expect("not empty");
                    if (at[0] - last[0]).hypot(at[1] - last[1]) * place.zoom >= 1.5 {
                        app.draw.points.push(at);
                    }
                }
            }
        }
    }
    if resp.drag_stopped() && !app.draw.points.is_empty() {
        let points = std::mem::take(&mut app.draw.points);
        match shape_of(mode, &points, size) {
            Ok(shape) => out.push(Intent::AddDrawn(path.to_path_buf(), DrawnShape { label: app.draw.label.trim().to_string(), shape }, size)),
            Err(why) => app.note(crate::gui::state::NoteKind::Warning, format!("no region added: {why}")),
        }
    }
}

/// A label on a dark ground near `at`, kept inside `clip`, moved down past the labels already
/// put in `taken` so that two regions' labels never cover each other.
pub(in crate::gui::panels) fn region_label(painter: &Painter, clip: Rect, at: Pos2, text: String, colour: Color32, taken: &mut Vec<Rect>) {
    // Wrapped to the slide's width and moved left as far as needed, so that a long label on a
    // small slide (the sweep tab open, a small window) is read whole, never cut at the edge.
    let galley = painter.layout(text, FontId::proportional(12.0), colour, (clip.width() - 10.0).max(80.0));
    let size = galley.size() + vec2(6.0, 2.0);
    let right = (clip.right() - size.x - 2.0).max(clip.left() + 2.0);
    let mut at = pos2(at.x.clamp(clip.left() + 2.0, right), (at.y + 2.0).clamp(clip.top() + 2.0, (clip.bottom() - size.y - 2.0).max(clip.top() + 2.0)));
    while let Some(r) = taken.iter().find(|r| r.intersects(Rect::from_min_size(at, size))) {
        at.y = r.bottom() + 1.0;
    }
    let bg = Rect::from_min_size(at, size);
    taken.push(bg);
    painter.rect_filled(bg, 2.0, Color32::from_black_alpha(190));
    painter.galley(at + vec2(3.0, 1.0), galley, colour);
}

/// The figures of a region as its label says them.
pub(in crate::gui::panels) fn figures_text(s: &Shown, i: usize) -> Option<String> {
    let rr = s.assessment.regions.get(i)?;
    let removal = rr.removal.as_ref().map(|x| format!(" · {}", removal_text(x, s.reading.target.index))).unwrap_or_default();
    Some(format!(" · share {} · lift {}{removal}", fmt_opt(rr.figures.mark_share, 2), fmt_opt(rr.figures.lift, 1)))
}

fn outline(points: &[[f32; 2]], place: &SlidePlace, closed: bool) -> Vec<Pos2> {
    let mut v: Vec<Pos2> = points.iter().map(|p| place.to_screen(*p)).collect();
    if closed && let Some(first) = v.first().copied() {
        v.push(first);
    }
    v
}

fn shape_points(s: &Shape) -> Vec<[f32; 2]> {
    match s {
        Shape::Rect { bbox: [x0, y0, x1, y1] } => {
            [[*x0, *y0], [*x1, *y0], [*x1, *y1], [*x0, *y1]].iter().map(|p| [p[0] as f32, p[1] as f32]).collect()
        }
        Shape::Polygon { points } => points.iter().map(|p| [p[0] as f32, p[1] as f32]).collect(),
    }
}

/// The drawn regions of the slide's image as dashed outlines in the regions' colour, each
/// labelled with its figures once the reading has them (they follow the `found` found regions
/// in the assessment), and the shape being drawn.
#[allow(clippy::too_many_arguments)]
pub(in crate::gui::panels) fn paint_drawn(painter: &Painter, clip: Rect, app: &Inspector, place: &SlidePlace, path: &Path, shown: Option<&Shown>, found: usize, taken: &mut Vec<Rect>) {
    let stroke = Stroke::new(1.6, look::REGION);
    let drawn = app.ledger.drawn_of(path);
    for (j, d) in drawn.shapes().iter().enumerate() {
        let pts = outline(&shape_points(&d.shape), place, true);
        painter.extend(egui::Shape::dashed_line(&pts, stroke, 6.0, 4.0));
        let figures = shown.and_then(|s| figures_text(s, found + j)).unwrap_or_default();
        let name = if d.label.is_empty() { "drawn region".to_string() } else { format!("drawn region ({})", d.label) };
        let top_left = pts.iter().fold(pos2(f32::MAX, f32::MAX), |a, p| pos2(a.x.min(p.x), a.y.min(p.y)));
        let bottom = pts.iter().map(|p| p.y).fold(f32::MIN, f32::max);
        region_label(painter, clip, pos2(top_left.x, bottom), format!("{name}{figures}"), look::REGION, taken);
    }
    if !app.draw.points.is_empty() {
        let live = Stroke::new(1.6, look::LILAC);
        let pts = match app.draw.mode {
            DrawMode::Box => {
                let (a, b) = (app.draw.points[0], *app.draw.points.last().expect("not empty"));
                outline(&[a, [b[0], a[1]], b, [a[0], b[1]]], place, true)
            }
            _ => outline(&app.draw.points, place, false),
        };
        painter.add(egui::Shape::line(pts, live));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_dragged_box_snaps_to_pixel_edges_inside_the_image() {
        let s = shape_of(DrawMode::Box, &[[10.4, 30.6], [2.2, -5.0]], [64, 48]).unwrap();
        assert_eq!(s, Shape::Rect { bbox: [2.0, 0.0, 11.0, 31.0] });
        assert!(shape_of(DrawMode::Box, &[[3.2, 3.2], [3.9, 9.0]], [64, 48]).is_err(), "a box less than a pixel wide");
        assert!(shape_of(DrawMode::Box, &[[70.0, 3.0], [90.0, 9.0]], [64, 48]).is_err(), "a box outside the image");
    }

    #[test]
    fn an_outline_needs_three_points_and_a_pixel() {
        assert!(shape_of(DrawMode::Outline, &[[0.0, 0.0], [5.0, 5.0]], [16, 16]).is_err());
        let s = shape_of(DrawMode::Outline, &[[1.0, 1.0], [9.0, 1.0], [9.0, 9.0], [1.0, 9.0]], [16, 16]).unwrap();
        assert!(matches!(s, Shape::Polygon { points } if points.len() == 4));
    }
}
