//! The inspector's look: a dark slate ground so the map colours (amber for supporting, teal for
//! opposing, from `spurion::render`) read clearly; a lilac accent, far from both, for what is
//! selected or running; magenta region outlines; one crimson reserved for the suspect flag.

use egui::{Color32, CornerRadius, Stroke, Visuals};

/// Ground of side panels.
pub const SLATE: Color32 = Color32::from_rgb(0x23, 0x2a, 0x2c);
/// Ground behind the slide (darker, so the image edge is visible).
pub const DEEP: Color32 = Color32::from_rgb(0x14, 0x17, 0x1b);
/// Text.
pub const CHALK: Color32 = Color32::from_rgb(0xdc, 0xe0, 0xe4);
/// Secondary text.
pub const ASH: Color32 = Color32::from_rgb(0x93, 0x9b, 0xa5);
/// Selection and progress.
pub const LILAC: Color32 = Color32::from_rgb(0xa9, 0x98, 0xe6);
/// The suspect flag, and nothing else.
pub const SIGNAL: Color32 = Color32::from_rgb(0xd9, 0x2b, 0x4b);
/// "Not suspect" and finished states.
pub const MOSS: Color32 = Color32::from_rgb(0x7f, 0xa8, 0x6a);
/// Region outlines (burned-in marks, border bands): a colour outside the map's ramps.
pub const REGION: Color32 = Color32::from_rgb(0xf2, 0x5f, 0xd0);

/// Adds the bundled DejaVu Sans behind egui's own font, so that signs the inspector writes
/// (σ, ρ, ×, →, −, ′) always have a glyph. The inspector calls this for every context it draws
/// into, headless tests included; a context keeps a note that it has the font, so it is added
/// once.
pub fn fonts(ctx: &egui::Context) {
    use egui::epaint::text::{FontData, FontInsert, FontPriority, InsertFontFamily};
    let id = egui::Id::unique("spurion: DejaVu Sans added");
    if ctx.data(|d| d.get_temp::<bool>(id)).unwrap_or(false) {
        return;
    }
    ctx.data_mut(|d| d.insert_temp(id, true));
    let families = [egui::FontFamily::Proportional, egui::FontFamily::Monospace]
        .into_iter()
        .map(|family| InsertFontFamily { family, priority: FontPriority::Lowest })
        .collect();
    ctx.add_font(FontInsert {
        name: "DejaVu Sans".into(),
        data: FontData::from_static(include_bytes!("../../assets/fonts/DejaVuSans.ttf")),
        families,
    });
}

pub fn apply(ctx: &egui::Context) {
    let mut v = Visuals::dark();
    v.panel_fill = SLATE;
    v.window_fill = SLATE;
    v.extreme_bg_color = DEEP;
    v.faint_bg_color = Color32::from_rgb(0x2a, 0x30, 0x38);
    v.override_text_color = Some(CHALK);
    v.hyperlink_color = LILAC;
    v.selection.bg_fill = Color32::from_rgb(0x4c, 0x43, 0x78);
    v.selection.stroke = Stroke::new(1.0, CHALK);
    v.warn_fg_color = LILAC;
    v.error_fg_color = SIGNAL;
    let r = CornerRadius::same(3);
    for w in [&mut v.widgets.inactive, &mut v.widgets.hovered, &mut v.widgets.active, &mut v.widgets.open] {
        w.corner_radius = r;
    }
    v.widgets.inactive.weak_bg_fill = Color32::from_rgb(0x31, 0x38, 0x41);
    v.widgets.inactive.bg_fill = Color32::from_rgb(0x31, 0x38, 0x41);
    v.widgets.hovered.weak_bg_fill = Color32::from_rgb(0x3d, 0x45, 0x50);
    v.widgets.hovered.bg_stroke = Stroke::new(1.0, LILAC);
    v.widgets.active.weak_bg_fill = Color32::from_rgb(0x3e, 0x38, 0x5c);
    v.widgets.active.bg_stroke = Stroke::new(1.0, LILAC);
    v.window_corner_radius = CornerRadius::same(4);
    ctx.set_visuals(v);
    ctx.global_style_mut(|s| {
        s.spacing.item_spacing = egui::vec2(6.0, 5.0);
        s.spacing.button_padding = egui::vec2(7.0, 3.0);
    });
}
