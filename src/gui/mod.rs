//! The desktop inspector: a model, its images, readings tinted over them, baselines side by side.
//!
//! Layout of the code (immediate mode, egui): [`state`] holds plain data (session, image list,
//! readings cache, selection, view settings); each panel in [`panels`] is a function that draws
//! that state and pushes [`app::Intent`]s; [`app::Inspector`] applies the intents, starts jobs on
//! worker threads ([`work`]) and takes their results off a channel at the start of every frame.
//! The frame never waits for the engine. Nothing here computes an attribution or a figure: maps
//! come from `spurion::methods`, region figures from `spurion::regions`, agreement and rank
//! figures from `spurion::methods::agree`; this module only turns them into pixels and text.

// The frame and the shared state sit here; the rooms a user sees each have a folder: the slide
// and its reading (`slide`), the strip's review (`review`), the sweep and the ledger (`sweep`).
pub mod app;
pub mod config;
pub mod form;
pub mod intents;
pub mod look;
pub mod panels;
pub mod recent;
mod results;
pub mod review;
pub mod slide;
pub mod state;
pub mod sweep;
pub mod work;

use std::path::{Path, PathBuf};

pub use app::Inspector;
pub use config::InspectorConfig;

/// What the inspector opens with. Empty means the bundled sample model and demo images.
#[derive(Clone, Debug, Default)]
pub struct GuiOptions {
    pub model: Option<PathBuf>,
    pub paths: Vec<PathBuf>,
    /// The ledger file (or its folder); by default the one in the first folder opened.
    pub ledger: Option<PathBuf>,
}

/// Opens the inspector window and runs until it is closed.
pub fn run(opts: GuiOptions) -> anyhow::Result<()> {
    let config = InspectorConfig::for_desktop();
    let native = eframe::NativeOptions {
        viewport: egui::ViewportBuilder::default()
            .with_title("spurion inspector")
            // Fits a 1280×800 screen; the first frame fits it to the monitor (`window_size_for`).
            .with_inner_size(window_size_for(None))
            .with_min_inner_size(MIN_WINDOW)
            .with_drag_and_drop(true),
        ..Default::default()
    };
    eframe::run_native(
        "spurion",
        native,
        Box::new(move |cc| {
            look::apply(&cc.egui_ctx);
            Ok(Box::new(Inspector::new(cc.egui_ctx.clone(), opts, config)))
        }),
    )
    .map_err(|e| {
        anyhow::anyhow!(
            "cannot open the inspector window: {e}. The inspector needs a graphical display \
             (X11 or Wayland); on a headless machine use the `spurion` command-line subcommands \
             instead, or run under Xvfb."
        )
    })
}

/// The size the inspector's window opens at (its inner size, in points) on a monitor of
/// `monitor` points: as large as [`PREFERRED_WINDOW`] where the monitor allows, else the
/// monitor less room for a title bar and a task bar, never under the window's minimum. Without
/// a known monitor, a size that fits a 1280×800 screen.
pub fn window_size_for(monitor: Option<egui::Vec2>) -> egui::Vec2 {
    let monitor = monitor.filter(|m| m.x > 0.0 && m.y > 0.0).unwrap_or(egui::vec2(1280.0, 800.0));
    let room = monitor - WINDOW_MARGIN;
    PREFERRED_WINDOW.min(room).max(MIN_WINDOW)
}

/// The window's size on a monitor with room to spare.
pub const PREFERRED_WINDOW: egui::Vec2 = egui::vec2(1600.0, 1000.0);
/// The smallest window the panels are laid out for.
pub const MIN_WINDOW: egui::Vec2 = egui::vec2(900.0, 600.0);
/// Left free around the window on the monitor: a title bar and a task bar (common practice for
/// desktop windows sized from the screen).
const WINDOW_MARGIN: egui::Vec2 = egui::vec2(40.0, 80.0);

/// What the inspector opens when started with no arguments.
#[derive(Clone, Debug, Default)]
pub struct DefaultInputs {
    pub model: Option<PathBuf>,
    pub paths: Vec<PathBuf>,
    /// The image shown first: the demo's first Hillmoor image with a finding (from its
    /// manifest.csv), so the first view shows the job the tool is for, a shortcut caught.
    pub first: Option<PathBuf>,
}

/// The bundled sample model and demo folder, looked for in the current folder first and then in
/// the crate folder the program was built from.
pub fn default_inputs() -> DefaultInputs {
    let roots: Vec<PathBuf> = [std::env::current_dir().ok(), Some(PathBuf::from(env!("CARGO_MANIFEST_DIR")))]
        .into_iter()
        .flatten()
        .collect();
    let find = |rel: &str| roots.iter().map(|r| r.join(rel)).find(|p| p.exists());
    let model = find("sample-models/shortcut.onnx");
    let demo = find("assets/demo");
    let first = demo.as_deref().and_then(first_marked_positive);
    DefaultInputs { model, paths: demo.into_iter().collect(), first }
}

/// The first manifest row of `demo` from Hillmoor with a finding, if the manifest reads.
pub fn first_marked_positive(demo: &Path) -> Option<PathBuf> {
    let rows = crate::demo::read_manifest(&demo.join("manifest.csv")).ok()?;
    rows.iter()
        .find(|r| r.site == crate::demo::Site::Hillmoor && r.finding)
        .map(|r| demo.join(&r.file))
        .filter(|p| p.is_file())
}

/// A time left as people say it: "40 s", "7 min", "1 h 20 min".
pub fn duration_text(secs: f64) -> String {
    let s = secs.max(0.0).round() as u64;
    match s {
        0..=89 => format!("{s} s"),
        90..=3599 => format!("{} min", (s + 30) / 60),
        _ => {
            let m = (s + 30) / 60;
            format!("{} h {} min", m / 60, m % 60)
        }
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn times_left_read_as_people_say_them() {
        assert_eq!(super::duration_text(42.4), "42 s");
        assert_eq!(super::duration_text(1094.0), "18 min");
        assert_eq!(super::duration_text(3599.0), "60 min");
        assert_eq!(super::duration_text(4830.0), "1 h 21 min");
        assert_eq!(super::duration_text(7199.0), "2 h 0 min");
    }
}

/// A path shortened for labels: the file name, or the whole path if it has none.
pub(crate) fn short_name(p: &Path) -> String {
    p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| p.display().to_string())
}
