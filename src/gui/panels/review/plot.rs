//! Small line plots drawn with egui's painter: a framed area with ticks, solid and dashed
//! lines, reference lines, dots. Enough for the review's curves and convergence; the numbers
//! they draw come from the engine.

use egui::{Align2, Color32, FontId, Painter, Pos2, Rect, Response, Sense, Shape, Stroke, StrokeKind, pos2, vec2};

use crate::gui::look;
use crate::render::plot::tick_label;

/// Room left of and under the plot area for tick labels.
const LEFT: f32 = 34.0;
const BOTTOM: f32 = 16.0;

/// A plot area and the ranges it shows.
pub struct Plot {
    pub area: Rect,
    pub x: (f64, f64),
    pub y: (f64, f64),
    pub log_x: bool,
    pub log_y: bool,
}

/// `lo..hi` of the finite values, padded by 8 % (a flat set gets a small range around it).
pub fn range_of<'a>(vs: impl Iterator<Item = &'a f64>) -> (f64, f64) {
    let (lo, hi) = vs.filter(|v| v.is_finite()).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(*v), b.max(*v)));
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    let pad = ((hi - lo) * 0.08).max(1e-6);
    (lo - pad, hi + pad)
}

impl Plot {
    /// Allocates `size` points in `ui` (tick labels included) and frames the plot area.
    pub fn allocate(ui: &mut egui::Ui, size: egui::Vec2, x: (f64, f64), y: (f64, f64), log: (bool, bool)) -> (Plot, Painter, Response) {
        let (rect, resp) = ui.allocate_exact_size(size, Sense::hover());
        let area = Rect::from_min_max(pos2(rect.left() + LEFT, rect.top() + 4.0), pos2(rect.right() - 6.0, rect.bottom() - BOTTOM));
        let painter = ui.painter_at(rect);
        painter.rect_filled(area, 0.0, look::DEEP);
        (Plot { area, x, y, log_x: log.0, log_y: log.1 }, painter, resp)
    }

    fn frac(v: f64, (lo, hi): (f64, f64), log: bool) -> f32 {
        let (v, lo, hi) = if log { (v.max(1e-300).log10(), lo.log10(), hi.log10()) } else { (v, lo, hi) };
        if hi > lo { ((v - lo) / (hi - lo)) as f32 } else { 0.5 }
    }

    pub fn at(&self, x: f64, y: f64) -> Pos2 {
        let fx = Self::frac(x, self.x, self.log_x);
        let fy = Self::frac(y, self.y, self.log_y);
        pos2(self.area.left() + fx * self.area.width(), self.area.bottom() - fy * self.area.height())
    }

    /// Grid lines and tick labels at `xs` and `ys`, and the frame.
    pub fn frame(&self, p: &Painter, xs: &[f64], ys: &[f64]) {
        let grid = Stroke::new(1.0, Color32::from_gray(52));
        let font = FontId::proportional(10.0);
        for &x in xs {
            let at = self.at(x, self.y.0);
            p.line_segment([pos2(at.x, self.area.top()), pos2(at.x, self.area.bottom())], grid);
            p.text(pos2(at.x, self.area.bottom() + 2.0), Align2::CENTER_TOP, tick_label(x), font.clone(), look::ASH);
        }
        for &y in ys {
            let at = self.at(self.x.0, y);
            p.line_segment([pos2(self.area.left(), at.y), pos2(self.area.right(), at.y)], grid);
            p.text(pos2(self.area.left() - 3.0, at.y), Align2::RIGHT_CENTER, tick_label(y), font.clone(), look::ASH);
        }
        p.rect_stroke(self.area, 0.0, Stroke::new(1.0, Color32::from_gray(90)), StrokeKind::Inside);
    }

    /// A polyline through `pts`, solid or dashed.
    pub fn line(&self, p: &Painter, pts: &[(f64, f64)], colour: Color32, width: f32, dashed: bool) {
        let pts: Vec<Pos2> = pts.iter().filter(|(x, y)| x.is_finite() && y.is_finite()).map(|&(x, y)| self.at(x, y)).collect();
        if pts.len() < 2 {
            return;
        }
        let stroke = Stroke::new(width, colour);
        if dashed {
            p.extend(Shape::dashed_line(&pts, stroke, 5.0, 3.5));
        } else {
            p.add(Shape::line(pts, stroke));
        }
    }

    /// A horizontal dashed reference line at `y`.
    pub fn hline(&self, p: &Painter, y: f64, colour: Color32) {
        let at = self.at(self.x.0, y);
        p.extend(Shape::dashed_line(&[pos2(self.area.left(), at.y), pos2(self.area.right(), at.y)], Stroke::new(1.2, colour), 6.0, 4.0));
    }

    pub fn dots(&self, p: &Painter, pts: &[(f64, f64)], colour: Color32) {
        for &(x, y) in pts {
            p.circle_filled(self.at(x, y), 2.6, colour);
        }
    }
}

/// One entry of a legend, added to the current (horizontal) layout: a short line sample in
/// `colour` (dashed or solid) and its text.
pub fn legend_entry(ui: &mut egui::Ui, colour: Color32, dashed: bool, text: impl Into<egui::WidgetText>) {
    let (r, _) = ui.allocate_exact_size(vec2(22.0, 10.0), Sense::hover());
    let (a, b) = (pos2(r.left(), r.center().y), pos2(r.right(), r.center().y));
    let stroke = Stroke::new(2.0, colour);
    if dashed {
        ui.painter().extend(Shape::dashed_line(&[a, b], stroke, 4.0, 3.0));
    } else {
        ui.painter().line_segment([a, b], stroke);
    }
    ui.label(text);
}

/// A legend entry on a row of its own, rows packed tight.
pub fn legend_row(ui: &mut egui::Ui, colour: Color32, dashed: bool, text: impl Into<egui::WidgetText>) {
    ui.horizontal(|ui| {
        ui.set_height(14.0);
        legend_entry(ui, colour, dashed, text);
    });
}
